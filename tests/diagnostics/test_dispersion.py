"""Overdispersion and excess zeros of counts: reference values and the tests' behaviour."""

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats

from pathfinder.core.families import POISSON
from pathfinder.core.glm import fit_glm
from pathfinder.diagnostics.dispersion import (check_counts, excess_zeros, overdispersion_test,
                                               pearson_dispersion, theta_likelihood_ratio)


def design(rng, n):
    return rng.standard_normal((n, 2))


def poisson_counts(rng, X):
    return rng.poisson(np.exp(0.7 + X @ np.array([0.4, -0.3]))).astype(float)


def nb_counts(rng, X, theta):
    mu = np.exp(0.7 + X @ np.array([0.4, -0.3]))
    return rng.poisson(rng.gamma(theta, mu / theta)).astype(float)


def poisson_means(X, y, offset=None):
    fit = fit_glm(X, y, POISSON, offset=offset)
    return np.exp(fit.intercept + X @ fit.coef + (0 if offset is None else offset))


# ---- reference values -------------------------------------------------------------

def test_pearson_dispersion_equals_statsmodels():
    rng = np.random.default_rng(1)
    X = design(rng, 300)
    y = nb_counts(rng, X, 1.5)
    check = pearson_dispersion(y, poisson_means(X, y), 3)
    # Reference: statsmodels GLM (Poisson), pearson_chi2 / df_resid.
    ref = sm.GLM(y, sm.add_constant(X), family=sm.families.Poisson()).fit()
    assert check.statistic == pytest.approx(ref.pearson_chi2 / ref.df_resid, rel=1e-8)
    assert check.p_value == pytest.approx(stats.chi2.sf(ref.pearson_chi2, ref.df_resid), rel=1e-6)
    assert check.found and "times as much as a Poisson model allows" in check.message


def test_regression_test_is_the_auxiliary_ols_of_cameron_and_trivedi():
    rng = np.random.default_rng(2)
    X = design(rng, 400)
    y = nb_counts(rng, X, 3.0)
    mu = poisson_means(X, y)
    check = overdispersion_test(y, mu)
    # Cameron & Trivedi (1990): OLS without intercept of ((y - mu)^2 - y) / mu on mu (NB2);
    # the t value from statsmodels OLS.
    ols = sm.OLS(((y - mu) ** 2 - y) / mu, mu).fit()
    assert check.statistic == pytest.approx(ols.tvalues[0], rel=1e-10)
    assert check.p_value == pytest.approx(stats.norm.sf(ols.tvalues[0]), rel=1e-10)


def test_likelihood_ratio_uses_the_boundary_corrected_p_value():
    rng = np.random.default_rng(3)
    X = design(rng, 300)
    y = nb_counts(rng, X, 2.0)
    # Reference log-likelihoods: statsmodels GLM Poisson and discrete NegativeBinomial (NB2).
    llp = sm.GLM(y, sm.add_constant(X), family=sm.families.Poisson()).fit().llf
    llnb = sm.NegativeBinomial(y, sm.add_constant(X), loglike_method="nb2").fit(disp=0).llf
    check = theta_likelihood_ratio(llp, llnb)
    assert check.statistic == pytest.approx(2 * (llnb - llp), rel=1e-10)
    # Self & Liang (1987): half a point mass at 0 and half chi-square(1).
    assert check.p_value == pytest.approx(0.5 * stats.chi2.sf(2 * (llnb - llp), 1), rel=1e-10)
    assert check.found
    at_boundary = theta_likelihood_ratio(-100.0, -100.0)
    assert at_boundary.statistic == 0 and at_boundary.p_value == 1.0 and not at_boundary.found


def test_expected_zeros_follow_the_two_models():
    mu = np.array([0.2, 1.0, 3.0, 7.5])
    y = np.array([0.0, 0.0, 2.0, 9.0])
    theta = 1.7
    # Reference: scipy's Poisson and negative binomial probabilities of a zero count.
    assert excess_zeros(y, mu).expected == pytest.approx(stats.poisson.pmf(0, mu).sum(), rel=1e-12)
    nb = excess_zeros(y, mu, theta)
    assert nb.expected == pytest.approx(stats.nbinom.pmf(0, theta, theta / (theta + mu)).sum(),
                                        rel=1e-12)
    assert nb.observed == 2 and nb.model == "negative binomial"


# ---- behaviour on invented data ----------------------------------------------------

def test_negative_binomial_counts_are_found_overdispersed():
    for seed in range(20):
        rng = np.random.default_rng(100 + seed)
        X = design(rng, 300)
        checks = check_counts(X, nb_counts(rng, X, 2.0))
        assert checks.regression_test.found, seed
        assert checks.likelihood_ratio.found, seed
        assert checks.pearson.found, seed
        assert checks.prefer_negative_binomial
        assert 1.0 < checks.theta < 4.0


def test_poisson_counts_are_rejected_at_about_the_nominal_rate():
    """Size of the regression test at the 5% level: 600 invented Poisson tables of 1,000 rows.

    The test is asymptotic and conservative in small samples (we measured 3.2% at 200 rows
    and 4.2% at 1,000 rows over 600 tables each); the rate must lie in [2.5%, 7.5%],
    about 2.8 binomial standard deviations (sqrt(0.05 * 0.95 / 600) = 0.9%) either side of 5%.
    """
    rng = np.random.default_rng(2026)
    rejected = 0
    for _ in range(600):
        X = design(rng, 1000)
        y = poisson_counts(rng, X)
        rejected += overdispersion_test(y, poisson_means(X, y)).found
    assert 0.025 <= rejected / 600 <= 0.075


def test_poisson_counts_do_not_call_for_the_negative_binomial():
    rng = np.random.default_rng(7)
    X = design(rng, 500)
    checks = check_counts(X, poisson_counts(rng, X))
    assert not checks.prefer_negative_binomial
    assert not checks.zeros_poisson.found
    assert "no evidence" in checks.regression_test.message


def test_excess_zeros_are_said_in_plain_words():
    rng = np.random.default_rng(11)
    X = design(rng, 600)
    y = poisson_counts(rng, X) * (rng.uniform(size=600) > 0.3)   # missed at 30% of sites
    checks = check_counts(X, y)
    assert checks.zeros_poisson.found
    assert checks.zeros_poisson.observed > checks.zeros_poisson.expected
    assert "many more zero counts" in checks.zeros_poisson.message
    assert "zero-inflated" in checks.zeros_poisson.message


def test_with_few_rows_the_model_without_covariates_is_used_and_said():
    rng = np.random.default_rng(5)
    X = rng.standard_normal((60, 10))
    y = rng.poisson(3.0, 60).astype(float)
    checks = check_counts(X, y)
    assert checks.notes and "without covariates" in checks.notes[0]
    assert checks.pearson.statistic == pytest.approx(np.sum((y - y.mean()) ** 2 / y.mean()) / 59)


def test_an_offset_enters_the_fits():
    rng = np.random.default_rng(6)
    X = design(rng, 400)
    effort = rng.uniform(0.5, 3.0, 400)
    y = rng.poisson(effort * np.exp(0.2 + X @ np.array([0.4, -0.3]))).astype(float)
    with_offset = check_counts(X, y, offset=np.log(effort))
    without = check_counts(X, y)
    assert not with_offset.prefer_negative_binomial     # Poisson once effort is accounted for
    assert without.pearson.statistic > with_offset.pearson.statistic
