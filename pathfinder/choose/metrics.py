"""How well predictions match held-out observations: one plain function per metric.

Each metric compares observed responses ``y`` with predicted means ``mu``
(probabilities for presence/absence, expected counts for counts) on rows the
model did not see, and returns one number. Where observation weights ``w`` are
given, every metric is the weighted version: a weighted mean over rows, or for
the AUC, pairs weighted by the product of their row weights. Weights need not
be rescaled; only their ratios matter.

The metrics
-----------
* ``mean_deviance``   mean unit deviance of the model's family (the default for
  every family: the quantity the fit itself minimises);
* ``mse``, ``mae``    mean squared and mean absolute error;
* ``auc``             area under the ROC curve, in its Mann-Whitney form: the
  chance that a presence gets a higher predicted probability than an absence,
  ties counted half;
* ``brier``           mean squared error of predicted probabilities;
* ``log_loss``        mean negative Bernoulli log-likelihood (half the mean
  binomial deviance for 0/1 data), probabilities clipped to
  [eps, 1 - eps] with eps the float64 machine epsilon;
* ``poisson_deviance`` mean Poisson unit deviance (the same number as
  ``mean_deviance(..., "poisson")``, kept for readers who ask for it by name);
* ``deviance_explained`` 1 - deviance(model) / deviance(null model) on held-out
  rows, with the null model's predictions for those rows supplied by the caller
  (the intercept-only model fitted on the training rows). It can be negative
  when the model predicts new sites worse than the plain average does.

:data:`METRICS` lists each metric with the families it suits and whether larger
is better; :func:`score` evaluates any of them by name.
"""

from __future__ import annotations

from typing import Callable, NamedTuple

import numpy as np
from scipy.special import xlogy

from ..core.families import FAMILIES, get_family
from ..errors import InputError



# ---- checking the input once ---------------------------------------------------

def _vectors(y, mu, w, metric):
    """y, mu and w as float arrays of one length, checked; w defaults to ones."""
    y = np.asarray(y, dtype=float).ravel()
    mu = np.asarray(mu, dtype=float).ravel()
    if y.shape != mu.shape:
        raise InputError(f"{metric}: {y.size} observed values but {mu.size} predictions; "
                         "pass one prediction per observed row")
    if y.size == 0:
        raise InputError(f"{metric}: no rows to score; pass at least one observation")
    if not (np.all(np.isfinite(y)) and np.all(np.isfinite(mu))):
        raise InputError(f"{metric}: observed values or predictions contain missing or "
                         "infinite values; remove those rows before scoring")
    if w is None:
        return y, mu, np.ones_like(y)
    w = np.asarray(w, dtype=float).ravel()
    if w.shape != y.shape:
        raise InputError(f"{metric}: {w.size} weights for {y.size} rows; pass one weight per row")
    if not np.all(np.isfinite(w)) or np.any(w < 0) or w.sum() <= 0:
        raise InputError(f"{metric}: weights must be finite, non-negative and not all zero")
    return y, mu, w


def _check_probabilities(y, mu, metric):
    if np.any((y < 0) | (y > 1)):
        raise InputError(f"{metric}: observed values must lie between 0 and 1 "
                         "(0/1 for absence/presence)")
    if np.any((mu < 0) | (mu > 1)):
        raise InputError(f"{metric}: predictions must be probabilities between 0 and 1; "
                         "predict on the response scale, not the link scale")


def _check_family_values(y, mu, family, metric):
    """The family's own checks of observed values and predicted means."""
    family.check_response(y, where=f"the observed values ({metric})")
    family.check_means(mu, metric)


def _weighted_mean(values, w):
    return float(np.dot(w, values) / w.sum())


# ---- the metrics ---------------------------------------------------------------

def mean_deviance(y, mu, family, w=None) -> float:
    """Weighted mean unit deviance ``sum(w * d(y, mu)) / sum(w)`` of ``family``.

    Gaussian: squared error; binomial: ``2 [y log(y/mu) + (1-y) log((1-y)/(1-mu))]``;
    Poisson: ``2 [y log(y/mu) - (y - mu)]``.
    """
    fam = get_family(family)
    y, mu, w = _vectors(y, mu, w, "deviance")
    _check_family_values(y, mu, fam, "deviance")
    return _weighted_mean(fam.unit_deviance(y, mu), w)


def mse(y, mu, w=None) -> float:
    """Weighted mean squared error."""
    y, mu, w = _vectors(y, mu, w, "mse")
    return _weighted_mean((y - mu) ** 2, w)


def mae(y, mu, w=None) -> float:
    """Weighted mean absolute error."""
    y, mu, w = _vectors(y, mu, w, "mae")
    return _weighted_mean(np.abs(y - mu), w)


