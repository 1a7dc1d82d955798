"""Degrees of freedom and information criteria along a path, against outside references.

References named beside each check: statsmodels (GLM ``llf``, ``aic``,
``bic_llf``, ``info_criteria``; OLS ``rsquared_adj``), Hurvich & Tsai (1989)
for AICc, Zou, Hastie & Tibshirani (2007) for the lasso df and Zou & Hastie
(2005) for the elastic-net df (checked against the hat matrix formed
explicitly with numpy). The data are invented.

Convention checked here: statsmodels' GLM counts ``df_model + 1`` parameters
for every family and does not count the Gaussian scale (its ``dk_params``
defaults to 0), while its Gaussian ``llf`` uses the maximum-likelihood
variance RSS / n. pathfinder does the same by default; ``count_variance=True``
matches statsmodels' ``dk_params=1``.
"""

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from hypothesis import given
from hypothesis import strategies as st

from pathfinder.choose.criteria import best_by, information_criteria, path_degrees_of_freedom
from pathfinder.core import fit_path
from pathfinder.errors import InputError

SM_FAMILIES = {"gaussian": sm.families.Gaussian(), "binomial": sm.families.Binomial(),
               "poisson": sm.families.Poisson()}


def invented_data(seed, family, n=150, p=5, with_offset=False):
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, p)) * rng.uniform(0.5, 5, p) + rng.uniform(-10, 10, p)
    Z = (X - X.mean(0)) / X.std(0)
    eta = 0.3 + Z[:, 0] * 0.7 - 0.4 * Z[:, 1] + 0.2 * Z[:, 2]
    offset = rng.uniform(-0.5, 0.5, n) if with_offset else None
    eta_all = eta + (0 if offset is None else offset)
    if family == "gaussian":
        y = eta_all + rng.standard_normal(n)
    elif family == "binomial":
        y = rng.binomial(1, 1 / (1 + np.exp(-eta_all))).astype(float)
    else:
        y = rng.poisson(np.exp(eta_all)).astype(float)
    return X, y, offset, rng


# ---- unpenalised fits against statsmodels ---------------------------------------

@pytest.mark.parametrize("family,with_offset", [("gaussian", False), ("binomial", False),
                                                ("poisson", True)])
def test_unpenalised_criteria_equal_statsmodels(family, with_offset):
    X, y, offset, _ = invented_data(1, family, with_offset=with_offset)
    fit = fit_path(X, y, family=family, penalties=[0.0], offset=offset, tol=1e-12)
    table = information_criteria(fit, X, y, offset=offset)
    ref = sm.GLM(y, sm.add_constant(X), family=SM_FAMILIES[family], offset=offset).fit(tol=1e-12)
    # Reference: statsmodels GLM llf, aic and bic_llf (k = df_model + 1, scale not counted).
    assert table["log_likelihood"][0] == pytest.approx(ref.llf, rel=1e-8)
    assert table["aic"][0] == pytest.approx(ref.aic, rel=1e-8)
    assert table["bic"][0] == pytest.approx(ref.bic_llf, rel=1e-8)
    assert table["df"][0] == ref.df_model


def test_gaussian_log_likelihood_uses_the_mle_variance():
    X, y, _, _ = invented_data(2, "gaussian")
    fit = fit_path(X, y, penalties=[0.0], tol=1e-12)
    table = information_criteria(fit, X, y)
    n = len(y)
    rss = np.sum((y - fit.predict(X, 0.0)) ** 2)
    # Common practice (maximum-likelihood variance RSS / n in the Gaussian log-likelihood).
    assert table["log_likelihood"][0] == pytest.approx(-n / 2 * (np.log(2 * np.pi * rss / n) + 1), rel=1e-12)


@pytest.mark.parametrize("family", ["gaussian", "binomial", "poisson"])
def test_counting_the_variance_matches_statsmodels_dk_params(family):
    X, y, _, _ = invented_data(3, family)
    fit = fit_path(X, y, family=family, penalties=[0.0], tol=1e-12)
    table = information_criteria(fit, X, y, count_variance=True)
    ref = sm.GLM(y, sm.add_constant(X), family=SM_FAMILIES[family]).fit(tol=1e-12)
    extra = 1 if family == "gaussian" else 0  # only the Gaussian family has a variance to count
    # Reference: statsmodels GLMResults.info_criteria(..., dk_params=1) for Gaussian, dk_params=0 otherwise.
    assert table["aic"][0] == pytest.approx(ref.info_criteria("aic", dk_params=extra), rel=1e-8)
    assert table["bic"][0] == pytest.approx(ref.info_criteria("bic", dk_params=extra), rel=1e-8)
    assert table["n_parameters"][0] == X.shape[1] + 1 + extra


