"""scikit-learn estimators over pathfinder's penalised paths.

:class:`PenalisedPathClassifier` (presence/absence, the binomial family) and
:class:`PenalisedPathRegressor` (Gaussian, Poisson, negative binomial) fit a
lasso, elastic-net or ridge path (:func:`pathfinder.fit_path`; Friedman,
Hastie & Tibshirani 2010), cross-validate it on folds made as ``explore``
makes them (:func:`pathfinder.choose.folds.make_folds`: stratified by
presence for presence/absence, grouped when ``groups`` are given to
``fit``), and keep the model at the penalty the named rule picks:

* ``"min"``     the penalty with the best mean held-out score;
* ``"one_se"``  the largest penalty within one standard error of that best
  (Breiman, Friedman, Olshen & Stone 1984; Hastie, Tibshirani & Friedman
  2009, section 7.10): the same or fewer terms than ``"min"``.

With ``penalty`` set, no cross-validation is run and the model is fitted at
that penalty exactly. The objective, its scaling and the standardisation are
those of :func:`pathfinder.fit_path` (see the model conventions in the
documentation), so the coefficients are the ones ``fit_path`` gives on the
same rows, columns and penalty.

They follow scikit-learn's estimator contract (``get_params`` /
``set_params``, ``n_features_in_``, ``feature_names_in_``, validation once
in ``fit``), so they work in pipelines, column transformers, grid searches
and ``cross_val_score``; the tests run scikit-learn's own estimator checks
(``sklearn.utils.estimator_checks.parametrize_with_checks``) on both.

A count model with survey effort takes the logarithm of the effort as an
offset: ``fit(X, y, offset=np.log(effort))``, and ``predict(X, offset=...)``
for expected counts at a given effort (without an offset: per unit effort).
In a pipeline the offset reaches the last step as ``pipe.fit(X, y,
model__offset=...)``.
"""

from __future__ import annotations

import warnings
from typing import Any

import numpy as np
import pandas as pd
from sklearn.base import BaseEstimator, ClassifierMixin, RegressorMixin
from sklearn.utils.multiclass import type_of_target
from sklearn.utils.validation import check_is_fitted, validate_data

from . import defaults
from .choose.cv import RULES, CVResult, cross_validate
from .choose.folds import make_folds
from .choose.metrics import METRICS, metrics_for
from .choose.problem import Problem
from .core.families import Family, get_family
from .core.glm import estimate_theta
from .core.path import PathResult, fit_path
from .errors import FitWarning, InputError

__all__ = ["PenalisedPathClassifier", "PenalisedPathRegressor"]


