"""Tests of the model file and predictions at new sites (pathfinder.predict).

The surveys here are invented (seeded) and serve round trips: a model fitted
with pathfinder, written to a model file and read back must reproduce the
fitted values of the path it came from.
"""

import hashlib
import json

import numpy as np
import pandas as pd
import pytest

import pathfinder
from pathfinder.data.design import build_design
from pathfinder.data.intake import prepare_survey
from pathfinder.errors import InputError
from pathfinder.outputs.model_file import load_model_document, model_document, save_model
from pathfinder.predict import Model, load_model, predict_table, prediction_summary

BEDROCK = ("chalk", "granite", "clay")


def invented_survey(seed=5, n=180):
    """Invented sites: climate, soil pH, a bedrock class, survey effort and a noise column."""
    rng = np.random.default_rng(seed)
    temp = rng.normal(11.0, 2.5, n)
    rain = rng.uniform(600.0, 1400.0, n)
    soil_ph = rng.uniform(4.0, 8.0, n)
    bedrock = rng.choice(BEDROCK, n, p=[0.45, 0.35, 0.20])
    wind = rng.normal(0.0, 1.0, n)
    minutes = rng.uniform(10.0, 60.0, n)
    signal = (0.35 * (temp - 11) - 0.12 * (temp - 11) ** 2 + 0.002 * (rain - 1000)
              + 0.0015 * (temp - 11) * (rain - 1000) + 0.3 * (soil_ph - 6)
              + np.select([bedrock == "granite", bedrock == "clay"], [-0.8, 0.6], 0.0))
    present = rng.uniform(size=n) < 1 / (1 + np.exp(-(0.3 + signal)))
    return pd.DataFrame({
        "site": [f"S{i:03d}" for i in range(n)],
        "temp": temp, "rain": rain, "soil_ph": soil_ph, "bedrock": bedrock, "wind": wind,
        "minutes": minutes,
        "present": np.where(present, "yes", "no"),
        "birds": rng.poisson(np.exp(-2.0 + 0.5 * signal) * minutes),
        "cover": 20 + 4 * signal + rng.normal(0, 2, n),
        "weight": rng.uniform(0.5, 2.0, n),
    })


SETTINGS = {
    "binomial": dict(response="present", family="binomial"),
    "poisson": dict(response="birds", family="poisson", effort="minutes"),
    "gaussian": dict(response="cover", family="gaussian", weights="weight"),
}


class Chosen:
    """A survey, its design, a fitted path and one step of it written as a model document."""

    def __init__(self, frame, family, *, step=None):
        roles = SETTINGS[family]
        others = [c for c in ("present", "birds", "cover", "minutes", "weight")
                  if c not in roles.values()]
        self.survey = prepare_survey(frame, exclude=["site"] + others, **roles)
        self.design = build_design(self.survey.frame, self.survey.predictors,
                                   self.survey.categorical, squares=["temp"],
                                   interactions=[("temp", "rain")], weights=self.survey.weights)
        self.fit = pathfinder.fit_path(self.design.X, self.survey.response, family=family,
                                       offset=self.survey.offset, weights=self.survey.weights)
        self.step = self.fit.coef.shape[0] - 1 if step is None else step
        self.penalty = self.fit.penalties[self.step]
        self.doc = model_document(
            family=self.survey.family, response_name=self.survey.response_name,
            response_labels=self.survey.response_labels, terms=self.design.terms,
            reference_levels=self.design.reference_levels,
            intercept=self.fit.intercept[self.step], coef=self.fit.coef[self.step],
            offset_rule=self.survey.offset_rule, training_frame=self.survey.frame,
            training_X=self.design.X, weights=self.survey.weights,
            pick={"method": "lasso", "rule": "min", "mix": 1.0, "penalty": self.penalty},
            package_version=pathfinder.__version__)

    def fitted(self, kind="response"):
        return self.fit.predict(self.design.X, penalty=self.penalty, kind=kind,
                                offset=self.survey.offset)


