"""Counts more variable than Poisson allows, and more zeros than a model expects.

Ecological counts are rarely Poisson: animals clump, observers differ, sites
differ in ways no covariate measures. A Poisson model of such counts makes
every standard error, information criterion and Akaike weight overconfident
by the same factor. These checks find that and say it in plain words:

* :func:`pearson_dispersion`  the Pearson statistic of a Poisson fit divided
  by its residual degrees of freedom (1 for Poisson variation; McCullagh &
  Nelder 1989, Generalized Linear Models, section 4.5), with the upper tail of
  its chi-square reference;
* :func:`overdispersion_test`  the regression test of Cameron & Trivedi
  (1990, J. Econometrics 46:347-364) of Poisson against the negative binomial
  (NB2, variance ``mu + alpha mu^2``): the least-squares slope, through the
  origin, of ``((y - mu)^2 - y) / mu`` on ``mu``, whose t statistic is
  asymptotically standard normal when the counts are Poisson; one-sided,
  since only ``alpha > 0`` is overdispersion;
* :func:`theta_likelihood_ratio`  the likelihood-ratio test of the Poisson
  model inside the negative binomial. Poisson sits on the boundary of the
  negative binomial (``1 / theta = 0``), so the statistic follows an equal
  mixture of a point mass at 0 and chi-square(1) (a "chi-bar-squared";
  Self & Liang 1987, JASA 82:605-610) and its p-value is half the chi-square(1) tail;
* :func:`excess_zeros`  the observed number of zero counts against the number
  the fitted model expects, a plain comparison (not a formal test: it
  ignores the uncertainty of the fitted means) flagged when the excess is
  more than ``ZERO_EXCESS_SD`` standard deviations of a sum of independent
  yes/no outcomes;
* :func:`check_counts`  all of them for one table: Poisson and negative
  binomial fits of the model of every term, and which family the data call for.

Each returns a small frozen dataclass with the statistic, the p-value where
there is one, and a one-line message for a reader.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

from ..core.families import NEGATIVE_BINOMIAL, POISSON, THETA_MAX
from ..core.glm import ROWS_PER_PARAMETER, fit_glm

LEVEL = 0.05          # the tests' level: overdispersion is reported below it
ZERO_EXCESS_SD = 3.0  # excess zeros are reported beyond this many standard deviations


@dataclass(frozen=True)
class DispersionCheck:
    """One check: what it is, its statistic and p-value, whether it found overdispersion."""

    check: str
    statistic: float
    p_value: float
    found: bool
    message: str


@dataclass(frozen=True)
class ZeroCheck:
    """Observed against expected zero counts under a fitted model."""

    model: str
    observed: float
    expected: float
    z: float
    found: bool
    message: str


@dataclass(frozen=True)
class CountChecks:
    """Every check of one table of counts, and the family they call for."""

    pearson: DispersionCheck
    regression_test: DispersionCheck
    likelihood_ratio: DispersionCheck
    zeros_poisson: ZeroCheck
    zeros_negative_binomial: ZeroCheck
    theta: float
    prefer_negative_binomial: bool
    notes: tuple


def _arrays(y, mu, weights):
    y = np.asarray(y, dtype=float).ravel()
    mu = np.maximum(np.asarray(mu, dtype=float).ravel(), 1e-300)
    w = np.ones_like(y) if weights is None else np.asarray(weights, dtype=float).ravel()
    return y, mu, w * (y.shape[0] / w.sum())


def _p_words(p):
    return "p < 0.001" if p < 0.001 else f"p = {p:.3f}"


def pearson_dispersion(y, mu, n_parameters, weights=None, level=LEVEL) -> DispersionCheck:
    """Pearson statistic of a Poisson fit over its residual degrees of freedom.

    ``sum w (y - mu)^2 / mu / (n - k)`` with ``k = n_parameters`` (intercept
    included); the p-value is the upper tail of chi-square(n - k) at the
    Pearson statistic, a large-sample reference that is rough when many
    means are small.
    """
    y, mu, w = _arrays(y, mu, weights)
    n = int(np.count_nonzero(w > 0))
    dof = n - int(n_parameters)
    if dof <= 0:
        return DispersionCheck("Pearson dispersion", np.nan, np.nan, False,
                               "Pearson dispersion: not defined (no residual degrees of freedom)")
    pearson = float(np.dot(w, (y - mu) ** 2 / mu))
    ratio = pearson / dof
    p = float(stats.chi2.sf(pearson, dof))
    found = p < level and ratio > 1
    words = (f"the counts vary about {ratio:.3g} times as much as a Poisson model allows"
             if found else "no more than a Poisson model allows")
    return DispersionCheck("Pearson dispersion", ratio, p, found,
                           f"Pearson dispersion of the Poisson fit: {ratio:.3g} (1 for Poisson "
                           f"variation, {_p_words(p)}): {words}")


def overdispersion_test(y, mu, weights=None, level=LEVEL) -> DispersionCheck:
    """Cameron & Trivedi's (1990) regression test of Poisson against the negative binomial.

    With ``mu`` the means of a Poisson fit, regress ``((y - mu)^2 - y) / mu``
    on ``mu`` by least squares through the origin (weighted by the
    observation weights); the slope estimates ``alpha = 1 / theta`` of an NB2
    variance ``mu + alpha mu^2``, and its t statistic (with the residual
    standard error of that regression) is compared with the upper tail of
    the standard normal.
    """
    y, mu, w = _arrays(y, mu, weights)
    z = ((y - mu) ** 2 - y) / mu
    sxx = float(np.dot(w, mu * mu))
    alpha = float(np.dot(w, mu * z)) / sxx
    resid = z - alpha * mu
    dof = max(int(np.count_nonzero(w > 0)) - 1, 1)
    se = np.sqrt(float(np.dot(w, resid * resid)) / dof / sxx)
    t = alpha / se if se > 0 else (np.inf if alpha > 0 else 0.0)
    p = float(stats.norm.sf(t))
    found = p < level
    if found:
        message = (f"the counts are overdispersed (Cameron-Trivedi test against the negative "
                   f"binomial: t = {t:.2f}, {_p_words(p)}): a negative binomial model suits them "
                   "better than Poisson")
    else:
        message = (f"no evidence that the counts vary more than Poisson (Cameron-Trivedi test: "
                   f"t = {t:.2f}, {_p_words(p)})")
    return DispersionCheck("Cameron-Trivedi regression test", float(t), p, found, message)


def theta_likelihood_ratio(loglik_poisson, loglik_negative_binomial, level=LEVEL) -> DispersionCheck:
    """Likelihood-ratio test of Poisson (``1 / theta = 0``) inside the negative binomial.

    ``LR = 2 (logL_NB - logL_Poisson)``; on the boundary its null distribution
    is half a point mass at 0 and half chi-square(1) (Self & Liang 1987), so
    the p-value is ``chi2.sf(LR, 1) / 2`` for ``LR > 0`` and 1 at ``LR = 0``.
    """
    lr = max(2.0 * (float(loglik_negative_binomial) - float(loglik_poisson)), 0.0)
    p = 0.5 * float(stats.chi2.sf(lr, 1)) if lr > 0 else 1.0
    found = p < level
    words = ("the negative binomial fits clearly better than Poisson" if found else
             "the negative binomial fits no better than Poisson")
    return DispersionCheck("likelihood ratio of theta", lr, p, found,
                           f"likelihood ratio of the negative binomial against Poisson: "
                           f"{lr:.3g} ({_p_words(p)}, boundary-corrected): {words}")


def excess_zeros(y, mu, theta=None, weights=None) -> ZeroCheck:
    """Observed zero counts against the number a fitted Poisson (or, with ``theta``,
    negative binomial) model expects.

    Expected: ``sum w P(Y = 0)``, with ``P(Y = 0) = exp(-mu)`` (Poisson) or
    ``(theta / (theta + mu))^theta`` (NB2); the excess is measured in standard
    deviations ``sqrt(sum w p (1 - p))`` of the count of zeros and reported
    beyond ``ZERO_EXCESS_SD`` of them.
    """
    y, mu, w = _arrays(y, mu, weights)
    if theta is None:
        p0, model = np.exp(-mu), "Poisson"
    else:
        p0, model = np.exp(-theta * np.log1p(mu / theta)), "negative binomial"
    observed = float(np.dot(w, y == 0))
    expected = float(np.dot(w, p0))
    sd = float(np.sqrt(np.dot(w, p0 * (1 - p0))))
    z = (observed - expected) / sd if sd > 0 else (np.inf if observed > expected else 0.0)
    found = z > ZERO_EXCESS_SD
    if found:
        message = (f"many more zero counts than the {model} model expects ({observed:.0f} "
                   f"observed, {expected:.1f} expected): often a sign that the species was missed "
                   "or absent at some sites for reasons the model does not describe; check survey "
                   "effort and detection, and consider a zero-inflated or hurdle model")
    else:
        message = (f"zero counts as the {model} model expects ({observed:.0f} observed, "
                   f"{expected:.1f} expected)")
    return ZeroCheck(model, observed, expected, float(z), found, message)


def check_counts(X, y, *, offset=None, weights=None, level=LEVEL) -> CountChecks:
    """Every check for one table of counts, against the model of every term.

    The Poisson and negative binomial models hold every column of X (the
    "global model", from which Burnham & Anderson 2002, section 2.5, judge the
    overdispersion of a set of candidate models). With fewer than
    ``ROWS_PER_PARAMETER`` rows per parameter that model would overfit and
    hide overdispersion, so the intercept-only model is used instead and a
    note says so (it overstates the overdispersion when covariates matter).
    The data call for the negative binomial when the Cameron-Trivedi test
    finds overdispersion at ``level``.
    """
    X = np.asarray(X, dtype=float)
    y = np.asarray(y, dtype=float)
    n = y.shape[0]
    notes = []
    if X.ndim != 2 or n < ROWS_PER_PARAMETER * (X.shape[1] + 1):
        notes.append(f"dispersion checked against the model without covariates: fewer than "
                     f"{ROWS_PER_PARAMETER} rows per parameter of the model of every term "
                     "(this overstates overdispersion when covariates matter)")
        X = np.empty((n, 0))
    poisson = fit_glm(X, y, POISSON, offset=offset, weights=weights)
    nb = fit_glm(X, y, NEGATIVE_BINOMIAL, offset=offset, weights=weights)
    eta_p = poisson.intercept + X @ poisson.coef + (0 if offset is None else np.asarray(offset))
    eta_nb = nb.intercept + X @ nb.coef + (0 if offset is None else np.asarray(offset))
    mu_p, mu_nb = POISSON.inverse_link(eta_p), POISSON.inverse_link(eta_nb)
    _, _, w = _arrays(y, mu_p, weights)
    fixed = NEGATIVE_BINOMIAL.with_theta(nb.theta)
    pearson = pearson_dispersion(y, mu_p, X.shape[1] + 1, w, level)
    regression = overdispersion_test(y, mu_p, w, level)
    lr = theta_likelihood_ratio(POISSON.log_likelihood(y, mu_p, w), fixed.log_likelihood(y, mu_nb, w),
                                level)
    zeros_p = excess_zeros(y, mu_p, None, w)
    zeros_nb = excess_zeros(y, mu_nb, nb.theta, w)
    if nb.theta >= THETA_MAX:
        notes.append("the negative binomial's theta reached its cap: no overdispersion to measure")
    return CountChecks(pearson, regression, lr, zeros_p, zeros_nb, float(nb.theta),
                       regression.found, tuple(notes))
