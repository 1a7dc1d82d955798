"""Invariants of the fitted path (hypothesis properties and exact conditions).

The KKT conditions are the optimality conditions of the penalised objective
(Friedman, Hastie & Tibshirani 2010, eq. 5; Tibshirani et al. 2012, section 2);
the other properties follow from the objective itself.
"""

import warnings

import numpy as np
import pandas as pd
import pytest
from hypothesis import given
from hypothesis import strategies as st

from pathfinder import FitWarning, fit_path
from pathfinder.core import path as path_module
from pathfinder.core.families import get_family

from .helpers import correlated_design, make_response, population_standardise

FAMILIES = ["gaussian", "binomial", "poisson"]


def _data(seed, family, n=120, p=8, rho=0.5):
    rng = np.random.default_rng(seed)
    X = correlated_design(rng, n, p, rho) * rng.uniform(0.5, 3.0, p) + rng.uniform(-2, 2, p)
    coef = np.zeros(p)
    coef[: min(3, p)] = [0.6, -0.5, 0.3][: min(3, p)]
    return X, make_response(rng, X, family, coef / X.std(0) * 0.8, intercept=0.3)


@pytest.mark.parametrize("family", FAMILIES)
@pytest.mark.parametrize("mix", [1.0, 0.5])
def test_kkt_conditions_hold_at_every_penalty(family, mix):
    X, y = _data(7, family, n=300, p=12)
    w = np.random.default_rng(8).uniform(0.5, 2.0, len(y))
    off = np.random.default_rng(9).uniform(-0.3, 0.3, len(y))
    v = np.ones(12)
    v[0], v[1] = 0.0, 2.0
    fit = fit_path(X, y, family=family, mix=mix, weights=w, offset=off, term_weights=v, tol=1e-12)
    # Recompute the gradient from the data, independently of the solver.
    wn = w * len(y) / w.sum()
    Xs = population_standardise(X, w)
    fam = get_family(family)
    for k, lam in enumerate(fit.penalties):
        mu = fam.inverse_link(fit.intercept[k] + X @ fit.coef[k] + off)
        grad = Xs.T @ (wn * (y - mu)) / len(y)
        b = fit.coef_std[k]
        l1, l2 = lam * mix * v, lam * (1 - mix) * v
        zero = b == 0
        slack = 1e-5 * fit.penalties[0]
        assert np.all(np.abs(grad[zero]) <= l1[zero] + slack)
        assert np.allclose(grad[~zero] - l2[~zero] * b[~zero], l1[~zero] * np.sign(b[~zero]), atol=slack)
        assert fit.kkt_violation[k] <= slack
        assert b[0] != 0  # penalty weight 0: always in the model


@pytest.mark.parametrize("family", FAMILIES)
def test_lam_max_is_exact(family):
    X, y = _data(3, family)
    fit = fit_path(X, y, family=family, n_penalties=5)
    assert fit.n_terms[0] == 0
    nudged = fit_path(X, y, family=family, penalties=[fit.penalties[0] * (1 - 1e-6)], tol=1e-12)
    assert nudged.n_terms[0] >= 1


def test_gram_and_naive_solvers_agree(monkeypatch):
    X, y = _data(5, "gaussian", n=200, p=10)
    w = np.random.default_rng(1).uniform(0.5, 2, 200)
    gram = fit_path(X, y, weights=w, mix=0.6, tol=1e-13)
    monkeypatch.setattr(path_module, "GRAM_MAX_TERMS", 0)
    naive = fit_path(X, y, weights=w, mix=0.6, penalties=gram.penalties, tol=1e-13)
    assert np.allclose(gram.coef, naive.coef, atol=1e-7)
    assert np.allclose(gram.intercept, naive.intercept, atol=1e-7)
    assert np.allclose(gram.deviance, naive.deviance, rtol=1e-8)


@given(seed=st.integers(0, 10_000), family=st.sampled_from(FAMILIES),
       col=st.integers(0, 5), factor=st.floats(0.01, 100.0))
def test_rescaling_a_predictor_leaves_fitted_values_unchanged(seed, family, col, factor):
    X, y = _data(seed, family, n=80, p=6)
    base = fit_path(X, y, family=family, n_penalties=15, tol=1e-12)
    X2 = X.copy()
    X2[:, col] *= factor
    scaled = fit_path(X2, y, family=family, penalties=base.penalties, tol=1e-12)
    assert np.allclose(base.predict(X, kind="link"), scaled.predict(X2, kind="link"), atol=1e-6)
    assert np.allclose(scaled.coef[:, col] * factor, base.coef[:, col], atol=1e-6)