class _PathModel(BaseEstimator):
    """What the classifier and the regressor share: checks, folds, the pick, the linear predictor.

    Subclasses give ``__init__`` (their parameters, stored as given),
    ``_family()`` and ``_response(y)`` (the coded response).
    """

    # set by each subclass's __init__; listed here for the type checker
    mix: float
    rule: str
    folds: int
    metric: str
    per_decade: int
    decades: float | None
    standardize: bool
    penalty: float | None
    seed: int

    # ---- fitting ---------------------------------------------------------
    def _family(self) -> Family:
        raise NotImplementedError

    def _response(self, y: np.ndarray) -> np.ndarray:
        raise NotImplementedError

    def _check_settings(self, family: Family) -> None:
        if not 0.0 <= float(self.mix) <= 1.0:
            raise InputError(f"mix must lie between 0 (ridge) and 1 (lasso), got {self.mix!r}")
        if self.rule not in RULES:
            raise InputError(f"rule must be one of {', '.join(repr(r) for r in RULES)}, "
                             f"got {self.rule!r}")
        if self.metric not in METRICS or self.metric not in family.metrics:
            raise InputError(f"the metric {self.metric!r} does not suit a {family.name} response; "
                             f"use one of {', '.join(metrics_for(family))}")
        if self.penalty is not None and not float(self.penalty) > 0:
            raise InputError(f"penalty must be a positive number, got {self.penalty!r}")
        if int(self.folds) < 2:
            raise InputError(f"folds must be at least 2, got {self.folds!r}")

    def _fit(self, X: Any, y: Any, sample_weight: Any, offset: Any, groups: Any) -> None:
        family = self._family()
        self._check_settings(family)
        X, y = validate_data(self, X, y, dtype=np.float64, order="F", y_numeric=False)
        response = self._response(np.asarray(y))
        n = X.shape[0]
        weights = None if sample_weight is None else _vector(sample_weight, n, "sample_weight")
        if weights is not None and (np.any(weights < 0) or weights.sum() <= 0):
            raise InputError("sample_weight must be non-negative and not all zero")
        offset = None if offset is None else _vector(offset, n, "offset")
        names = tuple(getattr(self, "feature_names_in_", [f"x{j}" for j in range(X.shape[1])]))
        names = tuple(str(name) for name in names)

        theta_note = ""
        if family.needs_theta:      # one theta for every fit, as explore holds it
            found = estimate_theta(X, response, offset=offset, weights=weights)
            family, theta_note = family.with_theta(found.theta), found.note
        problem = Problem(X, response, family, names, offset=offset, weights=weights,
                          standardize=bool(self.standardize))
        notes: list[str] = [theta_note] if theta_note else []
        if self.penalty is not None:
            path = problem.fit(mix=float(self.mix), penalties=np.array([float(self.penalty)]))
            step, cv = 0, None
        else:
            if n < int(self.folds):
                raise InputError(f"there are {n} sample(s) (rows of X), too few for "
                                 f"folds={self.folds}: give at least as many rows as folds, "
                                 "or fewer folds")
            fold_plan = make_folds(n, k=int(self.folds), y=response, family=family,
                                   groups=None if groups is None else np.asarray(groups),
                                   seed=int(self.seed))
            notes += list(fold_plan.notes)
            cv = cross_validate(problem, fold_plan.splits(), mixes=(float(self.mix),),
                                metrics=(self.metric,), primary=self.metric,
                                decades=self.decades, per_decade=int(self.per_decade))
            notes += list(cv.notes)
            path = cv.fits[float(self.mix)]
            pick = cv.picks[cv.picks.rule == self.rule].iloc[0]
            step = int(pick["step"])
        for note in notes[1 if theta_note else 0:]:
            warnings.warn(note, FitWarning, stacklevel=3)

        self.path_: PathResult = path
        self.cv_: CVResult | None = cv
        self.step_: int = step
        self.penalty_: float = float(path.penalties[step])
        self.intercept_: float = float(path.intercept[step])
        self.coef_: np.ndarray = path.coef[step].copy()
        self.family_: str = family.name
        self.theta_: float | None = family.theta
        self.notes_: tuple[str, ...] = tuple(notes)

    # ---- reading the fit -------------------------------------------------
    @property
    def terms_(self) -> tuple[str, ...]:
        """The names of the terms the chosen model keeps (non-zero coefficients)."""
        check_is_fitted(self, "coef_")
        return tuple(name for name, b in zip(self.path_.names, self.coef_) if b != 0)

    def cv_table(self) -> pd.DataFrame:
        """The cross-validation curve: one row per penalty (``cv.csv``'s columns), empty with ``penalty``."""
        check_is_fitted(self, "coef_")
        if self.cv_ is None:
            return pd.DataFrame(columns=["mix", "step", "penalty", "n_terms", "metric",
                                         "cv_mean", "cv_se", "train_mean"])
        return self.cv_.curves.copy()

    def _linear(self, X: Any, offset: Any = None) -> np.ndarray:
        check_is_fitted(self, "coef_")
        X = validate_data(self, X, dtype=np.float64, reset=False)
        eta = self.intercept_ + X @ self.coef_
        if offset is not None:
            eta = eta + _vector(offset, X.shape[0], "offset")
        return np.asarray(eta)

    def _means(self, X: Any, offset: Any = None) -> np.ndarray:
        check_is_fitted(self, "coef_")
        return np.asarray(get_family(self.family_, self.theta_).inverse_link(self._linear(X, offset)))

    def __sklearn_tags__(self):  # type: ignore[no-untyped-def]
        tags = super().__sklearn_tags__()
        tags.input_tags.allow_nan = False
        return tags


