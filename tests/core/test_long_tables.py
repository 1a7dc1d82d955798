"""The solver for long tables (binomial and Poisson, n >> p): Newton steps on a
sampled weighted Gram matrix, X read in place.

References: scikit-learn ``LogisticRegression`` (lbfgs, an l2 penalty with
C = 1/(n lam)) and statsmodels ``GLM`` (no penalty; offset and frequency
weights), on tables long enough that ``fit_path`` chooses this solver by
itself. The lasso and elastic-net paths are compared with the coordinate-
descent solver, itself checked against scikit-learn in test_path_reference.
The KKT conditions (Friedman, Hastie & Tibshirani 2010, eq. 5) are checked
with gradients recomputed from the data, independently of the solver.
"""

import numpy as np
import pytest
import statsmodels.api as sm
from sklearn.linear_model import LogisticRegression

from pathfinder import FitWarning, fit_path
from pathfinder.core import path as path_module
from pathfinder.core import solvers
from pathfinder.core.families import get_family

from .helpers import correlated_design, make_response, population_standardise


def _long(seed, family, n, p, informative=4, scale=True):
    rng = np.random.default_rng(seed)
    X = correlated_design(rng, n, p, rho=0.4)
    if scale:  # columns on different scales and far from zero, as field data are
        X = X * rng.uniform(0.5, 20.0, p) + rng.uniform(-50, 500, p)
    coef = np.zeros(p)
    coef[:informative] = np.linspace(0.5, -0.4, informative)
    y = make_response(rng, population_standardise(X), family, coef, intercept=-0.4)
    return np.asfortranarray(X), y


def _solver_used(monkeypatch):
    """Record which solver class fit_path builds."""
    used = []
    for name in ("NaiveSolver", "NewtonGramSolver"):
        cls = getattr(path_module, name)
        monkeypatch.setattr(path_module, name,
                            lambda *a, _cls=cls, **k: used.append(_cls.__name__) or _cls(*a, **k))
    return used


