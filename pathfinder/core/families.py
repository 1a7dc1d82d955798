"""Response families: one class per family, the only place that knows them by name.

Three families cover the responses of habitat models:

* :class:`Gaussian`  a continuous measure (cover, biomass), identity link;
* :class:`Binomial`  presence/absence (or a proportion), logit link;
* :class:`Poisson`   a count, log link (survey effort enters as an offset).

Each family object holds everything the rest of pathfinder asks about a
response: its link and inverse link, variance function, unit deviance and
full log-likelihood, the intercept-only fit, which responses it accepts,
which code selects its row function in the compiled kernels, which
held-out metrics make sense for it and the words a reader sees. Code outside
this module asks the object (``family.binary``, ``family.least_squares``,
``family.metrics``) and never compares a family's name, so adding a family
means one class here, its row in the compiled kernels and its reference
tests. (The layout follows the family classes of statsmodels, one class per
family exposing deviance, log-likelihood, variance and link.)

The deviance is the usual GLM deviance (twice the log-likelihood ratio
against the saturated model), so the penalised objective of the fitting core
is ``sum(w * deviance_i) / (2 n) + penalty``.
"""

from __future__ import annotations

import numpy as np
from scipy.special import expit, gammaln, xlogy

from ..errors import InputError
from . import kernels

# Bounds that keep the working weights of a nearly separated binomial fit, or
# a Poisson fit with an enormous linear predictor, away from 0 and infinity.
_PROB_EPS = 1e-5
_ETA_MAX = 30.0

# Codes of the row functions in the compiled kernels (core/kernels.py,
# core/kernels_subsets.py); the Gaussian rows need no function of their own.
GAUSSIAN_CODE, BINOMIAL_CODE, POISSON_CODE = 0, 1, 2

COMMON_METRICS = ("deviance", "mse", "mae", "deviance_explained")


class Family:
    """What every family provides; subclasses fill in the arithmetic."""

    name: str = ""
    link_name: str = ""
    code: int = -1                 # row function of the compiled kernels
    least_squares = False          # the deviance is a residual sum of squares (closed-form fits)
    binary = False                 # presence/absence: folds are stratified by it, AUC applies
    counts = False                 # whole-number counts (intake checks the response is one)
    has_scale = False              # an error variance that criteria may count as a parameter
    metrics: tuple = COMMON_METRICS
    row_bound = 0.0                # the compiled row functions' floor or cap (see subclasses)
    kind = ""                      # the response in a reader's words

    # ---- arithmetic ------------------------------------------------------
    def inverse_link(self, eta):
        raise NotImplementedError

    def link(self, mu):
        raise NotImplementedError

    def variance(self, mu):
        raise NotImplementedError

    def unit_deviance(self, y, mu):
        raise NotImplementedError

    def log_likelihood(self, y, mu, w):
        """Full log-likelihood of each column of ``mu`` (n, K) (or of ``mu`` (n,)); ``w`` sums to n."""
        raise NotImplementedError

    def deviance(self, y, mu, w) -> float:
        """Weighted total deviance ``sum(w * d(y, mu))``."""
        return float(np.dot(w, self.unit_deviance(y, mu)))

    def evaluate(self, y, eta, w):
        """Deviance, IRLS working weights, working residuals and means at ``eta``.

        For the canonical links used here d mu / d eta equals the variance, so
        the working weight is ``w * V(mu)`` and the working residual is
        ``(y - mu) / V(mu)``. The variance is floored so that a nearly
        separated binomial fit or a vanishing Poisson mean cannot give a zero
        weight. Returns ``(deviance, W, resid, mu)``.
        """
        n = y.shape[0]
        W, resid, mu = np.empty(n), np.empty(n), np.empty(n)
        dev = kernels.glm_evaluate(y, eta, w, self.code, self.row_bound, W, resid, mu)
        return dev, W, resid, mu

    def working_weights(self, eta, w):
        """The IRLS weights ``w V(mu)`` alone, the variance floored as in :meth:`evaluate`."""
        return self.evaluate(np.zeros(eta.shape[0]), np.ascontiguousarray(eta), w)[1]

    # ---- the intercept-only model ----------------------------------------
    def start_intercept(self, ybar: float) -> float:
        """The link of the weighted mean response (the null fit without offset)."""
        return float(self.link(np.array([ybar]))[0])

    def null_intercept(self, y, w, offset) -> float:
        """Intercept of the intercept-only model (with offset), by Newton steps.

        Without an offset this is the link of the weighted mean; with one it is
        solved exactly (a one-parameter GLM).
        """
        ybar = float(np.dot(w, y) / w.sum())
        b0 = self.start_intercept(ybar)
        if not np.any(offset):
            return b0
        b0 -= float(np.dot(w, offset) / w.sum())
        for _ in range(100):
            mu = self.inverse_link(b0 + offset)
            grad = float(np.dot(w, y - mu))
            hess = float(np.dot(w, self.variance(mu)))
            step = grad / max(hess, 1e-300)
            b0 += step
            if abs(step) < 1e-12 * (1 + abs(b0)):
                break
        return b0

    # ---- what the family accepts -----------------------------------------
    def check_response(self, y, where="the response") -> None:
        """Refuse responses the family cannot model, with one line saying what to do."""

    def check_means(self, mu, where) -> None:
        """Refuse predicted means outside the family's range (a link-scale slip)."""

    # ---- words -------------------------------------------------------------
    def mean_words(self, response: str) -> str:
        """What a prediction of this family is, in a reader's words."""
        return response

    def saturation_message(self, lam: float) -> str:
        return (f"the path stopped at penalty {lam:.4g}: the model fits the data almost "
                "perfectly (deviance explained > 0.999)")

    def __repr__(self):
        return f"{type(self).__name__}()"

    def __str__(self):
        return self.name

    def __eq__(self, other):
        # Equal to its own name too, so a family looks up tables keyed by name.
        if isinstance(other, str):
            return other.lower() == self.name
        return isinstance(other, Family) and other.name == self.name

    def __hash__(self):
        return hash(self.name)

    def __reduce__(self):              # one instance per family, also in workers
        return (get_family, (self.name,))