@pytest.mark.parametrize("family", ["gaussian", "binomial", "poisson"])
def test_weighted_log_likelihood_equals_statsmodels_frequency_weights(family):
    X, y, _, rng = invented_data(4, family)
    w = rng.uniform(0.2, 3.0, len(y))
    w[:7] = 0.0  # rows left out
    fit = fit_path(X, y, family=family, penalties=[0.0], weights=w, tol=1e-12)
    table = information_criteria(fit, X, y, weights=w)
    rescaled = w * len(y) / w.sum()
    ref = sm.GLM(y, sm.add_constant(X), family=SM_FAMILIES[family], freq_weights=rescaled).fit(tol=1e-12)
    # Reference: statsmodels GLM with freq_weights = weights rescaled to sum to n (llf and aic).
    assert table["log_likelihood"][0] == pytest.approx(ref.llf, rel=1e-8)
    assert table["aic"][0] == pytest.approx(ref.aic, rel=1e-8)
    # BIC and AICc count only the rows with positive weight.
    n_pos = len(y) - 7
    k = table["n_parameters"][0]
    assert table["bic"][0] - table["aic"][0] == pytest.approx(k * (np.log(n_pos) - 2), rel=1e-10)


# ---- AICc -------------------------------------------------------------------------

def test_gaussian_aicc_equals_hurvich_tsai():
    X, y, _, _ = invented_data(5, "gaussian", n=30, p=4)
    fit = fit_path(X, y, penalties=[0.0], tol=1e-12)
    table = information_criteria(fit, X, y, count_variance=True)
    n, m = len(y), X.shape[1] + 1  # m regression parameters, intercept included
    sigma2 = np.sum((y - fit.predict(X, 0.0)) ** 2) / n
    # Reference: Hurvich & Tsai (1989) Biometrika 76:297-307, AICc = n log(sigma2) + n (n + m) / (n - m - 2),
    # plus the constant n log(2 pi) of the full log-likelihood.
    hurvich_tsai = n * np.log(sigma2) + n * (n + m) / (n - m - 2) + n * np.log(2 * np.pi)
    assert table["aicc"][0] == pytest.approx(hurvich_tsai, rel=1e-10)


@pytest.mark.parametrize("family", ["gaussian", "binomial", "poisson"])
def test_aicc_correction_along_a_path(family):
    X, y, _, _ = invented_data(6, family, n=40, p=8)
    fit = fit_path(X, y, family=family, mix=0.6, n_penalties=30)
    table = information_criteria(fit, X, y)
    k, n = table["n_parameters"].to_numpy(), len(y)
    # Reference: Hurvich & Tsai (1989), AICc = AIC + 2k(k+1)/(n-k-1).
    np.testing.assert_allclose(table["aicc"], table["aic"] + 2 * k * (k + 1) / (n - k - 1), rtol=1e-12)
    assert np.all(table["aicc"] > table["aic"])


def test_aicc_is_infinite_without_room():
    X, y, _, _ = invented_data(7, "gaussian", n=7, p=5)
    fit = fit_path(X, y, penalties=[0.0], tol=1e-12)
    table = information_criteria(fit, X, y)  # k = 6, n - k - 1 = 0
    assert table["aicc"][0] == np.inf
    assert np.isfinite(table["aic"][0])


# ---- degrees of freedom -------------------------------------------------------------

def test_lasso_df_is_the_number_of_nonzero_coefficients():
    X, y, _, _ = invented_data(8, "binomial", p=10)
    fit = fit_path(X, y, family="binomial", mix=1.0)
    df = path_degrees_of_freedom(fit, X)
    # Reference: Zou, Hastie & Tibshirani (2007) Ann. Statist. 35:2173-2192 (df = number of non-zeros).
    np.testing.assert_array_equal(df, (fit.coef != 0).sum(axis=1))
    assert df[0] <= 1 and df[-1] > 5