@pytest.fixture(scope="module")
def frame():
    return invented_survey()


@pytest.fixture(scope="module")
def poisson(frame):
    return Chosen(frame, "poisson")


@pytest.fixture
def saved(poisson, tmp_path):
    path = tmp_path / "model.json"
    save_model(poisson.doc, path)
    return path


# ---------------------------------------------------------------------------
# Round trip: document -> file -> Model -> the fitted values
# ---------------------------------------------------------------------------


@pytest.mark.parametrize("family", ["binomial", "poisson", "gaussian"])
def test_predictions_on_the_training_rows_are_the_fitted_values(frame, family, tmp_path):
    chosen = Chosen(frame, family)
    names = chosen.design.names
    coef = dict(zip(names, chosen.fit.coef[chosen.step]))
    # the model really uses a factor level, the square and the interaction
    assert coef["temp^2"] != 0 and coef["temp:rain"] != 0
    assert any(coef[name] != 0 for name in names if name.startswith("bedrock="))

    path = tmp_path / "model.json"
    save_model(chosen.doc, path)
    model = load_model(path)
    training = frame.iloc[chosen.survey.rows]
    result = model.predict(training, kind="both")
    assert list(result.index) == list(training.index)
    np.testing.assert_allclose(result["prediction"], chosen.fitted(), rtol=0, atol=1e-10)
    np.testing.assert_allclose(result["link"], chosen.fitted("link"), rtol=0, atol=1e-10)
    assert (result["reason"] == "").all()
    # every training site lies inside the training ranges and is not novel
    assert (result["n_outside_range"] == 0).all()
    assert (result["mess"] >= 0).all() and not result["novel"].any()

    only_link = model.predict(training, kind="link")
    assert "prediction" not in only_link and "link" in only_link
    assert "link" not in model.predict(training)


def test_the_document_records_terms_training_summaries_and_the_pick(poisson):
    doc = poisson.doc
    assert doc["schema"] == "pathfinder-model" and doc["schema_version"].startswith("1.")
    assert doc["family"] == "poisson" and doc["link"] == "log"
    assert doc["offset"] == {"kind": "effort", "column": "minutes", "transform": "log"}
    assert [t["name"] for t in doc["terms"]] == poisson.design.names
    b = poisson.fit.coef[poisson.step]
    assert [t["coefficient"] for t in doc["terms"]] == [float(v) for v in b]
    assert [t["in_model"] for t in doc["terms"]] == [bool(v != 0) for v in b]
    assert doc["intercept"] == float(poisson.fit.intercept[poisson.step])
    square = next(t for t in doc["terms"] if t["name"] == "temp^2")
    assert square["kind"] == "square" and square["sources"] == ["temp"]
    assert square["centers"] == [pytest.approx(poisson.survey.frame["temp"].mean(), abs=1e-12)]
    # unweighted: the percentiles are numpy's linear percentiles of the training values
    temp = poisson.survey.frame["temp"].to_numpy()
    summary = doc["training"]["numeric"]["temp"]
    np.testing.assert_allclose(summary["percentiles"], np.percentile(temp, np.arange(101)),
                               rtol=0, atol=0)
    assert summary["min"] == temp.min() and summary["max"] == temp.max()
    assert doc["training"]["categorical"]["bedrock"]["levels"] == sorted(BEDROCK)
    assert doc["training"]["rows"] == poisson.survey.n and doc["training"]["weighted"] is False
    assert doc["pick"] == {"method": "lasso", "rule": "min", "mix": 1.0,
                           "penalty": float(poisson.penalty), "relaxation": None}
    json.dumps(doc, allow_nan=False)  # plain JSON, no NaN


