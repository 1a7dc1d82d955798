"""Response families: one class per family, the only place that knows them by name.

Four families cover the responses of habitat models:

* :class:`Gaussian`  a continuous measure (cover, biomass), identity link;
* :class:`Binomial`  presence/absence (or a proportion), logit link;
* :class:`Poisson`   a count, log link (survey effort enters as an offset);
* :class:`NegativeBinomial`  a count more variable than Poisson allows
  (animals clump, sites differ unmeasured), log link, variance
  ``mu + mu^2 / theta`` (NB2).

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
from scipy.special import digamma, expit, gammaln, polygamma, xlogy

from ..errors import InputError
from . import kernels

# Bounds that keep the working weights of a nearly separated binomial fit, or
# a Poisson fit with an enormous linear predictor, away from 0 and infinity.
_PROB_EPS = 1e-5
_ETA_MAX = 30.0

# Codes of the row functions in the compiled kernels (core/kernels.py,
# core/kernels_subsets.py); the Gaussian rows need no function of their own.
GAUSSIAN_CODE, BINOMIAL_CODE, POISSON_CODE, NEGATIVE_BINOMIAL_CODE = 0, 1, 2, 3

# The largest theta a negative binomial fit reports: beyond it the variance
# exceeds the Poisson variance by under a millionth of mu^2, nothing the data
# can tell from Poisson (and the score of theta is lost in rounding).
THETA_MAX = 1e6
THETA_MIN = 1e-8

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
    takes_theta = False            # a shape parameter theta (negative binomial)
    theta = None                   # its value, or None while it is still to be estimated
    theta_estimated = False        # theta held fixed but estimated from these data (criteria count it)

    @property
    def row_shape(self) -> float:
        """The compiled row functions' shape argument (theta; 0 for families without one)."""
        return 0.0

    @property
    def needs_theta(self) -> bool:
        """True while the family's theta is still to be estimated from the data."""
        return self.takes_theta and self.theta is None

    def with_theta(self, theta):
        """This family with theta fixed (``None`` leaves it as it is)."""
        if theta is None:
            return self
        raise InputError(f"theta belongs to the negative binomial family; the {self.name} "
                         "family has none: drop theta or choose the negative binomial family")

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

    def log_likelihood_constant(self, y, w) -> float:
        """The part of the log-likelihood that depends on the data alone (0 unless a family
        says otherwise); compiled fits leave it out and add it back."""
        return 0.0

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
        dev = kernels.glm_evaluate(y, eta, w, self.code, self.row_bound, self.row_shape,
                                   W, resid, mu)
        return dev, W, resid, mu

    def score(self, y, mu, w):
        """Derivative of each row's weighted log-likelihood by its linear predictor.

        ``w (y - mu)`` for the canonical links of this module (the gradient of
        the fitting core is ``X' score / n``).
        """
        return w * (y - mu)

    def working_weights(self, eta, w):
        """The IRLS weights ``w V(mu)`` alone, the variance floored as in :meth:`evaluate`
        (Fisher's weights, which do not depend on the response)."""
        return self.evaluate(np.zeros(eta.shape[0]), np.ascontiguousarray(eta), w)[1]

    def newton_weights(self, y, eta, w):
        """The weights :meth:`evaluate` gives (the observed information of each row's
        linear predictor); for the canonical links these are :meth:`working_weights`."""
        return self.working_weights(eta, w)

    # ---- the intercept-only model ----------------------------------------
    def start_intercept(self, ybar: float) -> float:
        """The link of the weighted mean response (the null fit without offset)."""
        return float(self.link(np.array([ybar]))[0])

    def null_intercept(self, y, w, offset) -> float:
        """Intercept of the intercept-only model (with offset), by Newton steps.

        Without an offset this is the link of the weighted mean; with one it is
        solved exactly (a one-parameter GLM), by Fisher scoring with the
        family's own scores and working weights (right for non-canonical
        links such as the negative binomial's log link too).
        """
        ybar = float(np.dot(w, y) / w.sum())
        b0 = self.start_intercept(ybar)
        if not np.any(offset):
            return b0
        b0 -= float(np.dot(w, offset) / w.sum())
        for _ in range(100):
            mu = self.inverse_link(b0 + offset)
            grad = float(np.sum(self.score(y, mu, w)))
            hess = float(np.sum(self.working_weights(b0 + offset, w)))
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


class CountFamily(Family):
    """What the count families share: non-negative counts in, positive means out."""

    counts = True
    kind = "count"

    def check_response(self, y, where="the response"):
        if np.any(y < 0):
            raise InputError(f"a {self.name.replace('_', ' ')} response must be non-negative "
                             f"counts; check {where} or choose another family")

    def check_means(self, mu, where):
        if np.any(mu <= 0):
            raise InputError(f"{where}: predicted counts must be positive; "
                             "predict on the response scale, not the link scale")

    def mean_words(self, response):
        return f"expected {response}"