def test_long_tables_are_fitted_by_the_newton_solver(monkeypatch):
    X, y = _long(1, "binomial", 25_000, 10)
    used = _solver_used(monkeypatch)
    short = path_module.LONG_TABLE_ROWS - 1
    fit_path(X, y, family="binomial", n_penalties=5)
    fit_path(X[:short], y[:short], family="binomial", n_penalties=5)
    rows = path_module.LONG_TABLE_ROWS                    # enough rows, too few per column
    extra = np.random.default_rng(0).normal(size=(rows, rows // path_module.LONG_TABLE_RATIO))
    fit_path(np.hstack([X[:rows], extra]), y[:rows], family="binomial", n_penalties=5)
    assert used == ["NewtonGramSolver", "NaiveSolver", "NaiveSolver"]


def test_binomial_ridge_on_a_long_table_equals_sklearn_logistic_regression():
    X, y = _long(2, "binomial", 25_000, 8, scale=False)
    n = len(y)
    fit = fit_path(X, y, family="binomial", mix=0.0, standardize=False,
                   penalties=[1e-2, 1e-3, 1e-4], tol=1e-10)
    for k, lam in enumerate(fit.penalties):
        # Reference: scikit-learn LogisticRegression, l2 penalty, C = 1/(n lam), lbfgs.
        ref = LogisticRegression(C=1 / (n * lam), solver="lbfgs", tol=1e-12,
                                 max_iter=10_000).fit(X, y)
        assert np.max(np.abs(ref.coef_[0] - fit.coef[k])) <= 1e-5
        assert abs(ref.intercept_[0] - fit.intercept[k]) <= 1e-5


@pytest.mark.parametrize("order", ["F", "C"])
def test_unpenalised_poisson_with_offset_and_weights_equals_statsmodels_glm(order):
    X, y = _long(3, "poisson", 24_000, 6)
    rng = np.random.default_rng(4)
    effort = rng.uniform(-0.5, 0.5, len(y))
    w = rng.integers(1, 4, len(y)).astype(float)
    Xo = np.asarray(X, order=order)
    fit = fit_path(Xo, y, family="poisson", penalties=[0.0], offset=effort, weights=w, tol=1e-10)
    # Reference: statsmodels GLM (Poisson, log link), offset and frequency weights.
    ref = sm.GLM(y, sm.add_constant(X), family=sm.families.Poisson(), offset=effort,
                 freq_weights=w).fit(tol=1e-12)
    assert np.allclose(fit.coef[0], ref.params[1:], rtol=1e-6, atol=1e-8)
    assert abs(fit.intercept[0] - ref.params[0]) <= 1e-6 * max(1.0, abs(ref.params[0]))


@pytest.mark.parametrize("family", ["binomial", "poisson"])
@pytest.mark.parametrize("mix", [1.0, 0.5])
@pytest.mark.parametrize("sample", ["every row", "kept sample", "sample read afresh"])
def test_newton_solver_matches_coordinate_descent(monkeypatch, family, mix, sample):
    n, p = 6_000, 12
    X, y = _long(5, family, n, p)
    rng = np.random.default_rng(6)
    w = rng.uniform(0.5, 2.0, n)
    off = rng.uniform(-0.3, 0.3, n)
    v = np.ones(p)
    v[0], v[1] = 0.0, 2.0
    settings = dict(family=family, mix=mix, weights=w, offset=off, term_weights=v, tol=1e-10)
    monkeypatch.setattr(path_module, "LONG_TABLE_ROWS", 10**9)
    naive = fit_path(X, y, n_penalties=30, **settings)
    monkeypatch.setattr(path_module, "LONG_TABLE_ROWS", 1_000)
    rows = {"every row": 10**6, "kept sample": 1_024, "sample read afresh": 2_048}[sample]
    monkeypatch.setattr(solvers, "HESSIAN_ROWS", rows)
    newton = fit_path(X, y, penalties=naive.penalties, **settings)
    assert np.allclose(newton.coef_std, naive.coef_std, atol=1e-6)
    assert np.allclose(newton.intercept, naive.intercept, atol=1e-6)
    assert np.allclose(newton.deviance, naive.deviance, rtol=1e-8)
    assert np.all(newton.coef_std[:, 0] != 0)      # penalty weight 0: always in


@pytest.mark.parametrize("family", ["binomial", "poisson"])
def test_kkt_conditions_hold_when_gradients_are_bounded_not_computed(family):
    # Many pure-noise columns: most gradients are certified below the penalty
    # by the bound instead of being computed. Recompute them all from the data.
    X, y = _long(7, family, 30_000, 40, informative=3)
    fit = fit_path(X, y, family=family, n_penalties=40)
    Xs = population_standardise(X)
    fam = get_family(family)
    for k, lam in enumerate(fit.penalties):
        mu = fam.inverse_link(fit.intercept[k] + X @ fit.coef[k])
        grad = Xs.T @ (y - mu) / len(y)
        zero = fit.coef_std[k] == 0
        slack = 1e-6 * fit.penalties[0]
        assert np.all(np.abs(grad[zero]) <= lam + slack)
        assert np.allclose(grad[~zero], lam * np.sign(fit.coef_std[k][~zero]), atol=slack)


def test_results_do_not_depend_on_the_number_of_threads(monkeypatch):
    X, y = _long(8, "binomial", 40_000, 15)
    runs = []
    for threads in (1, 2):
        monkeypatch.setattr(path_module, "blas_threads", lambda t=threads: t)
        runs.append(fit_path(X, y, family="binomial", n_penalties=20))
    assert np.array_equal(runs[0].coef, runs[1].coef)
    assert np.array_equal(runs[0].deviance, runs[1].deviance)


def test_in_place_and_copied_tables_give_the_same_path():
    X, y = _long(9, "binomial", 25_000, 10)
    in_place = fit_path(X, y, family="binomial", n_penalties=20, tol=1e-10)
    copied = fit_path(np.ascontiguousarray(X), y, family="binomial",
                      penalties=in_place.penalties, tol=1e-10)
    assert np.allclose(in_place.coef_std, copied.coef_std, atol=1e-7)


def test_a_fit_on_some_rows_read_in_place_equals_a_fit_on_those_rows(monkeypatch):
    monkeypatch.setattr(path_module, "SUBSET_COPY_BYTES", 0)   # never copy the rows
    X, y = _long(13, "poisson", 30_000, 10)
    rng = np.random.default_rng(14)
    rows = rng.choice(len(y), 12_000, replace=True)      # a bootstrap sample, unsorted, repeats
    off = rng.uniform(-0.2, 0.2, len(y))
    in_place = fit_path(X, y, family="poisson", rows=rows, offset=off, n_penalties=20, tol=1e-10)
    taken = fit_path(np.asfortranarray(X[rows]), y[rows], family="poisson", offset=off[rows],
                     penalties=in_place.penalties, tol=1e-10)
    copied = fit_path(np.ascontiguousarray(X), y, family="poisson", rows=rows, offset=off,
                      penalties=in_place.penalties, tol=1e-10)
    assert np.allclose(in_place.coef, taken.coef, rtol=1e-6, atol=1e-9)
    assert np.allclose(in_place.coef, copied.coef, rtol=1e-6, atol=1e-9)
    assert np.allclose(in_place.deviance, taken.deviance, rtol=1e-9)


def test_float32_table_is_read_as_it_is(monkeypatch):
    X, y = _long(10, "binomial", 25_000, 8, scale=False)
    X32 = np.asfortranarray(X.astype(np.float32))
    fit32 = fit_path(X32, y, family="binomial", n_penalties=15)
    fit64 = fit_path(X32.astype(np.float64), y, family="binomial", penalties=fit32.penalties)
    # the same numbers, held in single precision: the same fit
    assert np.allclose(fit32.coef, fit64.coef, atol=1e-6)


def test_separated_presences_on_a_long_table_stop_the_path_with_a_warning():
    rng = np.random.default_rng(12)
    X = np.asfortranarray(rng.standard_normal((5_000, 4)))
    y = (X[:, 0] > 0).astype(float)            # perfectly separated by the first predictor
    with pytest.warns(FitWarning, match="separates"):
        fit = fit_path(X, y, family="binomial", decades=6)
    assert fit.stop_reason.startswith("deviance explained above")
    assert np.all(np.isfinite(fit.coef))


def test_sample_rows_are_spread_over_the_table():
    rows = solvers.sample_rows(1_000_000, 100_000)
    assert len(np.unique(rows)) == len(rows) and rows.min() == 0 and rows.max() == 999_999
    assert abs(len(rows) - 100_000) <= solvers.SAMPLE_PIECE
    gaps = np.diff(rows[:: solvers.SAMPLE_PIECE])
    assert gaps.max() - gaps.min() <= 1                  # evenly spaced pieces
    assert np.array_equal(solvers.sample_rows(500, 1_000), np.arange(500))


def test_gradient_bound_never_certifies_a_term_above_its_limit():
    # Cauchy-Schwarz: |g_j(now) - g_j(anchor)| <= rms(x_j) * rms(score change).
    X, y = _long(11, "binomial", 20_000, 30, informative=6)
    w, off = np.ones(len(y)), np.zeros(len(y))
    mean = X.mean(axis=0)
    scale, _, squares = solvers.column_scales(X, mean, w, True)
    solver = solvers.NewtonGramSolver(X, mean, scale, squares, y, w, off, get_family("binomial"),
                                      1e-14, 10_000)
    at_anchor = solver.gradient().copy()                  # every column: the anchor
    solver.beta[:6] = np.linspace(0.3, -0.3, 6)            # move, computing 6 columns only
    solver._pass(np.arange(6, dtype=np.int64))
    exact = population_standardise(X).T @ (y - 1 / (1 + np.exp(-solver.eta))) / len(y)
    assert np.max(np.abs(exact - at_anchor)) > 1e-3        # the gradients really moved
    assert solver.grad_known[:30].sum() == 6
    for level in np.quantile(np.abs(exact), [0.3, 0.6, 0.9, 1.0]) * 1.01:
        limit = np.full(30, level)
        certified = ~solver._uncertain(limit) & ~solver.grad_known[:30]   # bounded, not computed
        assert np.all(np.abs(exact[certified]) <= limit[certified])
        returned = solver.gradient(limit)
        assert np.all(np.abs(returned[certified]) <= limit[certified])
        assert np.allclose(returned[~certified], exact[~certified], atol=1e-12)