def test_binomial_labels_and_weighted_summaries_are_recorded(frame):
    binomial = Chosen(frame, "binomial")
    assert binomial.doc["response"]["labels"] == {"0": "no", "1": "yes"}
    assert "'yes'" in binomial.doc["response"]["prediction"]
    gaussian = Chosen(frame, "gaussian")
    assert gaussian.doc["training"]["weighted"] is True
    plain = np.percentile(gaussian.survey.frame["temp"], 50)
    assert gaussian.doc["training"]["numeric"]["temp"]["percentiles"][50] != plain


def test_columns_of_terms_left_out_are_not_needed(frame, tmp_path):
    # an early step of the path, where the noise column 'wind' is not in the model
    full = Chosen(frame, "poisson")
    names = full.design.names
    step = next(k for k in range(len(full.fit.penalties))
                if full.fit.coef[k, names.index("wind")] == 0
                and full.fit.coef[k, names.index("temp")] != 0)
    chosen = Chosen(frame, "poisson", step=step)
    model = Model(chosen.doc)
    assert "wind" not in model.required_columns
    assert "wind" not in chosen.doc["training"]["numeric"]
    training = frame.iloc[chosen.survey.rows].drop(columns=["wind"])
    result = model.predict(training)
    np.testing.assert_allclose(result["prediction"], chosen.fitted(), rtol=0, atol=1e-10)


# ---------------------------------------------------------------------------
# Extrapolation flags and rows that cannot be predicted
# ---------------------------------------------------------------------------


def test_a_site_far_outside_the_training_range_is_flagged(poisson, saved, frame):
    model = load_model(saved)
    new = frame.iloc[:3].copy()
    span = frame["rain"].max() - frame["rain"].min()
    new.loc[new.index[1], "rain"] = frame["rain"].max() + 2 * span
    result = model.predict(new)
    far = result.iloc[1]
    assert far["n_outside_range"] >= 1
    assert far["most_extreme_predictor"] == "rain"
    assert far["distance_outside"] == pytest.approx(2.0)
    assert far["mess"] < 0
    assert result["novel"].tolist() == [False, True, False]
    assert far["most_dissimilar_predictor"] == "rain"
    assert np.isfinite(far["prediction"]) and far["reason"] == ""  # predicted, but flagged
    assert result.iloc[[0, 2]]["n_outside_range"].eq(0).all()


def test_a_row_with_a_missing_covariate_stays_in_place_with_a_reason(saved, frame):
    model = load_model(saved)
    new = frame.iloc[:5].copy()
    new.index = [f"site {i}" for i in range(5)]
    new.loc["site 2", "temp"] = np.nan
    result = model.predict(new)
    assert list(result.index) == list(new.index)
    assert np.isnan(result.loc["site 2", "prediction"])
    assert result.loc["site 2", "reason"] == "missing value in temp"
    assert pd.isna(result.loc["site 2", "mess"]) and pd.isna(result.loc["site 2", "novel"])
    others = result.drop(index="site 2")
    assert others["prediction"].notna().all() and (others["reason"] == "").all()
    # the other rows are predicted as if the gap were not there
    alone = model.predict(frame.iloc[:5])
    np.testing.assert_array_equal(others["prediction"].to_numpy(),
                                  alone["prediction"].to_numpy()[[0, 1, 3, 4]])


def test_an_unknown_factor_level_or_text_in_a_number_column_gives_a_reason(saved, frame):
    model = load_model(saved)
    new = frame.iloc[:4].copy().astype({"temp": object})
    new.loc[new.index[0], "bedrock"] = "peat"
    new.loc[new.index[1], "temp"] = "warm"
    new.loc[new.index[3], "bedrock"] = None
    result = model.predict(new)
    assert result["reason"].tolist() == [
        "unknown level 'peat' of bedrock", "temp is not a number ('warm')", "",
        "missing value in bedrock"]
    assert result["prediction"].isna().tolist() == [True, True, False, True]


# ---------------------------------------------------------------------------
# Survey effort
# ---------------------------------------------------------------------------


