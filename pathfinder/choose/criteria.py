"""Information criteria (AIC, AICc, BIC) for every model along a penalised path.

A penalised path offers one model per penalty. Information criteria rank them
without cross-validation: each trades the model's log-likelihood against the
number of parameters it spends. For a penalised model that number is its
*degrees of freedom* (df), which :func:`path_degrees_of_freedom` estimates.

Degrees of freedom
------------------
* Lasso (``mix == 1``): the number of non-zero coefficients, an unbiased
  estimate of the lasso's degrees of freedom (Zou, Hastie & Tibshirani 2007,
  Ann. Statist. 35:2173-2192).
* Elastic net and ridge (``mix < 1``): the trace of the hat matrix of the
  active set A (the non-zero coefficients), the degrees of freedom Zou & Hastie
  (2005, JRSS-B 67:301-320) give for the elastic net::

      df = tr[ X_A (X_A' W X_A + n * lam * (1 - mix) * diag(v_A))^{-1} X_A' W ]

  on the standardised scale the path was fitted on, with ``v`` the per-term
  penalty weights and W the IRLS working weights at the fitted values
  (observation weight times the family variance; for a Gaussian response the
  observation weights themselves). The columns of X_A are centred with the
  weights W, which accounts for the unpenalised intercept exactly: ``df + 1``
  is the trace of the hat matrix of the whole model, intercept included.
  For a GLM this is the usual linearised (IRLS) approximation. Only
  |A| x |A| matrices are formed, never n x n ones.

Conventions of the criteria (kept everywhere in pathfinder)
-----------------------------------------------------------
* Parameters counted: ``k = df + 1`` (the intercept). The variance of a
  Gaussian response is *not* counted by default, which is the convention of
  statsmodels' GLM (its ``aic`` and ``bic_llf`` use ``df_model + 1`` and count
  the scale only when asked to with ``dk_params=1``). ``count_variance=True``
  adds it (``k = df + 2`` for Gaussian), the convention of Burnham & Anderson
  (2002) and of Hurvich & Tsai's derivation of AICc. For AIC and BIC the
  choice shifts every Gaussian model on a path by the same amount, so it never
  changes which step is best; for AICc it changes the small-sample correction
  a little.
* ``AIC = -2 logL + 2k``; ``AICc = AIC + 2k(k + 1) / (n - k - 1)`` (Hurvich &
  Tsai 1989, Biometrika 76:297-307), infinite when ``n - k - 1 <= 0``;
  ``BIC = -2 logL + k log(n)``.
* The log-likelihood is the full one, constants included:
  Gaussian ``-n/2 (log(2 pi sigma2) + 1)`` with ``sigma2 = RSS / n``, the
  maximum-likelihood variance (statsmodels' "concentrated" Gaussian
  log-likelihood); binomial ``sum y log(mu) + (1 - y) log(1 - mu)`` (exact for
  0/1 data; for proportions the binomial coefficient is left out, because the
  number of trials is not known once weights are rescaled); Poisson
  ``sum y log(mu) - mu - log(y!)``; negative binomial (Venables & Ripley
  2002, section 7.4) ``sum log Gamma(y + theta) - log Gamma(theta) - log(y!)
  + theta log(theta / (theta + mu)) + y log(mu / (theta + mu))`` at the
  path's theta.
* A negative binomial path holds one theta (see
  :func:`pathfinder.core.glm.estimate_theta`); when it was estimated from
  the data (``fit.theta_estimated``) it is counted as one more parameter,
  ``k = df + 2``; a theta the user gave is not.
* Observation weights are rescaled to sum to the number of rows, as in the
  fit, and multiply each row's log-likelihood contribution (they act as
  frequency weights; in the Gaussian case ``RSS`` and ``n`` above are the
  weighted sum of squares and the weight total). The ``n`` in the penalty terms
  of AICc and BIC is the number of rows with positive weight.
* Gaussian paths also report ``deviance_explained`` (R^2) and ``adjusted_r2 =
  1 - (1 - R^2)(n - 1)/(n - df - 1)``, the common-practice formula with df in
  place of the number of predictors (intercept not counted).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import linalg

from ..core.families import get_family
from ..errors import InputError

LARGER_IS_BETTER = frozenset({"log_likelihood", "adjusted_r2", "deviance_explained"})
DEVIANCE_MISMATCH = 1e-6  # relative to the null deviance: data do not match the fit


# ---- checking the input once ---------------------------------------------------

def _design(fit, X):
    """X as a float matrix with the fit's columns, in the fit's order."""
    p = fit.coef.shape[1]
    if isinstance(X, pd.DataFrame):
        missing = [n for n in fit.names if n not in X.columns]
        if not missing:
            X = X[list(fit.names)]
        elif X.shape[1] != p:
            raise InputError(f"the table lacks the predictors {', '.join(map(str, missing[:5]))} "
                             "of the fitted path; pass the table the path was fitted on")
        X = X.to_numpy(dtype=float)
    X = np.asarray(X, dtype=float)
    if X.ndim != 2 or X.shape[1] != p:
        raise InputError(f"X has shape {X.shape} but the path was fitted on {p} predictors; "
                         "pass the predictors the path was fitted on")
    if not np.all(np.isfinite(X)):
        raise InputError("X contains missing or infinite values; pass the rows the path was fitted on")
    return X


def _vector(v, n, what, default):
    if v is None:
        return np.full(n, float(default))
    v = np.asarray(v, dtype=float).ravel()
    if v.shape[0] != n:
        raise InputError(f"{what} has {v.shape[0]} values but X has {n} rows; pass one per row")
    if not np.all(np.isfinite(v)):
        raise InputError(f"{what} contains missing or infinite values; fill or drop those rows")
    return v


def _weights(weights, n):
    """Observation weights rescaled to sum to n, as the fitting core does."""
    w = _vector(weights, n, "weights", 1.0)
    if np.any(w < 0) or w.sum() <= 0:
        raise InputError("weights must be non-negative and not all zero")
    return w * (n / w.sum())


# ---- degrees of freedom --------------------------------------------------------

def path_degrees_of_freedom(fit, X, weights=None, *, offset=None) -> np.ndarray:
    """Degrees of freedom of each model on the path, shape (K,).

    Lasso: the number of non-zero coefficients (Zou, Hastie & Tibshirani 2007).
    Elastic net and ridge: the trace of the hat matrix of the active set
    (Zou & Hastie 2005), with the IRLS working weights at the fitted values for
    binomial and Poisson responses; see the module notes for the formula.
    ``weights`` and ``offset`` must be those the path was fitted with (the
    offset matters only for binomial and Poisson elastic-net paths).
    """
    nonzero = fit.coef_std != 0
    if fit.mix >= 1.0:
        return nonzero.sum(axis=1).astype(float)
    X = _design(fit, X)
    n = X.shape[0]
    w = _weights(weights, n)
    offset = _vector(offset, n, "offset", 0.0)
    fam = get_family(fit.family, getattr(fit, "theta", None))

    ever = np.flatnonzero(nonzero.any(axis=0))
    df = np.zeros(len(fit.penalties))
    if ever.size == 0:
        return df
    Xs = (X[:, ever] - fit.center[ever]) / fit.scale[ever]   # standardised scale of the fit
    v = np.asarray(fit.term_weights, dtype=float)[ever]
    gram = None
    if fam.least_squares:
        gram = _centred_gram(Xs, w)                  # W = w at every step
    for k, lam in enumerate(fit.penalties):
        active = np.flatnonzero(nonzero[k, ever])
        if active.size == 0:
            continue
        if gram is None:
            eta = fit.intercept_std[k] + Xs @ fit.coef_std[k, ever] + offset
            # Fisher's working weights (w * V(mu) for the canonical links)
            working = fam.working_weights(eta, w)
            G = _centred_gram(Xs[:, active], working)
        else:
            G = gram[np.ix_(active, active)]
        ridge = n * lam * (1.0 - fit.mix) * v[active]
        df[k] = _hat_trace(G, ridge)
    return df


def _centred_gram(Xs, W):
    """``Xc' W Xc`` with the columns of Xs centred by their W-weighted means."""
    total = W.sum()
    m = (W @ Xs) / total
    Xc = Xs - m
    return (Xc * W[:, None]).T @ Xc