def auc(y, mu, w=None) -> float:
    """Area under the ROC curve: P(score of a presence > score of an absence).

    Every (presence, absence) pair counts with the product of its two weights;
    a tied pair counts half (the Mann-Whitney form). A row with a proportion
    ``y`` between 0 and 1 counts as a presence with weight ``w * y`` and as an
    absence with weight ``w * (1 - y)``. Computed by sorting, in O(n log n).
    """
    y, mu, w = _vectors(y, mu, w, "auc")
    if np.any((y < 0) | (y > 1)):
        raise InputError("auc: observed values must lie between 0 and 1 (0/1 for absence/presence)")
    pos = w * y
    neg = w * (1.0 - y)
    total_pos, total_neg = pos.sum(), neg.sum()
    if total_pos <= 0 or total_neg <= 0:
        missing = "presences" if total_pos <= 0 else "absences"
        raise InputError(f"auc: the rows scored hold no {missing}, so the AUC is undefined; "
                         "use folds that keep both presences and absences in each")
    _, group = np.unique(mu, return_inverse=True)   # groups of tied scores, ascending
    pos_g = np.bincount(group, weights=pos)
    neg_g = np.bincount(group, weights=neg)
    neg_below = np.cumsum(neg_g) - neg_g
    wins = np.dot(pos_g, neg_below + 0.5 * neg_g)
    return float(wins / (total_pos * total_neg))


def brier(y, mu, w=None) -> float:
    """Brier score: weighted mean of (y - probability)^2 (0 is perfect)."""
    y, mu, w = _vectors(y, mu, w, "brier")
    _check_probabilities(y, mu, "brier")
    return _weighted_mean((y - mu) ** 2, w)


def log_loss(y, mu, w=None) -> float:
    """Weighted mean of ``-[y log(p) + (1 - y) log(1 - p)]``.

    Probabilities are clipped to [eps, 1 - eps] (eps = float64 machine epsilon)
    so that a confident wrong prediction costs a large but finite amount.
    """
    y, mu, w = _vectors(y, mu, w, "log_loss")
    _check_probabilities(y, mu, "log_loss")
    eps = np.finfo(float).eps
    p = np.clip(mu, eps, 1.0 - eps)
    return _weighted_mean(-(xlogy(y, p) + xlogy(1.0 - y, 1.0 - p)), w)


def poisson_deviance(y, mu, w=None) -> float:
    """Weighted mean Poisson unit deviance ``2 [y log(y/mu) - (y - mu)]``."""
    return mean_deviance(y, mu, "poisson", w)


def deviance_explained(y, mu, mu_null, family, w=None) -> float:
    """Share of the null model's deviance that the model removes on held-out rows.

    ``1 - sum(w d(y, mu)) / sum(w d(y, mu_null))``, where ``mu_null`` holds the
    predictions of the intercept-only model (fitted on the training rows) for
    the same rows. Negative when the model does worse than that null model.
    """
    fam = get_family(family)
    y, mu, w = _vectors(y, mu, w, "deviance_explained")
    _, mu_null, _ = _vectors(y, mu_null, w, "deviance_explained (null predictions)")
    _check_family_values(y, mu, fam, "deviance_explained")
    _check_family_values(y, mu_null, fam, "deviance_explained (null predictions)")
    null = fam.deviance(y, mu_null, w)
    if null <= 0:
        raise InputError("deviance_explained: the null model fits these rows perfectly "
                         "(the response does not vary), so there is nothing to explain")
    return 1.0 - fam.deviance(y, mu, w) / null


# ---- the registry --------------------------------------------------------------

class Metric(NamedTuple):
    """A metric, the families it suits (each family lists its metrics) and its direction."""

    function: Callable
    families: tuple
    larger_is_better: bool


def _metric(name, function, larger_is_better):
    suits = tuple(f.name for f in FAMILIES.values() if name in f.metrics)
    return name, Metric(function, suits, larger_is_better)


METRICS = dict([
    _metric("deviance", mean_deviance, False),
    _metric("mse", mse, False),
    _metric("mae", mae, False),
    _metric("auc", auc, True),
    _metric("brier", brier, False),
    _metric("log_loss", log_loss, False),
    _metric("deviance_explained", deviance_explained, True),
])
"""Metric name -> (function, families it applies to, larger_is_better).

``deviance`` and ``deviance_explained`` need the family (and the latter the
null model's predictions) besides ``y, mu, w``; :func:`score` supplies them.
The Poisson deviance is ``deviance`` for the Poisson family.
"""


def metrics_for(family) -> tuple:
    """The held-out metrics that make sense for ``family``, in the registry's order."""
    fam = get_family(family)
    return tuple(k for k in METRICS if k in fam.metrics)


def default_metric(family) -> str:
    """The metric used unless the user asks for another: the deviance, for every family."""
    get_family(family)
    return "deviance"


def score(metric, y, mu, family, w=None, mu_null=None) -> float:
    """Evaluate the metric named ``metric`` for a model of ``family``.

    ``mu_null`` (the null model's predictions) is needed only for
    ``deviance_explained``.
    """
    fam = get_family(family)
    if metric not in METRICS:
        raise InputError(f"unknown metric {metric!r}: use one of {', '.join(METRICS)}")
    if metric not in fam.metrics:
        raise InputError(f"the metric {metric!r} does not apply to a {fam.name} response; "
                         f"use one of {', '.join(metrics_for(fam))}")
    if metric == "deviance":
        return mean_deviance(y, mu, fam, w)
    if metric == "deviance_explained":
        if mu_null is None:
            raise InputError("deviance_explained needs the null model's predictions (mu_null) "
                             "for the same rows")
        return deviance_explained(y, mu, mu_null, fam, w)
    return METRICS[metric].function(y, mu, w)