def test_doubling_effort_doubles_the_expected_count(saved, frame):
    # log(effort) is the offset of a log-link model, so the mean is proportional to effort
    model = load_model(saved)
    new = frame.iloc[:10].copy()
    once = model.predict(new)["prediction"].to_numpy()
    new["minutes"] = 2 * new["minutes"]
    twice = model.predict(new)["prediction"].to_numpy()
    np.testing.assert_allclose(twice, 2 * once, rtol=1e-12)


def test_without_an_effort_column_predictions_are_per_unit_effort(saved, frame):
    model = load_model(saved)
    new = frame.iloc[:10].copy()
    per_visit = model.predict(new)
    per_unit = model.predict(new.drop(columns=["minutes"]))
    np.testing.assert_allclose(per_unit["prediction"],
                               per_visit["prediction"] / new["minutes"], rtol=1e-12)
    notes = per_unit.attrs["notes"]
    assert len(notes) == 1 and "per unit of effort" in notes[0] and "minutes" in notes[0]
    assert per_visit.attrs["notes"] == ()


def test_missing_zero_or_negative_effort_is_a_reason(saved, frame):
    model = load_model(saved)
    new = frame.iloc[:4].copy()
    new["minutes"] = [np.nan, 0.0, -3.0, 20.0]
    result = model.predict(new)
    assert result["reason"].tolist() == [
        "missing effort 'minutes'", "effort 'minutes' is 0; it must be positive",
        "effort 'minutes' is -3; it must be positive", ""]
    assert result["prediction"].isna().tolist() == [True, True, True, False]


# ---------------------------------------------------------------------------
# Checking the model file
# ---------------------------------------------------------------------------


def rewrite(saved, tmp_path, change):
    doc = json.loads(saved.read_text(encoding="utf-8"))
    change(doc)
    path = tmp_path / "edited.json"
    path.write_text(json.dumps(doc), encoding="utf-8")
    return path


def refusal(path) -> str:
    with pytest.raises(InputError) as caught:
        load_model(path)
    message = str(caught.value)
    assert "\n" not in message and "edited.json" in message
    return message


def test_a_file_of_another_kind_is_refused(saved, tmp_path):
    message = refusal(rewrite(saved, tmp_path, lambda d: d.update(schema="some-other-model")))
    assert "'schema'" in message and "some-other-model" in message


def test_a_future_major_version_is_refused_with_the_version_this_reads(saved, tmp_path):
    message = refusal(rewrite(saved, tmp_path, lambda d: d.update(schema_version="2.0")))
    assert "2.0" in message and "version 1.x" in message and "update pathfinder" in message


def test_a_newer_minor_version_with_extra_keys_is_read(saved, tmp_path, poisson, frame):
    path = rewrite(saved, tmp_path, lambda d: d.update(schema_version="1.7", colour="green"))
    result = load_model(path).predict(frame.iloc[poisson.survey.rows])
    np.testing.assert_allclose(result["prediction"], poisson.fitted(), rtol=0, atol=1e-10)


@pytest.mark.parametrize("change, key", [
    (lambda d: d.pop("intercept"), "'intercept'"),
    (lambda d: d["terms"][1].update(coefficient="big"), "'terms[1].coefficient'"),
    (lambda d: d["terms"][0].update(kind="cubic"), "'terms[0].kind'"),
    (lambda d: d.update(family="gamma"), "'family'"),
    (lambda d: d["training"]["numeric"]["temp"]["percentiles"].pop(),
     "'training.numeric.temp.percentiles'"),
    (lambda d: d["training"]["numeric"].pop("rain"), "'training.numeric.rain'"),
    (lambda d: d.update(offset={"kind": "effort", "column": "minutes", "transform": "sqrt"}),
     "'offset.transform'"),
])
def test_a_damaged_file_names_the_key(saved, tmp_path, change, key):
    assert key in refusal(rewrite(saved, tmp_path, change))