def _hat_trace(G, ridge):
    """``tr[(G + diag(ridge))^{-1} G]`` = tr of the hat matrix, from |A| x |A| matrices."""
    M = G + np.diag(ridge)
    try:
        return float(np.trace(linalg.solve(M, G, assume_a="pos")))
    except (linalg.LinAlgError, ValueError):
        # Unpenalised collinear terms: the generalised inverse gives the rank.
        return float(np.trace(np.linalg.pinv(M) @ G))


# ---- log-likelihoods -----------------------------------------------------------

def _check_matches_fit(fit, fam, y, mu, w):
    """The data must reproduce the fitted deviance, or every criterion is wrong."""
    dev = (w[:, None] * fam.unit_deviance(y[:, None], mu)).sum(axis=0)
    gap = np.abs(dev - fit.deviance) / max(fit.null_deviance, 1e-300)
    if np.any(gap > DEVIANCE_MISMATCH):
        k = int(np.argmax(gap))
        raise InputError(f"the data given do not reproduce the fitted path (deviance at step {k} "
                         f"is {dev[k]:.6g}, the fit has {fit.deviance[k]:.6g}); pass the X, y, "
                         "weights and offset the path was fitted with")
    return dev


# ---- the table -----------------------------------------------------------------

def quasi_criteria(log_likelihood, n_parameters, n, dispersion) -> dict:
    """QAIC and QAICc for overdispersed counts (Burnham & Anderson 2002, section 2.5).

    ``QAIC = -2 logL / c + 2K`` and ``QAICc = QAIC + 2K(K + 1) / (n - K - 1)``,
    with ``c`` the dispersion estimated from the model of every term (the
    Pearson statistic over its residual degrees of freedom) and ``K`` the
    parameters plus one for ``c`` itself. With ``c <= 1`` the counts are not
    overdispersed and the book keeps ``c = 1``; so does this function.
    """
    ll = np.asarray(log_likelihood, dtype=float)
    c = max(float(dispersion), 1.0)
    K = np.asarray(n_parameters, dtype=float) + 1.0
    qaic = -2.0 * ll / c + 2.0 * K
    room = n - K - 1.0
    with np.errstate(divide="ignore", invalid="ignore"):
        qaicc = np.where(room > 0, qaic + 2.0 * K * (K + 1.0) / room, np.inf)
    return {"qaic": qaic, "qaicc": qaicc}


