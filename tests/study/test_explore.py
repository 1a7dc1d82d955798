"""The explore pipeline end to end: honest folds in space, and determinism across backends."""

import numpy as np
import pandas as pd
import pytest

from pathfinder.choose.cv import cross_validate
from pathfinder.choose.problem import Problem
from pathfinder.core.families import NegativeBinomial
from pathfinder.choose.folds import random_folds, spatial_block_folds
from pathfinder.outputs.write import write_study
from pathfinder.parallel import Backend
from pathfinder.study import StudyOptions, explore


def _smooth_field(rng, xy, n_bumps=30, scale=15.0, extent=100.0):
    centres = rng.uniform(0, extent, (n_bumps, 2))
    heights = rng.standard_normal(n_bumps)
    d2 = ((xy[:, None, :] - centres[None, :, :]) ** 2).sum(-1)
    return np.exp(-d2 / (2 * scale**2)) @ heights


def test_spatial_blocks_report_more_error_than_random_folds():
    # Invented data with strong spatial autocorrelation: the response follows
    # one smooth field of location, the 25 covariates are other smooth fields
    # of location. Random folds let covariates act as stand-ins for position
    # (a test site's neighbours are in training), so they overstate skill;
    # spatial blocks do not (Roberts et al. 2017, Ecography 40:913-929).
    rng = np.random.default_rng(42)
    xy = rng.uniform(0, 100, (500, 2))
    X = np.column_stack([_smooth_field(rng, xy) for _ in range(25)])
    y = _smooth_field(rng, xy) + 0.3 * rng.standard_normal(500)
    problem = Problem(np.asfortranarray(X), y, "gaussian", tuple(f"f{j}" for j in range(25)))
    random_cv = cross_validate(problem, random_folds(500, 5, seed=1).splits(), n_penalties=40)
    block_cv = cross_validate(problem, spatial_block_folds(xy, 25.0, 5, seed=1).splits(), n_penalties=40)
    best_random = random_cv.picks.query("rule == 'min'").cv_mean.item()
    best_block = block_cv.picks.query("rule == 'min'").cv_mean.item()
    assert best_block > 1.2 * best_random


def _table(seed=0, n=160):
    rng = np.random.default_rng(seed)
    frame = pd.DataFrame({f"c{j}": rng.standard_normal(n) for j in range(6)})
    frame["x"] = rng.uniform(0, 50, n)
    frame["y"] = rng.uniform(0, 50, n)
    eta = 0.9 * frame.c0 - 0.7 * frame.c2 + 0.02 * (frame.x - 25)
    frame["present"] = rng.binomial(1, 1 / (1 + np.exp(-eta)))
    return frame


OPTIONS = StudyOptions(response="present", coords=("x", "y"), block_size=12.0, folds=4,
                       inner_folds=3, mixes=(1.0, 0.5), grid_per_decade=7, seed=7)


@pytest.fixture(scope="module")
def local_run():
    return explore(_table(), OPTIONS)


def _same_tables(a, b):
    assert a.tables.keys() == b.tables.keys()
    for name in a.tables:
        pd.testing.assert_frame_equal(a.tables[name], b.tables[name], check_exact=True)


def test_explore_fills_the_contract_tables(local_run):
    t = local_run.tables
    assert list(t["coefficients"].columns[:7]) == ["method", "mix", "step", "penalty", "term",
                                                   "estimate", "estimate_std"]
    assert list(t["cv"].columns[:8]) == ["method", "mix", "step", "penalty", "n_terms", "metric",
                                         "cv_mean", "cv_se"]
    assert list(t["folds"].columns[:2]) == ["row", "fold"]
    assert list(t["comparison"].columns[:6]) == ["method", "rule", "mix", "penalty", "n_terms", "terms"]
    assert {"outer_mean", "outer_se"} <= set(t["comparison"].columns)
    assert local_run.folds.scheme == "spatial blocks"
    assert set(t["criteria"].columns) >= {"aic", "aicc", "bic", "df"}


def test_same_seed_same_tables_on_two_local_processes(local_run, tmp_path):
    two = explore(_table(), OPTIONS, backend=Backend(jobs=2))
    _same_tables(local_run, two)
    assert two.data_sends <= 2 and local_run.data_sends == 0
    a = write_study(local_run, tmp_path / "one")
    b = write_study(two, tmp_path / "two")
    for name in local_run.tables:
        assert (a / f"{name}.csv").read_bytes() == (b / f"{name}.csv").read_bytes()


def test_same_seed_same_tables_on_a_dask_cluster(local_run):
    distributed = pytest.importorskip("dask.distributed")
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  host="127.0.0.1", dashboard_address=None) as cluster:
        with distributed.Client(cluster) as client:
            on_cluster = explore(_table(), OPTIONS, backend=Backend(cluster=client))
    _same_tables(local_run, on_cluster)
    # Cross-validation, relaxation, stability, nested CV share one scattered
    # problem; the subset search sends its own compact cross-products once.
    assert on_cluster.data_sends == 2


def test_model_file_predicts_what_the_run_reported(local_run, tmp_path):
    from pathfinder import load_model
    folder = write_study(local_run, tmp_path / "run")
    model = load_model(folder / "model.json")
    predicted = model.predict(_table())
    sites = pd.read_csv(folder / "sites.csv")
    # sites.csv holds the fitted values of the suggested model for the rows used
    assert np.allclose(predicted.prediction.to_numpy()[sites.row - 1], sites.fitted, rtol=1e-9)
    assert model.document["pick"]["method"] == local_run.chosen.method