class Gaussian(Family):
    """A continuous measure: identity link, constant variance, deviance = squared error."""

    name, link_name, code = "gaussian", "identity", GAUSSIAN_CODE
    least_squares = True
    has_scale = True
    kind = "continuous measure"

    def inverse_link(self, eta):
        return eta

    def link(self, mu):
        return mu

    def variance(self, mu):
        return np.ones_like(mu)

    def unit_deviance(self, y, mu):
        return (y - mu) ** 2

    def log_likelihood(self, y, mu, w):
        """With the maximum-likelihood variance ``sum(w (y - mu)^2) / sum(w)`` plugged in."""
        y, mu, wc = _columns(y, mu, w)
        sigma2 = (wc * (y - mu) ** 2).sum(axis=0) / w.sum()
        return -0.5 * w.sum() * (np.log(2 * np.pi * sigma2) + 1.0)

    def evaluate(self, y, eta, w):
        r = y - eta
        return float(np.dot(w, r * r)), w, r, eta

    def null_intercept(self, y, w, offset) -> float:
        return float(np.dot(w, y) / w.sum()) - float(np.dot(w, offset) / w.sum())

    def working_weights(self, eta, w):
        return w


class Binomial(Family):
    """Presence/absence or a proportion: logit link, variance mu (1 - mu)."""

    name, link_name, code = "binomial", "logit", BINOMIAL_CODE
    binary = True
    metrics = COMMON_METRICS + ("auc", "brier", "log_loss")
    row_bound = _PROB_EPS * (1.0 - _PROB_EPS)     # variance floor
    kind = "presence/absence"

    def inverse_link(self, eta):
        return expit(eta)

    def link(self, mu):
        mu = np.clip(mu, 1e-12, 1 - 1e-12)
        return np.log(mu / (1.0 - mu))

    def variance(self, mu):
        return mu * (1.0 - mu)

    def unit_deviance(self, y, mu):
        mu = np.clip(mu, 1e-300, 1.0 - 1e-16)
        return 2.0 * (xlogy(y, y / mu) + xlogy(1.0 - y, (1.0 - y) / (1.0 - mu)))

    def working_weights(self, eta, w):
        mu = expit(eta)
        return w * np.maximum(mu * (1 - mu), self.row_bound)

    def log_likelihood(self, y, mu, w):
        y, mu, wc = _columns(y, mu, w)
        mu = np.clip(mu, 1e-300, 1.0 - 1e-16)
        return (wc * (xlogy(y, mu) + xlogy(1.0 - y, 1.0 - mu))).sum(axis=0)

    def check_response(self, y, where="the response"):
        if np.any(y < 0) or np.any(y > 1):
            raise InputError(f"a binomial response must lie between 0 and 1 (0/1 for "
                             f"presence/absence); check {where} or choose another family")

    def check_means(self, mu, where):
        if np.any((mu < 0) | (mu > 1)):
            raise InputError(f"{where}: predictions must be probabilities between 0 and 1; "
                             "predict on the response scale, not the link scale")

    def mean_words(self, response):
        return f"chance of {response}"

    def saturation_message(self, lam):
        return (f"the path stopped at penalty {lam:.4g}: the model separates presences from "
                "absences almost perfectly (deviance explained > 0.999); smaller penalties "
                "would give unbounded coefficients")