class Poisson(CountFamily):
    """A count: log link, variance mu."""

    name, link_name, code = "poisson", "log", POISSON_CODE
    row_bound = _ETA_MAX                           # largest linear predictor

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

    def log_likelihood_constant(self, y, w) -> float:
        return -float(np.dot(w, gammaln(np.asarray(y, dtype=float) + 1.0)))



class NegativeBinomial(CountFamily):
    """A count more variable than Poisson: log link, variance ``mu + mu^2 / theta`` (NB2).

    The negative binomial of Venables & Ripley (2002, Modern Applied
    Statistics with S, 4th ed., section 7.4): a Poisson count whose mean is
    itself gamma-distributed with shape theta, so small theta means strongly
    clumped counts and theta -> infinity gives the Poisson family back.
    ``NegativeBinomial(theta)`` fixes theta; ``NegativeBinomial()`` (what
    ``get_family("negative_binomial")`` gives) leaves it to be estimated by
    maximum likelihood (:func:`theta_ml`, alternating with the coefficients
    in :func:`pathfinder.core.glm.fit_glm` and
    :func:`pathfinder.core.glm.estimate_theta`). Arithmetic that needs theta
    refuses to run while it is still unknown.

    The log link is not canonical for this family: the scores are
    ``w (y - mu) / (1 + mu / theta)``, Fisher's weights (:meth:`working_weights`,
    used for degrees of freedom and the start of the grid) ``w mu / (1 + mu /
    theta)``, and the weights :meth:`evaluate` gives the fits (:meth:`newton_weights`)
    are the observed information ``w theta mu (theta + y) / (theta + mu)^2``,
    positive for every count, so that the fits take true Newton steps.
    """

    name, link_name, code = "negative_binomial", "log", NEGATIVE_BINOMIAL_CODE
    row_bound = _ETA_MAX                           # largest linear predictor
    takes_theta = True

    def __init__(self, theta=None, estimated=False):
        self.theta_estimated = bool(estimated) and theta is not None
        if theta is not None:
            try:
                theta = float(theta)
            except (TypeError, ValueError):
                raise InputError(f"theta must be a positive number, got {theta!r}") from None
            if not (np.isfinite(theta) and theta > 0):
                raise InputError(f"theta must be a positive number (smaller means more "
                                 f"clumped counts), got {theta!r}")
        self.theta = theta

    def with_theta(self, theta):
        return self if theta is None else NegativeBinomial(theta)

    def _theta(self) -> float:
        if self.theta is None:
            raise InputError("the negative binomial family needs theta here: give it "
                             "(theta=...) or let a fit estimate it first")
        return self.theta

    @property
    def row_shape(self):
        return self._theta()

    def inverse_link(self, eta):
        return np.exp(np.minimum(eta, _ETA_MAX))

    def link(self, mu):
        return np.log(np.maximum(mu, 1e-300))

    def variance(self, mu):
        return mu + mu * mu / self._theta()

    def unit_deviance(self, y, mu):
        """``2 [y log(y / mu) - (y + theta) log((y + theta) / (mu + theta))]``."""
        theta = self._theta()
        mu = np.maximum(mu, 1e-300)
        return 2.0 * (xlogy(y, y / mu) - (y + theta) * np.log1p((y - mu) / (mu + theta)))

    def score(self, y, mu, w):
        return w * (y - mu) / (1.0 + mu / self._theta())

    def working_weights(self, eta, w):
        mu = np.exp(np.minimum(eta, self.row_bound))
        return w * np.maximum(mu, 1e-10) / (1.0 + mu / self._theta())

    def newton_weights(self, y, eta, w):
        theta = self._theta()
        mu = np.exp(np.minimum(eta, self.row_bound))
        return w * np.maximum(mu, 1e-10) * theta * (theta + y) / (theta + mu) ** 2

    def log_likelihood(self, y, mu, w):
        """Full log-likelihood: ``log Gamma(y + theta) - log Gamma(theta) - log y!
        + theta log(theta / (theta + mu)) + y log(mu / (theta + mu))``."""
        theta = self._theta()
        y, mu, wc = _columns(y, mu, w)
        mu = np.maximum(mu, 1e-300)
        each = (gammaln(y + theta) - gammaln(theta) - gammaln(y + 1.0)
                - theta * np.log1p(mu / theta) + xlogy(y, mu / (theta + mu)))
        return (wc * each).sum(axis=0)

    def log_likelihood_constant(self, y, w) -> float:
        """The part of the log-likelihood free of the coefficients (theta held):
        ``sum w [log Gamma(y + theta) - log Gamma(theta) - log y! - y log theta]``;
        the compiled subset fits leave it out (their objective is
        ``sum w [y eta - (y + theta) log(1 + mu / theta)]``)."""
        theta = self._theta()
        y = np.asarray(y, dtype=float)
        return float(np.dot(w, gammaln(y + theta) - gammaln(theta) - gammaln(y + 1.0)
                            - y * np.log(theta)))

    def __repr__(self):
        return "NegativeBinomial()" if self.theta is None else f"NegativeBinomial(theta={self.theta!r})"

    def __eq__(self, other):
        if isinstance(other, str):
            return other.lower() == self.name
        return isinstance(other, NegativeBinomial) and other.theta == self.theta

    __hash__ = Family.__hash__

    def __reduce__(self):              # keeps theta in workers
        return (NegativeBinomial, (self.theta, self.theta_estimated))