@given(seed=st.integers(0, 10_000), family=st.sampled_from(FAMILIES), perm_seed=st.integers(0, 100))
def test_permuting_columns_permutes_coefficients(seed, family, perm_seed):
    X, y = _data(seed, family, n=80, p=6)
    perm = np.random.default_rng(perm_seed).permutation(6)
    base = fit_path(X, y, family=family, n_penalties=15, tol=1e-12)
    permuted = fit_path(X[:, perm], y, family=family, penalties=base.penalties, tol=1e-12)
    assert np.allclose(permuted.coef, base.coef[:, perm], atol=1e-6)


@given(seed=st.integers(0, 10_000), family=st.sampled_from(FAMILIES), keep=st.integers(0, 5),
       mix=st.sampled_from([1.0, 0.5]))
def test_zero_penalty_weight_keeps_the_term_everywhere(seed, family, keep, mix):
    X, y = _data(seed, family, n=80, p=6)
    v = np.ones(6)
    v[keep] = 0.0
    fit = fit_path(X, y, family=family, mix=mix, term_weights=v, n_penalties=15)
    assert np.all(fit.coef[:, keep] != 0)


@given(seed=st.integers(0, 10_000), family=st.sampled_from(FAMILIES), row=st.integers(0, 59))
def test_weight_two_equals_a_duplicated_row(seed, family, row):
    X, y = _data(seed, family, n=60, p=5)
    w = np.ones(60)
    w[row] = 2.0
    weighted = fit_path(X, y, family=family, weights=w, n_penalties=12, tol=1e-12)
    Xd = np.vstack([X, X[row]])
    yd = np.append(y, y[row])
    duplicated = fit_path(Xd, yd, family=family, penalties=weighted.penalties, tol=1e-12)
    assert np.allclose(weighted.penalties[0], fit_path(Xd, yd, family=family, n_penalties=2).penalties[0])
    assert np.allclose(weighted.coef, duplicated.coef, atol=1e-6)
    assert np.allclose(weighted.intercept, duplicated.intercept, atol=1e-6)


def test_dataframe_names_and_long_table():
    X, y = _data(2, "gaussian", n=100, p=4)
    df = pd.DataFrame(X, columns=["elevation_m", "rain_mm", "soil_ph", "frost_days"])
    fit = fit_path(df, y, n_penalties=10)
    long = fit.to_frame()
    assert fit.names == ("elevation_m", "rain_mm", "soil_ph", "frost_days")
    assert list(long.columns) == ["step", "penalty", "term", "estimate", "estimate_std"]
    assert len(long) == len(fit.penalties) * 4
    one = long[(long.step == 3) & (long.term == "soil_ph")]
    assert one.estimate.item() == fit.coef[3, 2]
    assert fit.coef.shape == (len(fit.penalties), 4)
    assert np.all(np.diff(fit.penalties) < 0)


@pytest.mark.parametrize("family", FAMILIES)
def test_predict_at_grid_points_and_between(family):
    X, y = _data(4, family)
    off = np.full(len(y), 0.1)
    fit = fit_path(X, y, family=family, n_penalties=20, offset=off)
    fam = get_family(family)
    k = 6
    eta = fit.intercept[k] + X @ fit.coef[k] + off
    assert np.allclose(fit.predict(X, fit.penalties[k], kind="link", offset=off), eta)
    assert np.allclose(fit.predict(X, fit.penalties[k], offset=off), fam.inverse_link(eta))
    assert fit.predict(X, offset=off).shape == (len(y), len(fit.penalties))
    # between two grid points: linear in log(penalty), so the midpoint in logs
    mid = np.sqrt(fit.penalties[k] * fit.penalties[k + 1])
    b0, b = fit.coefficients_at(mid)
    assert np.allclose(b, 0.5 * (fit.coef[k] + fit.coef[k + 1]))


def test_separated_presences_stop_the_path_with_a_warning():
    rng = np.random.default_rng(0)
    X = rng.standard_normal((100, 3))
    y = (X[:, 0] > 0).astype(float)  # perfectly separated by the first predictor
    with pytest.warns(FitWarning, match="separates"):
        fit = fit_path(X, y, family="binomial", decades=6)
    assert fit.stop_reason.startswith("deviance explained above")
    assert np.all(np.isfinite(fit.coef))
    assert fit.deviance_explained[-1] > 0.999


