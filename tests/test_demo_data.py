"""Checks of the invented demo survey, its generator and its truth file.

The demo is invented data: these tests check that the shipped table is what
the generator makes, that it has the shape the scenario promises, and that the
truth file really describes the table (refitting the true model with
statsmodels recovers the stated coefficients).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from pathfinder import examples as demo

generate = demo.generator()

FAMILIES = {
    "binomial": sm.families.Binomial(),
    "poisson": sm.families.Poisson(),
    "gaussian": sm.families.Gaussian(),
}
NOT_COVARIATES = (set(demo.DEMO_RESPONSES.values()) | {demo.EFFORT, demo.GROUPS}
                  | set(demo.COORDS) | set(demo.SITE_LABELS))


@pytest.fixture(scope="module")
def shipped() -> pd.DataFrame:
    return demo.load_demo()


@pytest.fixture(scope="module")
def truth() -> dict:
    return demo.load_truth()


@pytest.fixture(scope="module")
def generated() -> tuple[pd.DataFrame, dict]:
    return generate.make_survey(generate.DEFAULT_SEED)


def covariate_columns(frame: pd.DataFrame) -> list[str]:
    return [c for c in frame.columns if c not in NOT_COVARIATES]


def true_design(frame: pd.DataFrame) -> pd.DataFrame:
    """Intercept and the true terms, built from the columns as the truth file states."""
    return sm.add_constant(generate.term_columns(frame), has_constant="add")


def refit(frame: pd.DataFrame, truth: dict, response: str, *, with_field: bool = True):
    """Fit the true model with statsmodels GLM; the residual field and effort as offsets."""
    entry = truth["responses"][response]
    rows = frame.dropna(subset=["soil_moisture_pct"])
    offset = np.zeros(len(rows))
    if with_field:
        field = generate.residual_field(truth["residual_field"], rows["x_km"], rows["y_km"])
        offset += entry["residual_field_scale"] * field
    if entry["offset"] != "none":
        offset += np.log(rows[demo.EFFORT].to_numpy(float))
    model = sm.GLM(rows[response], true_design(rows), family=FAMILIES[entry["family"]], offset=offset)
    return model.fit(), rows


def stated_coefficients(truth: dict, response: str) -> np.ndarray:
    coef = truth["responses"][response]["coefficients"]
    return np.array([coef["intercept"]] + [coef[term] for term in truth["terms"]])


# --------------------------------------------------------------------------
# The generator and the shipped files agree
# --------------------------------------------------------------------------

def test_generator_is_deterministic_and_seed_matters():
    first, truth_a = generate.make_survey(7)
    second, truth_b = generate.make_survey(7)
    pd.testing.assert_frame_equal(first, second)
    assert truth_a == truth_b
    other, _ = generate.make_survey(8)
    assert len(other) != len(first) or not np.allclose(other["elevation_m"], first["elevation_m"])


def test_make_survey_writes_no_files(tmp_path, monkeypatch):
    package_dir = Path(generate.__file__).resolve().parent
    before = {p.name: p.stat().st_mtime_ns for p in package_dir.iterdir()}
    monkeypatch.chdir(tmp_path)
    generate.make_survey(generate.DEFAULT_SEED)
    assert list(tmp_path.iterdir()) == []
    after = {p.name: p.stat().st_mtime_ns for p in package_dir.iterdir()}
    assert after == before


def test_shipped_csv_is_the_generator_output(shipped, generated):
    # Float formatting in the CSV may differ in the last digit; compare with tolerance.
    pd.testing.assert_frame_equal(shipped, generated[0], check_exact=False, rtol=1e-9, atol=1e-9,
                                  check_dtype=False)


def test_shipped_truth_is_the_generator_output(truth, generated):
    assert truth == json.loads(json.dumps(generated[1]))
    assert truth["seed"] == generate.DEFAULT_SEED


def test_write_files_reproduces_the_shipped_files(tmp_path, shipped, truth):
    csv_path, json_path = generate.write_files(tmp_path)
    pd.testing.assert_frame_equal(pd.read_csv(csv_path), shipped, check_exact=False, rtol=1e-9, atol=1e-9)
    assert json.loads(json_path.read_text(encoding="utf-8")) == truth


def test_file_names_and_constants_agree(shipped, truth):
    assert (demo.DEMO_CSV, demo.TRUTH_JSON) == (generate.DEMO_CSV, generate.TRUTH_JSON)
    named = (list(demo.DEMO_RESPONSES.values()) + [demo.EFFORT, demo.GROUPS, demo.CATEGORICAL]
             + list(demo.COORDS) + list(demo.SITE_LABELS))
    assert set(named) <= set(shipped.columns)
    assert set(truth["true_predictors"]) <= set(shipped.columns)
    for family, column in demo.DEMO_RESPONSES.items():
        assert truth["responses"][column]["family"] == family


def test_shipped_csv_is_small():
    with demo.table_file() as table:
        size = table.stat().st_size
    assert size < 1_000_000


# --------------------------------------------------------------------------
# The table has the promised shape
# --------------------------------------------------------------------------

def test_sites_groups_and_coordinates(shipped):
    assert 500 <= len(shipped) <= 800
    assert shipped["site"].is_unique
    x, y = (shipped[c] for c in demo.COORDS)
    assert x.between(0, 200).all() and y.between(0, 150).all()
    # every survey centre lies wholly in one district, so grouped folds keep centres together
    assert (shipped.groupby("survey_centre")[demo.GROUPS].nunique() == 1).all()
    assert 4 <= shipped[demo.GROUPS].nunique() <= 10
    # sites are clustered: the typical nearest neighbour is far closer than on a even spread
    xy = shipped[list(demo.COORDS)].to_numpy()
    dist = np.sqrt(((xy[:, None, :] - xy[None, :, :]) ** 2).sum(-1))
    np.fill_diagonal(dist, np.inf)
    even_spacing = np.sqrt(200 * 150 / len(shipped))
    assert np.median(dist.min(axis=1)) < 0.5 * even_spacing


def test_docstring_counts_match_the_table(shipped):
    assert f"{len(shipped)} sites" in demo.scenario.__doc__
    assert f"{shipped['survey_centre'].nunique()} survey centres" in demo.scenario.__doc__
    assert f"{shipped[demo.CATEGORICAL].nunique()} levels" in demo.scenario.__doc__.replace("five", "5")


def test_covariates_and_categorical(shipped):
    covariates = covariate_columns(shipped)
    numeric = [c for c in covariates if pd.api.types.is_numeric_dtype(shipped[c])]
    text = [c for c in covariates if c not in numeric]
    assert 30 <= len(covariates) <= 40
    assert text == [demo.CATEGORICAL]
    levels = shipped[demo.CATEGORICAL]
    assert 4 <= levels.nunique() <= 6 and levels.map(type).eq(str).all()


@pytest.mark.parametrize("column, low, high", [
    ("elevation_m", 0, 1300),
    ("july_temp_c", 8, 22),
    ("january_temp_c", -6, 9),
    ("annual_rain_mm", 400, 3000),
    ("soil_ph", 3.5, 8.5),
    ("soil_phosphate_mg_l", 1, 200),
    ("grazing_livestock_per_ha", 0, 3),
    ("greenness_ndvi", 0, 1),
    ("northness", -1, 1),
])
def test_covariate_ranges_are_realistic(shipped, column, low, high):
    values = shipped[column].dropna()
    assert values.between(low, high).all()
    assert values.std() > 0


def test_percentages_and_distances_are_in_range(shipped):
    for column in [c for c in shipped.columns if c.endswith("_pct")]:
        assert shipped[column].dropna().between(0, 100).all(), column
    for column in [c for c in shipped.columns if c.startswith("distance_to_")]:
        assert (shipped[column] >= 0).all(), column


def test_responses_and_effort(shipped):
    found = shipped[demo.DEMO_RESPONSES["binomial"]]
    clumps = shipped[demo.DEMO_RESPONSES["poisson"]]
    growth = shipped[demo.DEMO_RESPONSES["gaussian"]]
    assert set(found.unique()) == {0, 1}
    assert 0.3 <= found.mean() <= 0.5
    assert pd.api.types.is_integer_dtype(clumps) and (clumps >= 0).all()
    assert 0.05 < (clumps == 0).mean() < 0.6
    assert growth.nunique() > len(shipped) // 2
    effort = shipped[demo.EFFORT]
    assert (effort > 0).all() and effort.nunique() >= 5 and effort.max() >= 3 * effort.min()


def test_a_few_missing_values_in_one_or_two_covariates(shipped, truth):
    missing = shipped.isna().sum()
    missing = missing[missing > 0]
    assert 1 <= len(missing) <= 2
    assert 3 <= missing.sum() <= 10
    assert set(missing.index) == set(truth["missing_values"]["columns"])
    gaps = shipped.loc[shipped[missing.index].isna().any(axis=1), "site"]
    assert sorted(gaps) == sorted(truth["missing_values"]["sites"])


def test_at_least_three_strongly_correlated_pairs(shipped):
    numeric = shipped[covariate_columns(shipped)].select_dtypes("number")
    r = numeric.corr(method="pearson").to_numpy()
    upper = np.abs(r[np.triu_indices_from(r, k=1)])
    assert (upper > 0.8).sum() >= 3
    assert upper.max() < 0.999  # strongly related, never exact copies
    assert r[numeric.columns.get_loc("elevation_m"), numeric.columns.get_loc("july_temp_c")] < -0.8


# --------------------------------------------------------------------------
# The truth file describes the table
# --------------------------------------------------------------------------

def test_truth_file_states_the_model(truth):
    assert 5 <= len(truth["true_predictors"]) <= 8
    assert any("^2" in term for term in truth["terms"])
    assert any("*" in term for term in truth["terms"])
    assert any("==" in term for term in truth["terms"])
    for entry in truth["responses"].values():
        assert set(entry["coefficients"]) == {"intercept", *truth["terms"]}
        assert entry["link"] in {"logit", "log", "identity"}


@pytest.mark.parametrize("response", ["bellmoss_found", "bellmoss_clumps", "turf_growth_mm"])
def test_refitting_the_true_model_recovers_the_coefficients(shipped, truth, response):
    # Reference library: statsmodels GLM (statsmodels.api.GLM, maximum likelihood by IRLS)
    # with the stated family and link, the stated residual field as an offset and, for
    # the count, log(minutes_searched) as the offset. Each estimate must lie within
    # 3 standard errors of the stated coefficient.
    fit, _ = refit(shipped, truth, response)
    z = (fit.params.to_numpy() - stated_coefficients(truth, response)) / fit.bse.to_numpy()
    assert np.all(np.abs(z) < 3), dict(zip(fit.params.index, np.round(z, 2)))


@pytest.mark.parametrize("response", ["bellmoss_found", "bellmoss_clumps", "turf_growth_mm"])
def test_true_effects_are_large_enough_to_find(shipped, truth, response):
    # Stated coefficient over its standard error from the statsmodels GLM refit (a Wald
    # ratio): a demo whose true effects sat within noise of zero could not show
    # selection working, so every true term must stand at least 2 standard errors clear.
    fit, _ = refit(shipped, truth, response)
    ratio = stated_coefficients(truth, response)[1:] / fit.bse.to_numpy()[1:]
    assert np.all(np.abs(ratio) > 2), dict(zip(truth["terms"], np.round(ratio, 1)))


@pytest.mark.parametrize("seed", [11, 12])
@pytest.mark.parametrize("response", ["bellmoss_found", "bellmoss_clumps", "turf_growth_mm"])
def test_recovery_is_not_a_lucky_seed(seed, response):
    # Reference library: statsmodels GLM as above, on freshly generated surveys; the
    # wider band (4 standard errors) allows for 10 coefficients at each of 6 fits.
    frame, truth = generate.make_survey(seed)
    fit, _ = refit(frame, truth, response)
    z = (fit.params.to_numpy() - stated_coefficients(truth, response)) / fit.bse.to_numpy()
    assert np.all(np.abs(z) < 4), dict(zip(fit.params.index, np.round(z, 2)))


def test_count_mean_is_proportional_to_search_time(shipped, truth):
    # Reference library: statsmodels GLM, Poisson. With log(minutes_searched) as a free
    # term instead of an offset its coefficient must be 1 (within 3 standard errors),
    # which is what "mean proportional to effort" means on the log scale.
    response = demo.DEMO_RESPONSES["poisson"]
    rows = shipped.dropna(subset=["soil_moisture_pct"])
    field = generate.residual_field(truth["residual_field"], rows["x_km"], rows["y_km"])
    design = true_design(rows).assign(log_minutes=np.log(rows[demo.EFFORT].to_numpy(float)))
    fit = sm.GLM(rows[response], design, family=sm.families.Poisson(),
                 offset=truth["responses"][response]["residual_field_scale"] * field).fit()
    assert abs(fit.params["log_minutes"] - 1.0) < 3 * fit.bse["log_minutes"]
    assert fit.bse["log_minutes"] < 0.25  # the data pin it down, not a vague estimate


def test_growth_noise_has_the_stated_spread(shipped, truth):
    # Direct check, no fitting: the growth minus its stated mean is the noise.
    response = demo.DEMO_RESPONSES["gaussian"]
    entry = truth["responses"][response]
    rows = shipped.dropna(subset=["soil_moisture_pct"])
    mean = (true_design(rows).to_numpy() @ stated_coefficients(truth, response)
            + entry["residual_field_scale"]
            * generate.residual_field(truth["residual_field"], rows["x_km"], rows["y_km"]))
    noise = rows[response].to_numpy() - mean
    assert abs(noise.mean()) < 3 * entry["noise_sd"] / np.sqrt(len(rows))
    assert noise.std() == pytest.approx(entry["noise_sd"], rel=0.1)


def test_residual_field_is_smooth_and_makes_neighbours_alike(shipped, truth):
    # A neighbour-pair correlation of residuals (the first bin of a correlogram, common
    # practice): without the field, residuals at sites under 3 km apart agree; with the
    # stated field as an offset, that agreement disappears.
    gx, gy = np.meshgrid(np.linspace(0, 200, 41), np.linspace(0, 150, 31))
    on_grid = generate.residual_field(truth["residual_field"], gx.ravel(), gy.ravel())
    assert abs(on_grid.mean()) < 0.1 and 0.8 < on_grid.std() < 1.2

    rows = shipped.dropna(subset=["soil_moisture_pct"])
    xy = rows[list(demo.COORDS)].to_numpy()
    dist = np.sqrt(((xy[:, None, :] - xy[None, :, :]) ** 2).sum(-1))
    i, j = np.nonzero(np.triu(dist < 3.0, k=1))
    for response in (demo.DEMO_RESPONSES["gaussian"], demo.DEMO_RESPONSES["poisson"]):
        without, _ = refit(shipped, truth, response, with_field=False)
        with_field, _ = refit(shipped, truth, response, with_field=True)
        r_without = np.corrcoef(without.resid_pearson.to_numpy()[i], without.resid_pearson.to_numpy()[j])[0, 1]
        r_with = np.corrcoef(with_field.resid_pearson.to_numpy()[i], with_field.resid_pearson.to_numpy()[j])[0, 1]
        assert r_without > 0.15, response
        assert abs(r_with) < 0.1, response