def theta_ml(y, mu, w=None, start=None, tol=1e-10, max_iter=100):
    """Maximum-likelihood theta of a negative binomial with the means ``mu`` held.

    Solves the score equation of Venables & Ripley (2002, section 7.4; their
    ``theta.ml``)

        sum_i w_i [psi(y_i + theta) - psi(theta) + log(theta) + 1
                   - log(theta + mu_i) - (y_i + theta) / (theta + mu_i)] = 0

    by Newton's method on ``log(theta)`` (observed information, trigamma
    terms), kept inside a bracket where the score changes sign and bisected
    when a step would leave it. The start is the moment estimate
    ``n / sum w (y / mu - 1)^2`` unless ``start`` is given. Returns theta,
    clipped to ``[THETA_MIN, THETA_MAX]``: at ``THETA_MAX`` the counts show
    no overdispersion the data can measure (the fit is the Poisson fit).
    """
    y = np.asarray(y, dtype=float)
    mu = np.maximum(np.asarray(mu, dtype=float), 1e-300)
    w = np.ones_like(y) if w is None else np.asarray(w, dtype=float)
    # digamma and trigamma of y + theta are taken once per distinct count
    values, which = np.unique(y, return_inverse=True)
    weight_of = np.bincount(which.ravel(), weights=w, minlength=values.shape[0])
    total = float(w.sum())

    def score(theta):
        return (float(weight_of @ digamma(values + theta)) - total * float(digamma(theta))
                + total * (np.log(theta) + 1.0)
                - float(np.dot(w, np.log(theta + mu) + (y + theta) / (theta + mu))))

    def slope(theta):          # d score / d log(theta)
        tm = theta + mu
        d = (float(weight_of @ polygamma(1, values + theta)) - total * float(polygamma(1, theta))
             + total / theta - float(np.dot(w, 2.0 / tm - (y + theta) / (tm * tm))))
        return theta * d

    lo, hi = np.log(THETA_MIN), np.log(THETA_MAX)
    if score(THETA_MAX) >= 0:
        return THETA_MAX
    if score(THETA_MIN) <= 0:
        return THETA_MIN
    if start is None:
        spread = float(np.dot(w, (y / mu - 1.0) ** 2))
        start = w.sum() / spread if spread > 0 else THETA_MAX
    t = float(np.clip(np.log(start), lo, hi))
    for _ in range(max_iter):
        s = score(np.exp(t))
        if s > 0:          # the score falls through zero as theta grows
            lo = t
        else:
            hi = t
        g = slope(np.exp(t))
        step = -s / g if g < 0 else np.inf
        new = t + step
        if not (lo < new < hi):
            new = 0.5 * (lo + hi)
        if abs(new - t) < tol or hi - lo < tol:
            t = new
            break
        t = new
    return float(np.exp(t))


def _columns(y, mu, w):
    """y, mu and w shaped to broadcast over the columns of ``mu`` (n, K) or (n,)."""
    mu = np.asarray(mu, dtype=float)
    if mu.ndim == 2:
        return np.asarray(y)[:, None], mu, np.asarray(w)[:, None]
    return np.asarray(y), mu, np.asarray(w)


GAUSSIAN, BINOMIAL, POISSON = Gaussian(), Binomial(), Poisson()
NEGATIVE_BINOMIAL = NegativeBinomial()          # theta to be estimated
FAMILIES = {f.name: f for f in (GAUSSIAN, BINOMIAL, POISSON, NEGATIVE_BINOMIAL)}


def get_family(family, theta=None) -> Family:
    """The family object for a name (any case) or a family object; ``theta`` fixes
    the negative binomial's theta (and is refused by the families without one)."""
    if not isinstance(family, Family):
        try:
            family = FAMILIES[str(family).lower()]
        except KeyError:
            raise InputError(f"unknown family {family!r}: use one of "
                             f"{', '.join(FAMILIES)}") from None
    return family.with_theta(theta)


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
