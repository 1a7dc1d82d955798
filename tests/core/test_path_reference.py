"""The fitting core against outside references.

Each test names its reference beside the check: scikit-learn (enet_path,
ElasticNet, LogisticRegression, PoissonRegressor), statsmodels (GLM) or a
published result (Efron et al. 2004).
"""

import numpy as np
import pytest
import statsmodels.api as sm
from sklearn.datasets import load_diabetes
from sklearn.linear_model import ElasticNet, LogisticRegression, PoissonRegressor, enet_path

from pathfinder import fit_path

from .helpers import correlated_design, make_response, population_standardise


@pytest.fixture(scope="module")
def gaussian_data():
    rng = np.random.default_rng(11)
    X = correlated_design(rng, 250, 15, rho=0.6) * rng.uniform(0.5, 20, 15) + rng.uniform(-5, 50, 15)
    coef = np.zeros(15)
    coef[[0, 3, 7]] = [0.4, -0.2, 0.05]
    return X, make_response(rng, X, "gaussian", coef, intercept=2.0)


@pytest.mark.parametrize("mix", [1.0, 0.7, 0.3])
def test_gaussian_path_equals_sklearn_enet_path(gaussian_data, mix):
    X, y = gaussian_data
    fit = fit_path(X, y, mix=mix, tol=1e-14)
    # Reference: scikit-learn enet_path (alpha = penalty, l1_ratio = mix) on the
    # population-standardised X and centred y, same grid.
    _, ref, _ = enet_path(population_standardise(X), y - y.mean(), l1_ratio=mix,
                          alphas=fit.penalties, tol=1e-13, max_iter=1_000_000)
    assert np.max(np.abs(ref.T - fit.coef_std)) <= 1e-5
    assert len(fit.penalties) > 20


def test_gaussian_unstandardised_path_equals_sklearn_enet_path(gaussian_data):
    X, y = gaussian_data
    fit = fit_path(X, y, mix=0.8, standardize=False, n_penalties=30, tol=1e-14)
    # Reference: scikit-learn enet_path on centred X and y (no intercept there).
    _, ref, _ = enet_path(X - X.mean(0), y - y.mean(), l1_ratio=0.8, alphas=fit.penalties,
                          tol=1e-13, max_iter=1_000_000)
    assert np.max(np.abs(ref.T - fit.coef)) <= 1e-5
    # the intercept maps back to the original units: mean(y) - mean(X) b
    assert np.allclose(fit.intercept, y.mean() - fit.coef @ X.mean(0), atol=1e-10)


def test_weighted_gaussian_equals_sklearn_elasticnet(gaussian_data):
    X, y = gaussian_data
    w = np.random.default_rng(5).uniform(0.2, 3.0, len(y))
    fit = fit_path(X, y, mix=0.5, standardize=False, weights=w, penalties=[0.5, 0.05], tol=1e-14)
    for k, lam in enumerate(fit.penalties):
        # Reference: scikit-learn ElasticNet with sample_weight (it rescales the
        # weights to sum to n, as pathfinder does).
        ref = ElasticNet(alpha=lam, l1_ratio=0.5, tol=1e-13, max_iter=1_000_000).fit(X, y, sample_weight=w)
        assert np.max(np.abs(ref.coef_ - fit.coef[k])) <= 1e-5
        assert abs(ref.intercept_ - fit.intercept[k]) <= 1e-4


def test_binomial_lasso_equals_sklearn_logistic_regression():
    rng = np.random.default_rng(3)
    n, p = 400, 10
    X = correlated_design(rng, n, p, rho=0.4)
    coef = np.zeros(p)
    coef[[0, 2, 5]] = [1.0, -0.8, 0.5]
    y = make_response(rng, X, "binomial", coef, intercept=-0.5)
    fit = fit_path(X, y, family="binomial", standardize=False, tol=1e-12)
    for k in (5, 15, 30):
        lam = fit.penalties[k]
        # Reference: scikit-learn LogisticRegression, l1 penalty, C = 1/(n lam).
        # The saga solver leaves the intercept unpenalised (liblinear would
        # penalise it, so it is not used here).
        ref = LogisticRegression(l1_ratio=1.0, C=1 / (n * lam), solver="saga",
                                 tol=1e-12, max_iter=1_000_000).fit(X, y)
        assert np.max(np.abs(ref.coef_[0] - fit.coef[k])) <= 1e-4
        assert abs(ref.intercept_[0] - fit.intercept[k]) <= 1e-4