def information_criteria(fit, X, y, *, weights=None, offset=None,
                         count_variance=False, dispersion=None) -> pd.DataFrame:
    """One row per penalty: degrees of freedom, log-likelihood, AIC, AICc and BIC.

    Columns: step, penalty, n_terms, df, n_parameters (k), log_likelihood,
    aic, aicc, bic; for a Gaussian response also deviance_explained (R^2) and
    adjusted_r2. ``X, y, weights, offset`` must be the data the path was
    fitted on (checked: they must reproduce its deviance). ``count_variance``
    counts the Gaussian error variance as a parameter (default: not counted,
    as in statsmodels' GLM). ``dispersion`` (overdispersed counts fitted as
    Poisson) adds qaic and qaicc (:func:`quasi_criteria`). The conventions
    are set out in the module notes.
    """
    X = _design(fit, X)
    n_rows = X.shape[0]
    if y is None:
        raise InputError("information criteria need the response y the path was fitted on")
    y = _vector(y, n_rows, "y", 0.0)
    w = _weights(weights, n_rows)
    off = _vector(offset, n_rows, "offset", 0.0)
    fam = get_family(fit.family, getattr(fit, "theta", None))

    mu = fit.predict(X, kind="response", offset=off)          # (n, K)
    dev = _check_matches_fit(fit, fam, y, mu, w)
    loglik = fam.log_likelihood(y, mu, w)
    df = path_degrees_of_freedom(fit, X, w, offset=off)

    n = int(np.count_nonzero(w > 0))
    k = (df + 1.0 + (1.0 if (count_variance and fam.has_scale) else 0.0)
         + (1.0 if getattr(fit, "theta_estimated", False) else 0.0))
    aic = -2.0 * loglik + 2.0 * k
    room = n - k - 1.0
    with np.errstate(divide="ignore", invalid="ignore"):
        aicc = np.where(room > 0, aic + 2.0 * k * (k + 1.0) / room, np.inf)
    bic = -2.0 * loglik + k * np.log(n)

    table = pd.DataFrame({
        "step": np.arange(len(fit.penalties)),
        "penalty": fit.penalties,
        "n_terms": fit.n_terms,
        "df": df,
        "n_parameters": k,
        "log_likelihood": loglik,
        "aic": aic,
        "aicc": aicc,
        "bic": bic,
    })
    if dispersion is not None:
        for name, values in quasi_criteria(loglik, k, n, dispersion).items():
            table[name] = values
    if fam.least_squares:
        b0 = fam.null_intercept(y, w, off)
        null_dev = fam.deviance(y, b0 + off, w)
        r2 = 1.0 - dev / null_dev
        with np.errstate(divide="ignore", invalid="ignore"):
            adjusted = np.where(n - df - 1.0 > 0, 1.0 - (1.0 - r2) * (n - 1.0) / (n - df - 1.0), np.nan)
        table["deviance_explained"] = r2
        table["adjusted_r2"] = adjusted
    return table


def best_by(criteria_frame, column) -> int:
    """The step that is best by ``column`` of an :func:`information_criteria` table.

    The smallest value wins (aic, aicc, bic, df, ...); for ``log_likelihood``,
    ``adjusted_r2`` and ``deviance_explained`` the largest does. Ties go to the
    larger penalty, the simpler model. Missing values are ignored.
    """
    if column not in criteria_frame.columns:
        raise InputError(f"no column {column!r} in the criteria table; use one of "
                         f"{', '.join(map(str, criteria_frame.columns))}")
    values = criteria_frame[column].to_numpy(dtype=float)
    if column in LARGER_IS_BETTER:
        values = -values
    usable = ~np.isnan(values)
    if not usable.any():
        raise InputError(f"the column {column!r} has no values to choose by")
    best = np.min(values[usable])
    tied = usable & (values == best)
    penalties = criteria_frame["penalty"].to_numpy(dtype=float)
    rows = np.flatnonzero(tied)
    row = rows[np.argmax(penalties[rows])]
    return int(criteria_frame["step"].to_numpy()[row])