class PenalisedPathClassifier(ClassifierMixin, _PathModel):
    """Presence/absence: a penalised logistic path, the penalty chosen by cross-validation.

    The binomial family with the logit link. The response has two classes
    (any labels); ``classes_[1]`` is the one modelled as present (the larger
    label in sorted order: 1 of 0/1, ``True`` of booleans).

    Parameters
    ----------
    mix : 1 is the lasso, 0 ridge, in between the elastic net (Zou & Hastie 2005).
    rule : ``"one_se"`` (default: the fewest terms within one standard error
        of the best held-out score) or ``"min"`` (the best score).
    folds : number of cross-validation folds (stratified by presence).
    metric : held-out score that picks the penalty: ``"deviance"``,
        ``"auc"``, ``"brier"``, ``"log_loss"``, ... (see ``metrics_for``).
    per_decade, decades : the penalty grid (as ``fit_path``).
    standardize : fit on standardised predictors (coefficients are always in
        the original units).
    penalty : fit at this penalty exactly, without cross-validation.
    seed : seed of the folds.

    Attributes
    ----------
    classes_ : the two labels, sorted.
    path_ : the whole fitted path (:class:`pathfinder.PathResult`).
    cv_ : the cross-validation (curves and picks), ``None`` with ``penalty``.
    penalty_, step_ : the chosen penalty and its position on ``path_``.
    coef_, intercept_ : the chosen model in the original units of X.
    n_features_in_, feature_names_in_ : as every scikit-learn estimator.
    notes_ : what a reader should know (small folds, few presences).
    """

    def __init__(self, *, mix: float = 1.0, rule: str = "one_se", folds: int = defaults.FOLDS,
                 metric: str = defaults.METRIC, per_decade: int = defaults.GRID_PER_DECADE,
                 decades: float | None = None, standardize: bool = True,
                 penalty: float | None = None, seed: int = defaults.SEED) -> None:
        self.mix = mix
        self.rule = rule
        self.folds = folds
        self.metric = metric
        self.per_decade = per_decade
        self.decades = decades
        self.standardize = standardize
        self.penalty = penalty
        self.seed = seed

    def _family(self) -> Family:
        return get_family("binomial")

    def _response(self, y: np.ndarray) -> np.ndarray:
        kind = type_of_target(y, input_name="y", raise_unknown=True)
        if kind != "binary":
            raise InputError(
                f"Only binary classification is supported. The response is of type {kind} "
                f"with {len(np.unique(y))} class(es); this classifier models presence/absence, "
                "so give a response with exactly two classes")
        classes = np.unique(y)
        if classes.size < 2:
            raise InputError(f"the response holds 1 class only ({classes[0]!r}): a classifier "
                             "needs sites of both classes, presences and absences")
        self.classes_ = classes
        return (y == self.classes_[1]).astype(np.float64)

    def fit(self, X: Any, y: Any, sample_weight: Any = None, *, offset: Any = None,
            groups: Any = None) -> PenalisedPathClassifier:
        """Fit the path, cross-validate it and keep the model at the picked penalty.

        ``sample_weight`` are observation weights (rescaled to sum to the
        number of rows), ``offset`` is added to the linear predictor, and
        ``groups`` (a site, region or year per row) keeps each group within
        one fold.
        """
        self._fit(X, y, sample_weight, offset, groups)
        return self

    def decision_function(self, X: Any, offset: Any = None) -> np.ndarray:
        """The linear predictor (log odds of ``classes_[1]``)."""
        return self._linear(X, offset)

    def predict_proba(self, X: Any, offset: Any = None) -> np.ndarray:
        """Probabilities of ``classes_[0]`` and ``classes_[1]``, one row per row of X."""
        p = self._means(X, offset)
        return np.column_stack([1.0 - p, p])

    def predict(self, X: Any, offset: Any = None) -> np.ndarray:
        """The more probable class of each row (``classes_[1]`` from probability 0.5)."""
        present = self._means(X, offset) >= 0.5
        return self.classes_[present.astype(int)]

    def __sklearn_tags__(self):  # type: ignore[no-untyped-def]
        tags = super().__sklearn_tags__()
        tags.classifier_tags.multi_class = False
        return tags


