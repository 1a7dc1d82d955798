"""Response families: the link, the variance and the deviance of each GLM.

Three families cover the responses of habitat models:

* ``gaussian``  a continuous measure, identity link;
* ``binomial``  presence/absence (or a proportion), logit link;
* ``poisson``   a count, log link (survey effort enters as an offset).

Each family is a small frozen object of plain vectorised functions. The
deviance is the usual GLM deviance (twice the log-likelihood ratio against the
saturated model), so that the penalised objective of the fitting core is
``sum(w * deviance_i) / (2 n) + penalty``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
from scipy.special import expit, xlogy

from . import kernels

# Bounds that keep the working weights of a nearly separated binomial fit, or
# a Poisson fit with an enormous linear predictor, away from 0 and infinity.
_PROB_EPS = 1e-5
_ETA_MAX = 30.0


@dataclass(frozen=True)
class Family:
    name: str
    link: str
    inverse_link: Callable[[np.ndarray], np.ndarray]
    link_fn: Callable[[np.ndarray], np.ndarray]
    variance: Callable[[np.ndarray], np.ndarray]
    unit_deviance: Callable[[np.ndarray, np.ndarray], np.ndarray]
    canonical: bool = True

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
        if self.name == "gaussian":
            r = y - eta
            return float(np.dot(w, r * r)), w, r, eta
        n = y.shape[0]
        W, resid, mu = np.empty(n), np.empty(n), np.empty(n)
        binomial = self.name == "binomial"
        dev = kernels.glm_evaluate(y, eta, w, binomial, row_bound(self.name), W, resid, mu)
        return dev, W, resid, mu


def row_bound(name: str) -> float:
    """The compiled row functions' bound: the binomial variance floor, or the
    largest Poisson linear predictor."""
    return _PROB_EPS * (1.0 - _PROB_EPS) if name == "binomial" else _ETA_MAX


def _gaussian_dev(y, mu):
    return (y - mu) ** 2


def _binomial_dev(y, mu):
    mu = np.clip(mu, 1e-300, 1.0 - 1e-16)
    return 2.0 * (xlogy(y, y / mu) + xlogy(1.0 - y, (1.0 - y) / (1.0 - mu)))


def _poisson_dev(y, mu):
    mu = np.maximum(mu, 1e-300)
    return 2.0 * (xlogy(y, y / mu) - (y - mu))


def _logit(mu):
    mu = np.clip(mu, 1e-12, 1 - 1e-12)
    return np.log(mu / (1.0 - mu))


def _exp_capped(eta):
    return np.exp(np.minimum(eta, _ETA_MAX))


GAUSSIAN = Family("gaussian", "identity", lambda e: e, lambda m: m,
                  lambda m: np.ones_like(m), _gaussian_dev)
BINOMIAL = Family("binomial", "logit", expit, _logit,
                  lambda m: m * (1.0 - m), _binomial_dev)
POISSON = Family("poisson", "log", _exp_capped, lambda m: np.log(np.maximum(m, 1e-300)),
                 lambda m: m, _poisson_dev)

FAMILIES = {f.name: f for f in (GAUSSIAN, BINOMIAL, POISSON)}


def get_family(name: str) -> Family:
    try:
        return FAMILIES[str(name).lower()]
    except KeyError:
        raise ValueError(
            f"unknown family {name!r}: use one of {', '.join(FAMILIES)}") from None


def null_intercept(family: Family, y, w, offset) -> float:
    """Intercept of the intercept-only model (with offset), by Newton steps.

    Without an offset this is the link of the weighted mean; with one it is
    solved exactly (a one-parameter GLM).
    """
    ybar = float(np.dot(w, y) / w.sum())
    if family.name == "gaussian":
        return ybar - float(np.dot(w, offset) / w.sum())
    if family.name == "binomial":
        b0 = float(_logit(np.array([ybar]))[0])
    else:
        b0 = float(np.log(max(ybar, 1e-300)))
    if not np.any(offset):
        return b0
    b0 -= float(np.dot(w, offset) / w.sum())
    for _ in range(100):
        mu = family.inverse_link(b0 + offset)
        grad = float(np.dot(w, y - mu))
        hess = float(np.dot(w, family.variance(mu)))
        step = grad / max(hess, 1e-300)
        b0 += step
        if abs(step) < 1e-12 * (1 + abs(b0)):
            break
    return b0
