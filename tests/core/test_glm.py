"""Unpenalised GLM refits against statsmodels GLM (the reference library)."""

import numpy as np
import pytest
import statsmodels.api as sm

from pathfinder.core.glm import fit_glm

from .helpers import correlated_design, make_response

SM_FAMILIES = {"gaussian": sm.families.Gaussian(), "binomial": sm.families.Binomial(),
               "poisson": sm.families.Poisson()}


@pytest.mark.parametrize("family", ["gaussian", "binomial", "poisson"])
@pytest.mark.parametrize("extras", [False, True])
def test_refit_equals_statsmodels_glm(family, extras):
    rng = np.random.default_rng(17)
    n = 400
    X = correlated_design(rng, n, 6, rho=0.9) * 3 + 10   # strongly correlated, off-centre
    offset = rng.uniform(-0.3, 0.3, n) if extras else None
    weights = rng.uniform(0.5, 2.0, n) if extras else None
    y = make_response(rng, X - 10, family, np.array([0.3, -0.2, 0.1, 0, 0, 0.05]), offset=offset)
    ours = fit_glm(X, y, family, offset=offset, weights=weights)
    # Reference: statsmodels GLM, maximum likelihood (weights as var_weights).
    ref = sm.GLM(y, sm.add_constant(X), family=SM_FAMILIES[family], offset=offset,
                 var_weights=weights).fit(tol=1e-12)
    assert ours.converged
    assert np.allclose(ours.coef, ref.params[1:], rtol=1e-6, atol=1e-8)
    assert ours.intercept == pytest.approx(ref.params[0], rel=1e-6, abs=1e-8)
    scale = 1.0 if weights is None else n / weights.sum()
    assert ours.deviance == pytest.approx(ref.deviance * scale, rel=1e-8)


def test_no_columns_gives_the_null_model():
    y = np.array([0, 1, 1, 0, 1, 1, 1, 0, 1, 1.0])
    fit = fit_glm(np.empty((10, 0)), y, "binomial")
    assert fit.intercept == pytest.approx(np.log(0.7 / 0.3))


def test_separated_presences_stay_finite_with_a_little_ridge():
    rng = np.random.default_rng(0)
    X = rng.standard_normal((60, 2))
    y = (X[:, 0] > 0).astype(float)
    fit = fit_glm(X, y, "binomial", ridge=1e-6)
    assert np.all(np.isfinite(fit.coef)) and abs(fit.coef[0]) > 5