class PenalisedPathRegressor(RegressorMixin, _PathModel):
    """Continuous measures and counts: a penalised GLM path, the penalty chosen by cross-validation.

    ``family`` is ``"gaussian"`` (identity link), ``"poisson"`` or
    ``"negative_binomial"`` (log link; theta estimated once from the model of
    every term, as ``explore`` does, unless ``theta`` is given). Presence/absence
    belongs to :class:`PenalisedPathClassifier`.

    Parameters are those of :class:`PenalisedPathClassifier` (folds here are
    random, or grouped when ``groups`` are given to ``fit``), plus ``family``
    and ``theta``. ``score`` is the deviance explained on the rows given
    (for the Gaussian family this is R^2; for counts the share of the Poisson or
    negative binomial deviance explained, Cameron & Windmeijer 1996).

    Attributes are those of the classifier (without ``classes_``), plus
    ``family_`` and ``theta_`` (the negative binomial's theta, else ``None``).
    """

    def __init__(self, *, family: str = "gaussian", mix: float = 1.0, rule: str = "one_se",
                 folds: int = defaults.FOLDS, metric: str = defaults.METRIC,
                 per_decade: int = defaults.GRID_PER_DECADE, decades: float | None = None,
                 standardize: bool = True, penalty: float | None = None,
                 theta: float | None = None, seed: int = defaults.SEED) -> None:
        self.family = family
        self.mix = mix
        self.rule = rule
        self.folds = folds
        self.metric = metric
        self.per_decade = per_decade
        self.decades = decades
        self.standardize = standardize
        self.penalty = penalty
        self.theta = theta
        self.seed = seed

    def _family(self) -> Family:
        family = get_family(self.family, self.theta)
        if family.binary:
            raise InputError("presence/absence is modelled by PenalisedPathClassifier; "
                             f"PenalisedPathRegressor takes a continuous or count family, not {family.name}")
        return family

    def _response(self, y: np.ndarray) -> np.ndarray:
        return np.asarray(y, dtype=np.float64)

    def fit(self, X: Any, y: Any, sample_weight: Any = None, *, offset: Any = None,
            groups: Any = None) -> PenalisedPathRegressor:
        """Fit the path, cross-validate it and keep the model at the picked penalty.

        ``sample_weight`` are observation weights (rescaled to sum to the
        number of rows), ``offset`` is added to the linear predictor (the
        logarithm of survey effort for counts), and ``groups`` keeps each
        group within one fold.
        """
        self._fit(X, y, sample_weight, offset, groups)
        return self

    def predict(self, X: Any, offset: Any = None) -> np.ndarray:
        """The expected response of each row (with ``offset``: at that effort)."""
        return self._means(X, offset)

    def score(self, X: Any, y: Any, sample_weight: Any = None) -> float:
        """Deviance explained on these rows: ``1 - D(y, fit) / D(y, mean of y)``.

        The null model is the weighted mean of ``y``; for the Gaussian family
        this is the coefficient of determination R^2, as scikit-learn's
        regressors score.
        """
        family = get_family(self.family_, self.theta_)
        mu = self.predict(X)
        y = np.asarray(y, dtype=np.float64).ravel()
        w = np.ones_like(y) if sample_weight is None else _vector(sample_weight, y.shape[0],
                                                                   "sample_weight")
        mean = np.full_like(y, np.average(y, weights=w))
        null = family.deviance(y, mean, w)
        if null <= 0:
            return 1.0 if family.deviance(y, mu, w) <= 0 else 0.0
        return float(1.0 - family.deviance(y, mu, w) / null)

    def __sklearn_tags__(self):  # type: ignore[no-untyped-def]
        tags = super().__sklearn_tags__()
        try:
            tags.target_tags.positive_only = bool(get_family(self.family).counts)
        except InputError:      # an unknown family is refused by fit, in one line
            pass
        return tags


def _vector(values: Any, n: int, what: str) -> np.ndarray:
    v = np.asarray(values, dtype=np.float64).ravel()
    if v.shape[0] != n:
        raise InputError(f"{what} has {v.shape[0]} values but X has {n} rows; give one value per row")
    if not np.all(np.isfinite(v)):
        raise InputError(f"{what} holds missing or infinite values; drop or fill those rows")
    return v