def test_poisson_ridge_equals_sklearn_poisson_regressor():
    rng = np.random.default_rng(4)
    n, p = 300, 6
    X = correlated_design(rng, n, p, rho=0.3)
    y = make_response(rng, X, "poisson", np.array([0.4, -0.3, 0, 0, 0.2, 0]), intercept=0.5)
    fit = fit_path(X, y, family="poisson", mix=0.0, standardize=False,
                   penalties=[1.0, 0.1, 0.01, 0.001], tol=1e-13)
    for k, lam in enumerate(fit.penalties):
        # Reference: scikit-learn PoissonRegressor(alpha = lam), a ridge penalty.
        ref = PoissonRegressor(alpha=lam, tol=1e-13, max_iter=100_000).fit(X, y)
        assert np.max(np.abs(ref.coef_ - fit.coef[k])) <= 1e-5
        assert abs(ref.intercept_ - fit.intercept[k]) <= 1e-5


@pytest.mark.parametrize("family", ["binomial", "poisson"])
@pytest.mark.parametrize("with_offset", [False, True])
@pytest.mark.parametrize("with_weights", [False, True])
def test_zero_penalty_equals_statsmodels_glm(family, with_offset, with_weights):
    rng = np.random.default_rng(21)
    n, p = 500, 5
    X = correlated_design(rng, n, p, rho=0.5)
    offset = rng.uniform(-0.5, 0.5, n) if with_offset else None
    weights = rng.uniform(0.3, 3.0, n) if with_weights else None
    y = make_response(rng, X, family, np.array([0.5, -0.4, 0.3, 0, 0.1]), intercept=0.2, offset=offset)
    fit = fit_path(X, y, family=family, penalties=[0.0], offset=offset, weights=weights, tol=1e-13)
    # Reference: statsmodels GLM (unpenalised maximum likelihood), with the same
    # offset and the weights as var_weights.
    fam = sm.families.Binomial() if family == "binomial" else sm.families.Poisson()
    ref = sm.GLM(y, sm.add_constant(X), family=fam, offset=offset, var_weights=weights).fit(tol=1e-13)
    assert np.max(np.abs(ref.params[1:] - fit.coef[0])) <= 1e-6
    assert abs(ref.params[0] - fit.intercept[0]) <= 1e-6
    # the deviance is statsmodels' deviance once weights are rescaled to sum to n
    scale = 1.0 if weights is None else n / weights.sum()
    assert fit.deviance[0] == pytest.approx(ref.deviance * scale, rel=1e-8)
    assert fit.null_deviance == pytest.approx(ref.null_deviance * scale, rel=1e-6)


def test_diabetes_lasso_entry_order():
    # Reference: Efron, Hastie, Johnstone & Tibshirani (2004) Least angle
    # regression, Ann. Statist. 32:407-499: on the diabetes data the lasso
    # path admits bmi, s5, bp, s3, sex, s6, s1, s4, s2, age in that order.
    data = load_diabetes(as_frame=True)
    lam_max = fit_path(data.data, data.target, n_penalties=2).penalties[0]
    grid = lam_max * np.logspace(0, -4, 2000)  # a user grid: fine, and never cut short
    fit = fit_path(data.data, data.target, penalties=grid, tol=1e-12)
    first_step = {name: int(np.argmax(fit.coef[:, j] != 0))
                  for j, name in enumerate(fit.names) if np.any(fit.coef[:, j] != 0)}
    order = sorted(first_step, key=first_step.get)
    assert order == ["bmi", "s5", "bp", "s3", "sex", "s6", "s1", "s4", "s2", "age"]
    assert len(set(first_step.values())) == 10  # the grid resolves every entry