def test_python_api_tables_equal_the_csv_files_and_predict_equals_the_command(tmp_path, monkeypatch):
    import pathfinder
    from pathfinder.cli import main
    monkeypatch.chdir(tmp_path)
    _table().to_csv("t.csv", index=False)
    study = pathfinder.explore("t.csv", response="present", folds=4, mixes=[1.0], grid_per_decade=6,
                               nested=False, stability=False, subsets=False, seed=3)
    assert main(["explore", "t.csv", "--response", "present", "--folds", "4", "--mix", "1",
                 "--grid-per-decade", "6", "--no-nested", "--no-stability", "--no-subsets", "--seed", "3",
                 "--out", "out", "--quiet"]) == 0
    write_study(study, tmp_path / "api")
    for name in study.tables:
        assert (tmp_path / "out" / f"{name}.csv").read_bytes() == (tmp_path / "api" / f"{name}.csv").read_bytes()
    assert main(["predict", "out/model.json", "t.csv", "--out", "p.csv", "--quiet"]) == 0
    by_command = pd.read_csv("p.csv")
    by_api = pathfinder.load_model("out/model.json").predict(pd.read_csv("t.csv"))
    assert np.allclose(by_command.prediction, by_api.prediction, rtol=1e-12)


def test_parquet_is_read_by_the_columns_the_run_uses(tmp_path, monkeypatch):
    import pathfinder.study as study_module
    table = _table()
    table["unused_notes"] = "field notes nobody models"
    table.to_parquet(tmp_path / "t.parquet")
    asked = {}
    real = study_module.read_table

    def spy(path, **kwargs):
        asked.update(kwargs)
        return real(path, **kwargs)

    monkeypatch.setattr(study_module, "read_table", spy)
    explore(tmp_path / "t.parquet", response="present", predictors=["c0", "c1"], coords=["x", "y"],
            folds=3, mixes=[1.0], grid_per_decade=3, nested=False, stability=False, subsets=False)
    assert set(asked["columns"]) == {"c0", "c1", "present", "x", "y"}


def test_the_subset_search_covers_the_sizes_and_says_how_each_was_found():
    # 8 predictors at 160 rows: every subset is affordable, so every size is compared
    # exhaustively; with a budget of 20 fits only sizes 0 and 1 (9 models) are, and the
    # rest are searched, which the table and the notes must say (issue: no silent cap).
    quick = dict(response="present", folds=3, mixes=(1.0,), grid_per_decade=4, nested=False,
                 stability=False, seed=2)
    study = explore(_table(), StudyOptions(**quick))
    sizes = study.tables["subset_sizes"]
    assert set(sizes.found_by) == {"exhaustive"}
    assert sizes.k.max() == len(study.design.names) or any("were covered" in n for n in study.notes)
    small = explore(_table(), StudyOptions(**quick, subset_budget=20))
    found = small.tables["subset_sizes"].set_index("k").found_by
    assert found[0] == found[1] == "exhaustive" and (found[found.index >= 2] == "searched").all()
    assert any("searched by splicing" in n and "--subset-budget" in n for n in small.notes)
    assert set(small.tables["subsets"].found_by) == {"exhaustive", "searched"}


def test_gaussian_criteria_count_the_error_variance_everywhere():
    """Hurvich & Tsai (1989): AICc counts the error variance; criteria.csv, subsets.csv and
    stepwise agree on the count (k + 2 for k terms of a continuous response)."""
    table = _table()
    table["growth"] = table["c0"] * 0.8 + np.random.default_rng(4).standard_normal(len(table))
    study = explore(table, StudyOptions(response="growth", exclude=("present",), folds=3,
                                        mixes=(1.0,), grid_per_decade=4, nested=False,
                                        stability=False, seed=2))
    criteria = study.tables["criteria"]
    assert np.allclose(criteria["n_parameters"], criteria["df"] + 2)
    subsets = study.tables["subsets"]
    assert np.allclose(subsets["n_parameters"], subsets["k"] + 2)


def test_overdispersed_counts_are_found_and_said():
    """Cameron & Trivedi (1990) regression test, through diagnostics/dispersion.py: invented
    negative-binomial counts (theta 1) are moved to the negative binomial under auto, and a
    forced Poisson gets QAIC and QAICc (Burnham & Anderson 2002, section 2.5)."""
    rng = np.random.default_rng(9)
    table = _table()
    mu = np.exp(0.8 + 0.6 * table["c0"].to_numpy())
    table["n"] = rng.negative_binomial(1.0, 1.0 / (1.0 + mu))
    quick = dict(response="n", exclude=("present",), folds=3, mixes=(1.0,), grid_per_decade=4,
                 nested=False, stability=False, seed=2)
    auto = explore(table, StudyOptions(**quick, subsets=False))
    assert auto.family.name == NegativeBinomial.name and auto.family.theta > 0
    assert any("overdispersed" in n for n in auto.notes)
    forced = explore(table, StudyOptions(**{**quick, "nested": True}, family="poisson"))
    assert {"qaic", "qaicc"} <= set(forced.tables["criteria"].columns)
    rules = set(zip(forced.tables["comparison"].method, forced.tables["comparison"].rule))
    assert {("best subset", "qaicc"), ("stepwise", "qaic")} <= rules
    assert "qaicc" in forced.tables["subsets"].columns
    assert any("QAICc" in n for n in forced.notes)