def test_ridge_df_equals_the_closed_form_trace():
    rng = np.random.default_rng(9)
    n, p = 50, 6
    X = rng.standard_normal((n, p)) * rng.uniform(0.5, 4, p) + 3
    y = X[:, 0] - 0.5 * X[:, 1] + rng.standard_normal(n)
    grid = np.logspace(3, -6, 40)
    fit = fit_path(X, y, mix=0.0, penalties=grid, tol=1e-12)
    df = path_degrees_of_freedom(fit, X)
    Xs = (X - X.mean(0)) / X.std(0)
    # Reference: Zou & Hastie (2005) / ridge closed form, tr[Xs (Xs'Xs + n lam I)^{-1} Xs'] with numpy.
    closed = [np.trace(Xs @ np.linalg.solve(Xs.T @ Xs + n * lam * np.eye(p), Xs.T)) for lam in fit.penalties]
    np.testing.assert_allclose(df, closed, rtol=1e-10, atol=1e-12)
    assert np.all(np.diff(df) > 0)             # penalties decrease along the path: df rises
    assert df[0] < 0.01 and df[-1] > p - 0.01  # from ~0 at large penalty to ~p


def test_weighted_elastic_net_df_equals_the_full_hat_matrix_trace():
    X, y, _, rng = invented_data(10, "gaussian", n=60, p=5)
    w = rng.uniform(0.1, 2.0, len(y))
    v = np.array([0.0, 1.0, 2.0, 1.0, 0.5])  # term 0 always kept, unpenalised
    fit = fit_path(X, y, mix=0.4, weights=w, term_weights=v, n_penalties=20, tol=1e-12)
    df = path_degrees_of_freedom(fit, X, w)
    W = np.diag(w * len(y) / w.sum())
    n = len(y)
    for k in range(len(fit.penalties)):
        active = np.flatnonzero(fit.coef[k] != 0)
        Z = np.column_stack([np.ones(n), (X[:, active] - fit.center[active]) / fit.scale[active]])
        D = np.diag(np.r_[0.0, n * fit.penalties[k] * (1 - fit.mix) * v[active]])
        H = Z @ np.linalg.solve(Z.T @ W @ Z + D, Z.T @ W)
        # Reference: Zou & Hastie (2005) elastic-net df as the hat-matrix trace, formed with numpy
        # (n x n, intercept unpenalised): df + 1 = tr(H).
        assert df[k] + 1 == pytest.approx(np.trace(H), rel=1e-9)


def test_binomial_elastic_net_df_uses_working_weights():
    X, y, _, _ = invented_data(11, "binomial", n=80, p=5)
    fit = fit_path(X, y, family="binomial", mix=0.3, n_penalties=15, tol=1e-12)
    df = path_degrees_of_freedom(fit, X)
    n = len(y)
    mu = fit.predict(X)
    for k in range(len(fit.penalties)):
        active = np.flatnonzero(fit.coef[k] != 0)
        Z = np.column_stack([np.ones(n), (X[:, active] - fit.center[active]) / fit.scale[active]])
        W = np.diag(mu[:, k] * (1 - mu[:, k]))  # IRLS working weights at the fitted values
        D = np.diag(np.r_[0.0, np.full(active.size, n * fit.penalties[k] * (1 - fit.mix))])
        H = Z @ np.linalg.solve(Z.T @ W @ Z + D, Z.T @ W)
        # Reference: linearised (IRLS) hat matrix formed with numpy: df + 1 = tr(H).
        assert df[k] + 1 == pytest.approx(np.trace(H), rel=1e-9)
    assert np.all(df <= fit.n_terms + 1e-12)  # shrinkage spends fewer df than a plain fit


# ---- Gaussian extras ---------------------------------------------------------------

def test_adjusted_r2_equals_statsmodels_ols():
    X, y, _, _ = invented_data(12, "gaussian", n=40, p=6)
    fit = fit_path(X, y, penalties=[0.0], tol=1e-12)
    table = information_criteria(fit, X, y)
    ols = sm.OLS(y, sm.add_constant(X)).fit()
    # Reference: statsmodels OLS rsquared and rsquared_adj.
    assert table["deviance_explained"][0] == pytest.approx(ols.rsquared, rel=1e-9)
    assert table["adjusted_r2"][0] == pytest.approx(ols.rsquared_adj, rel=1e-9)


def test_adjusted_r2_along_a_lasso_path():
    X, y, _, _ = invented_data(13, "gaussian", n=40, p=6)
    fit = fit_path(X, y, n_penalties=25)
    table = information_criteria(fit, X, y)
    n, df = len(y), table["df"].to_numpy()
    r2 = fit.deviance_explained
    np.testing.assert_allclose(table["deviance_explained"], r2, rtol=1e-8, atol=1e-12)
    # Common practice: adjusted R^2 = 1 - (1 - R^2)(n - 1)/(n - df - 1).
    np.testing.assert_allclose(table["adjusted_r2"], 1 - (1 - r2) * (n - 1) / (n - df - 1), rtol=1e-8, atol=1e-12)