class Poisson(Family):
    """A count: log link, variance mu."""

    name, link_name, code = "poisson", "log", POISSON_CODE
    counts = True
    row_bound = _ETA_MAX                           # largest linear predictor
    kind = "count"

    def inverse_link(self, eta):
        return np.exp(np.minimum(eta, _ETA_MAX))

    def link(self, mu):
        return np.log(np.maximum(mu, 1e-300))

    def variance(self, mu):
        return mu

    def unit_deviance(self, y, mu):
        mu = np.maximum(mu, 1e-300)
        return 2.0 * (xlogy(y, y / mu) - (y - mu))

    def working_weights(self, eta, w):
        return w * np.maximum(np.exp(np.minimum(eta, self.row_bound)), 1e-10)

    def log_likelihood(self, y, mu, w):
        y, mu, wc = _columns(y, mu, w)
        mu = np.maximum(mu, 1e-300)
        return (wc * (xlogy(y, mu) - mu - gammaln(y + 1.0))).sum(axis=0)

    def check_response(self, y, where="the response"):
        if np.any(y < 0):
            raise InputError(f"a Poisson response must be non-negative counts; check {where} "
                             "or choose another family")

    def check_means(self, mu, where):
        if np.any(mu <= 0):
            raise InputError(f"{where}: predicted counts must be positive; "
                             "predict on the response scale, not the link scale")

    def mean_words(self, response):
        return f"expected {response}"


def _columns(y, mu, w):
    """y, mu and w shaped to broadcast over the columns of ``mu`` (n, K) or (n,)."""
    mu = np.asarray(mu, dtype=float)
    if mu.ndim == 2:
        return np.asarray(y)[:, None], mu, np.asarray(w)[:, None]
    return np.asarray(y), mu, np.asarray(w)


GAUSSIAN, BINOMIAL, POISSON = Gaussian(), Binomial(), Poisson()
FAMILIES = {f.name: f for f in (GAUSSIAN, BINOMIAL, POISSON)}


def get_family(family) -> Family:
    """The family object for a name (any case) or a family object."""
    if isinstance(family, Family):
        return family
    try:
        return FAMILIES[str(family).lower()]
    except KeyError:
        raise InputError(f"unknown family {family!r}: use one of {', '.join(FAMILIES)}") from None


def family_for_values(distinct) -> tuple[Family, str]:
    """The family ``--family auto`` picks for a numeric response, and why (in words).

    0/1 only: binomial (absence/presence); non-negative whole numbers with
    more than two values: Poisson (counts); anything else: Gaussian.
    """
    distinct = np.asarray(distinct, dtype=float)
    whole = np.all(distinct == np.round(distinct))
    if set(distinct.tolist()) <= {0.0, 1.0}:
        return BINOMIAL, "binomial: the response holds only 0 and 1 (absence/presence)"
    if whole and distinct.min() >= 0 and len(distinct) > 2:
        return POISSON, (f"poisson: the response holds non-negative whole numbers "
                         f"({len(distinct)} different values), read as counts")
    if len(distinct) == 2:
        return GAUSSIAN, (f"gaussian: the response holds two numbers ({distinct[0]:g}, "
                          f"{distinct[1]:g}) other than 0/1; recode it as 0/1 for a "
                          "presence/absence model")
    return GAUSSIAN, ("gaussian: the response holds numbers that are not all non-negative "
                      "whole numbers, read as a measurement")


def family_for_labels() -> Family:
    """The family of a response given as two text labels (present/absent)."""
    return BINOMIAL


def null_intercept(family, y, w, offset) -> float:
    """Intercept of the intercept-only model (see :meth:`Family.null_intercept`)."""
    return get_family(family).null_intercept(y, w, offset)