def test_default_grid_depth_and_density_are_ours():
    """3.5 powers of ten with 20 penalties each (2 for wide tables): pathfinder.defaults."""
    rng = np.random.default_rng(1)
    X = rng.standard_normal((30, 50))
    y = X[:, 0] + rng.standard_normal(30)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FitWarning)
        wide = fit_path(X, y)
    X2 = rng.standard_normal((200, 5))
    tall = fit_path(X2, X2[:, 0] + rng.standard_normal(200), tol=1e-10)
    assert np.isclose(wide.penalties[1] / wide.penalties[0], 10 ** (-1 / 20))
    assert np.isclose(tall.penalties[1] / tall.penalties[0], 10 ** (-1 / 20))
    assert wide.penalties[-1] / wide.penalties[0] >= 10 ** -2 * (1 - 1e-9)
    assert len(tall.penalties) == 71 or tall.stop_reason != "end of grid"
    given = fit_path(X2, X2[:, 0] + rng.standard_normal(200), decades=1, per_decade=4)
    assert np.allclose(given.penalties / given.penalties[0], np.logspace(0, -1, 5))


def test_ridge_grid_starts_where_one_degree_of_freedom_is_left():
    """Our ridge start: df = tr[G (G + lam V)^-1] at most 1, close to 1 for strong signal."""
    rng = np.random.default_rng(4)
    X = rng.standard_normal((300, 6))
    y = X @ np.array([1.0, -1.0, 0.5, 0.0, 0.0, 0.3]) + rng.standard_normal(300)
    fit = fit_path(X, y, mix=0.0)
    Xs = (X - X.mean(0)) / X.std(0)
    G = Xs.T @ Xs / 300
    df = np.trace(G @ np.linalg.inv(G + fit.penalties[0] * np.eye(6)))
    assert 0.5 < df <= 1.0


@pytest.mark.parametrize("bad, message", [
    (dict(mix=1.5), "mix"),
    (dict(weights=-np.ones(50)), "weights"),
    (dict(term_weights=[1, 1]), "term_weights"),
    (dict(family="gamma"), "family"),
])
def test_bad_arguments_are_refused(bad, message):
    X, y = _data(1, "gaussian", n=50, p=3)
    with pytest.raises(ValueError, match=message):
        fit_path(X, y, **bad)


def test_constant_column_never_enters():
    X, y = _data(1, "gaussian", n=60, p=4)
    X[:, 2] = 7.0
    fit = fit_path(X, y, decades=3)
    assert np.all(fit.coef[:, 2] == 0)
    assert np.all(np.isfinite(fit.coef))


@pytest.mark.parametrize("family", FAMILIES)
@pytest.mark.parametrize("weighted", [False, True])
def test_fitting_on_rows_equals_fitting_on_the_subset(family, weighted):
    X, y = _data(12, family, n=150, p=6)
    w = np.random.default_rng(2).uniform(0.5, 2, 150) if weighted else None
    rows = np.random.default_rng(3).choice(150, 90, replace=False)
    on_rows = fit_path(X, y, family=family, weights=w, rows=rows, n_penalties=20)
    subset = fit_path(X[rows], y[rows], family=family, weights=None if w is None else w[rows],
                      penalties=on_rows.penalties)
    assert np.allclose(on_rows.coef, subset.coef, atol=1e-10)
    assert np.allclose(on_rows.intercept, subset.intercept, atol=1e-10)


@pytest.mark.parametrize("family", FAMILIES)
def test_the_callers_data_are_never_changed(family):
    X, y = _data(13, family, n=120, p=5)
    w = np.random.default_rng(4).uniform(0.5, 2, 120)
    off = np.full(120, 0.2)
    before = [a.copy() for a in (X, y, w, off)]
    fit_path(X, y, family=family, weights=w, offset=off, n_penalties=10)
    fit_path(X, y, family=family, weights=w, offset=off, n_penalties=10, rows=np.arange(60))
    for a, b in zip((X, y, w, off), before):
        assert np.array_equal(a, b)


@pytest.mark.parametrize("family", FAMILIES)
def test_repeated_rows_count_twice(family):
    # A bootstrap sample lists some rows twice: fitting on those rows must equal
    # fitting on the explicitly duplicated table.
    X, y = _data(14, family, n=100, p=5)
    rows = np.random.default_rng(5).integers(0, 100, 100)
    on_rows = fit_path(np.asfortranarray(X), y, family=family, rows=rows, n_penalties=15)
    copied = fit_path(X[rows], y[rows], family=family, penalties=on_rows.penalties)
    assert np.allclose(on_rows.coef, copied.coef, atol=1e-10)


def test_missing_or_infinite_values_in_x_are_refused():
    X, y = _data(1, "gaussian", n=50, p=3)
    for bad in (np.nan, np.inf):
        X2 = X.copy()
        X2[7, 1] = bad
        with pytest.raises(ValueError, match="missing or infinite"):
            fit_path(X2, y)