def test_only_gaussian_tables_carry_r2():
    X, y, _, _ = invented_data(13, "binomial")
    table = information_criteria(fit_path(X, y, family="binomial", n_penalties=5), X, y)
    assert "adjusted_r2" not in table.columns and "deviance_explained" not in table.columns


# ---- properties ---------------------------------------------------------------------

@given(seed=st.integers(0, 10_000), family=st.sampled_from(["gaussian", "binomial", "poisson"]),
       mix=st.sampled_from([1.0, 0.5, 0.0]), count_variance=st.booleans())
def test_bic_minus_aic_is_k_times_log_n_minus_2(seed, family, mix, count_variance):
    X, y, _, _ = invented_data(seed, family, n=60, p=4)
    fit = fit_path(X, y, family=family, mix=mix, n_penalties=10)
    table = information_criteria(fit, X, y, count_variance=count_variance)
    k = table["n_parameters"].to_numpy()
    extra = 1.0 if (count_variance and family == "gaussian") else 0.0
    np.testing.assert_allclose(k, table["df"] + 1 + extra)
    # Definitions: BIC - AIC = k (log n - 2).
    np.testing.assert_allclose(table["bic"] - table["aic"], k * (np.log(len(y)) - 2), rtol=1e-9, atol=1e-9)


# ---- choosing a step -----------------------------------------------------------------

def test_best_by_picks_the_minimum_and_breaks_ties_towards_the_larger_penalty():
    frame = pd.DataFrame({"step": [0, 1, 2, 3, 4], "penalty": [1.0, 0.5, 0.25, 0.12, 0.06],
                          "aic": [10.0, 7.0, 8.0, 7.0, 9.0], "bic": [5.0, 4.0, 3.0, 2.0, 1.0],
                          "adjusted_r2": [0.1, 0.5, 0.4, 0.5, np.nan]})
    assert best_by(frame, "aic") == 1
    assert best_by(frame, "bic") == 4
    assert best_by(frame, "adjusted_r2") == 1  # larger is better; tie to the larger penalty
    with pytest.raises(InputError, match="no column"):
        best_by(frame, "cp")


def test_best_by_on_a_real_path_agrees_with_argmin():
    X, y, _, _ = invented_data(14, "poisson", p=8)
    fit = fit_path(X, y, family="poisson", n_penalties=40)
    table = information_criteria(fit, X, y)
    for column in ("aic", "aicc", "bic"):
        assert best_by(table, column) == int(np.argmin(table[column]))
    assert 0 < best_by(table, "bic") <= best_by(table, "aic")  # BIC's heavier penalty: smaller model


# ---- bad input -------------------------------------------------------------------------

def test_data_that_do_not_match_the_fit_are_refused():
    X, y, offset, _ = invented_data(15, "poisson", with_offset=True)
    fit = fit_path(X, y, family="poisson", offset=offset, n_penalties=10)
    with pytest.raises(InputError, match="do not reproduce the fitted path") as info:
        information_criteria(fit, X, y)  # the offset was forgotten
    assert "\n" not in str(info.value)
    with pytest.raises(InputError, match="rows"):
        information_criteria(fit, X, y[:-1], offset=offset)
    with pytest.raises(InputError, match="predictors"):
        information_criteria(fit, X[:, :3], y, offset=offset)


def test_dataframe_columns_are_matched_by_name():
    X, y, _, _ = invented_data(16, "gaussian")
    frame = pd.DataFrame(X, columns=[f"site_{j}" for j in range(X.shape[1])])
    fit = fit_path(frame, y, mix=0.5, n_penalties=10)
    shuffled = frame[frame.columns[::-1]]
    pd.testing.assert_frame_equal(information_criteria(fit, shuffled, y), information_criteria(fit, frame, y))


def test_quasi_criteria_follow_burnham_and_anderson():
    """Burnham & Anderson (2002, section 2.5): QAIC = -2 logL / c + 2K, K counting c;
    QAICc adds 2K(K + 1)/(n - K - 1); c below 1 is taken as 1."""
    from pathfinder.choose.criteria import quasi_criteria

    q = quasi_criteria([-120.0, -100.0], [3, 5], 60, 2.5)
    assert q["qaic"] == pytest.approx([2 * 120 / 2.5 + 8, 2 * 100 / 2.5 + 12])
    assert q["qaicc"][1] == pytest.approx(2 * 100 / 2.5 + 12 + 2 * 6 * 7 / (60 - 7))
    same = quasi_criteria([-120.0], [3], 60, 0.7)
    assert same["qaic"][0] == pytest.approx(240 + 8)