def test_a_file_that_is_not_json_is_refused(tmp_path):
    path = tmp_path / "edited.json"
    path.write_text("{ not json", encoding="utf-8")
    assert "not valid JSON" in refusal(path)


def test_a_missing_model_file_is_refused(tmp_path):
    with pytest.raises(InputError, match="model file not found"):
        load_model_document(tmp_path / "nothing.json")


# ---------------------------------------------------------------------------
# predict_table: files in, file out
# ---------------------------------------------------------------------------


def sha256(path):
    return hashlib.sha256(path.read_bytes()).hexdigest()


def test_predict_table_writes_input_columns_then_predictions(saved, frame, tmp_path):
    data = tmp_path / "new_sites.csv"
    frame.iloc[:20].to_csv(data, index=False)
    before = sha256(data)
    out = tmp_path / "predictions.csv"
    result = predict_table(saved, data, out)
    assert sha256(data) == before  # the input is never modified
    written = pd.read_csv(out)
    assert list(written.columns[: frame.shape[1]]) == list(frame.columns)
    assert list(written.columns[frame.shape[1]:]) == ["prediction", "n_outside_range",
                                                      "most_extreme_predictor", "distance_outside",
                                                      "mess", "most_dissimilar_predictor", "novel",
                                                      "reason"]
    assert written["site"].tolist() == frame["site"].iloc[:20].tolist()
    np.testing.assert_allclose(written["prediction"], result["prediction"], rtol=1e-12)
    expected = load_model(saved).predict(frame.iloc[:20])["prediction"].to_numpy()
    np.testing.assert_allclose(result["prediction"], expected, rtol=1e-12)
    assert "of 20 sites predicted" in prediction_summary(result)


def test_predict_table_keeps_the_delimiter_and_decimal_commas_of_the_input(saved, frame, tmp_path):
    data = tmp_path / "new_sites.csv"
    frame.iloc[:5].to_csv(data, index=False, sep=";", decimal=",")
    out = tmp_path / "predictions.csv"
    result = predict_table(saved, data, out)
    back = pd.read_csv(out, sep=";", decimal=",")
    np.testing.assert_allclose(back["prediction"], result["prediction"], rtol=1e-12)
    np.testing.assert_allclose(back["temp"], frame["temp"].iloc[:5], rtol=1e-12)


def test_predict_table_names_a_missing_required_column(saved, frame, tmp_path):
    data = tmp_path / "new_sites.csv"
    frame.iloc[:20].drop(columns=["rain"]).to_csv(data, index=False)
    with pytest.raises(InputError, match="'rain'") as caught:
        predict_table(saved, data)
    assert "\n" not in str(caught.value) and "add it" in str(caught.value)


def test_predict_table_never_writes_over_its_inputs(saved, frame, tmp_path):
    data = tmp_path / "new_sites.csv"
    frame.iloc[:20].to_csv(data, index=False)
    before_data, before_model = sha256(data), sha256(saved)
    for target in (data, saved):
        with pytest.raises(InputError, match="never overwritten"):
            predict_table(saved, data, target)
    assert sha256(data) == before_data and sha256(saved) == before_model


def test_predict_table_checks_the_model_before_reading_the_data(tmp_path):
    bad = tmp_path / "edited.json"
    bad.write_text(json.dumps({"schema": "pathfinder-model", "schema_version": "9.0"}))
    with pytest.raises(InputError, match="newer than this pathfinder reads"):
        predict_table(bad, tmp_path / "no_such_table.csv")


def test_an_earlier_prediction_table_is_not_silently_overwritten(saved, frame, tmp_path):
    data = tmp_path / "new_sites.csv"
    frame.iloc[:5].to_csv(data, index=False)
    first = tmp_path / "first.csv"
    predict_table(saved, data, first)
    with pytest.raises(InputError, match="'prediction'"):
        predict_table(saved, first)


def test_a_plain_offset_column_is_added_as_it_is_and_required(frame, tmp_path):
    table = frame.assign(log_area=np.log(frame["minutes"] / 10.0))
    survey = prepare_survey(table, response="birds", family="poisson", offset="log_area",
                            predictors=["temp", "rain", "bedrock"])
    design = build_design(survey.frame, survey.predictors, survey.categorical)
    fit = pathfinder.fit_path(design.X, survey.response, family="poisson", offset=survey.offset)
    k = len(fit.penalties) - 1
    doc = model_document(
        family="poisson", response_name="birds", response_labels=None, terms=design.terms,
        reference_levels=design.reference_levels, intercept=fit.intercept[k], coef=fit.coef[k],
        offset_rule=survey.offset_rule, training_frame=survey.frame, training_X=design.X,
        pick={"method": "lasso", "rule": "min", "mix": 1.0, "penalty": fit.penalties[k]},
        package_version=pathfinder.__version__)
    model = Model(doc)
    assert "log_area" in model.required_columns
    result = model.predict(table)
    expected = fit.predict(design.X, penalty=fit.penalties[k], offset=survey.offset)
    np.testing.assert_allclose(result["prediction"], expected, rtol=0, atol=1e-10)
    with pytest.raises(InputError, match="'log_area'"):
        model.predict(table.drop(columns=["log_area"]))


# ---------------------------------------------------------------------------
# Factor levels whose indicator the fit set to zero; overflow; the summary
# ---------------------------------------------------------------------------


def _with_zero_level(poisson, level="bedrock=granite"):
    """The poisson model with one factor level's indicator set to zero (as the lasso may)."""
    doc = json.loads(json.dumps(poisson.doc))
    for term in doc["terms"]:
        if term["name"] == level:
            term["coefficient"], term["in_model"] = 0.0, False
    return Model(doc)


def test_a_level_whose_indicator_is_zero_predicts_as_the_reference_level(poisson, frame):
    model = _with_zero_level(poisson)
    result = model.predict(frame)
    granite = (frame["bedrock"] == "granite").to_numpy()
    assert granite.any()
    assert result["prediction"].notna().all() and (result["reason"] == "").all()
    # The same sites moved to the reference level (chalk) get the same prediction.
    as_reference = model.predict(frame.assign(bedrock="chalk"))
    np.testing.assert_allclose(result["prediction"][granite], as_reference["prediction"][granite],
                               rtol=1e-12)
    assert prediction_summary(result).startswith(f"{len(frame)} of {len(frame)} sites predicted")


def test_only_a_level_never_seen_is_left_empty_and_always_with_a_reason(poisson, frame):
    model = _with_zero_level(poisson)
    new = frame.iloc[:6].copy()
    new.loc[new.index[0], "bedrock"] = "granite"
    new.loc[new.index[1], "bedrock"] = "peat"
    result = model.predict(new)
    assert result["prediction"].isna().tolist() == [False, True, False, False, False, False]
    assert result["reason"].tolist()[1] == "unknown level 'peat' of bedrock"
    assert (result["reason"][result["prediction"].isna()] != "").all()
    assert prediction_summary(result).startswith("5 of 6 sites predicted; 1 could not be")


def test_a_covariate_that_overflows_the_prediction_is_named(poisson, frame):
    model = load_model_from(poisson)
    new = frame.iloc[:3].copy()
    new.loc[new.index[2], "soil_ph"] = 1e300    # a positive coefficient: exp(link) overflows
    result = model.predict(new)
    assert result["prediction"].isna().tolist() == [False, False, True]
    reason = result["reason"].iloc[2]
    assert "soil_ph = 1e+300" in reason and "outside the training range" in reason
    assert result["most_extreme_predictor"].iloc[2] == "soil_ph"
    assert prediction_summary(result).startswith("2 of 3 sites predicted")


def load_model_from(chosen):
    return Model(json.loads(json.dumps(chosen.doc)))
