"""Cross-validation of penalised paths: curves, picks, and the best mix.

Every mix value is fitted on the full data once to fix its penalty grid; then
each fold's training rows are fitted on that same grid and scored on the
fold's held-out rows. The curve is the mean of the fold scores at each penalty,
with its standard error ``sd(fold scores) / sqrt(K)`` (the unweighted mean over
folds, as in scikit-learn's ``LassoCV``).

Two picks per curve:

* ``min``     the penalty with the best mean held-out score;
* ``one_se``  the largest penalty whose mean is within one standard error of
  that best mean (the one-standard-error rule: Breiman, Friedman, Olshen &
  Stone 1984; Hastie, Tibshirani & Friedman 2009, section 7.10). It never has
  a smaller penalty than ``min``, so it keeps the same or fewer terms.

The work is split into one task per (mix, fold), run through
:func:`pathfinder.parallel.run_tasks`, so folds and mixes run in parallel
and the results do not depend on how many workers ran them.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ..defaults import FOLD_TOL
from ..errors import InputError
from .metrics import METRICS, score
from .problem import Problem, run_here

RULES = ("min", "one_se")


@dataclass(frozen=True)
class FoldTask:
    mix: float
    fold: int
    train: np.ndarray
    test: np.ndarray
    penalties: np.ndarray
    metrics: tuple
    tol: float = FOLD_TOL
    keep_predictions: bool = False   # return the held-out means (to pool the AUC over folds)


@dataclass(frozen=True, eq=False)
class FoldScores:
    mix: float
    fold: int
    held_out: dict          # metric -> (K,)
    training: np.ndarray    # (K,) mean training deviance
    n_fitted: int           # penalties actually fitted (a saturated path stops early)
    test: np.ndarray | None = None         # with keep_predictions: the held-out rows ...
    predictions: np.ndarray | None = None  # ... and their means (len(test), K)


def score_path(problem: Problem, fit, rows, metrics, *, null_rows=None):
    """Each metric of a fitted path on ``rows``: dict metric -> (K,).

    Penalties the path did not reach (it stopped early) repeat the last
    fitted model, so every curve has the grid's length.
    """
    fam = problem.family
    eta = problem.linear_predictor(fit.intercept, fit.coef, rows)
    mu = fam.inverse_link(eta)
    y = problem.y[rows]
    w = problem.part(problem.weights, rows)
    out = {}
    mu_null = None
    if "deviance_explained" in metrics:
        mu_null = problem.null_means(null_rows, rows)
    for i, metric in enumerate(metrics):
        try:
            out[metric] = np.array([score(metric, y, mu[:, k], fam, w, mu_null)
                                    for k in range(mu.shape[1])])
        except InputError:
            if i == 0:          # the metric that picks the penalty must hold on every fold
                raise
            # A secondary metric undefined on this fold (the AUC of a fold without
            # presences) gets no value here; the other folds are pooled.
            out[metric] = np.full(mu.shape[1], np.nan)
    return out


def _pad(values, length):
    if len(values) >= length:
        return values[:length]
    return np.concatenate([values, np.repeat(values[-1:], length - len(values))])


def run_fold(problem: Problem, task: FoldTask) -> FoldScores:
    """Fit one fold's training rows on the shared grid and score its held-out rows."""
    fit = problem.fit(rows=task.train, mix=task.mix, penalties=task.penalties, tol=task.tol)
    K = len(task.penalties)
    held = score_path(problem, fit, task.test, task.metrics, null_rows=task.train)
    training = fit.deviance / len(task.train)
    predictions = None
    if task.keep_predictions:
        eta = problem.linear_predictor(fit.intercept, fit.coef, task.test)
        mu = problem.family.inverse_link(eta)
        predictions = np.concatenate([mu, np.repeat(mu[:, -1:], K - mu.shape[1], axis=1)], axis=1)
    return FoldScores(task.mix, task.fold, {m: _pad(v, K) for m, v in held.items()},
                      _pad(training, K), len(fit.penalties),
                      task.test if task.keep_predictions else None, predictions)


@dataclass(frozen=True, eq=False)
class CVResult:
    """Cross-validation of every mix on one set of folds."""

    fits: dict               # mix -> full-data PathResult
    curves: pd.DataFrame     # mix, step, penalty, n_terms, metric, cv_mean, cv_se, train_mean
    picks: pd.DataFrame      # mix, rule, step, penalty, n_terms, cv_mean, cv_se, terms
    best_mix: float
    metric: str
    notes: tuple = field(default=())


def fold_tasks(fits: dict, splits, metrics, tol=FOLD_TOL, keep_predictions=False) -> list:
    return [FoldTask(mix, k, train, test, fit.penalties, tuple(metrics), tol, keep_predictions)
            for mix, fit in fits.items() for k, (train, test) in enumerate(splits)]


def pooled_auc(problem: Problem, results, repeats=1) -> np.ndarray:
    """AUC over the held-out predictions of all folds together, per penalty (K,).

    With spatial-block folds each fold holds few places, so a fold's own AUC
    measures discrimination within those blocks only; pooling compares sites
    across the whole region (Hijmans 2012, Ecology 93:679-688). With repeated
    folds each repeat is pooled on its own and the AUCs averaged.
    """
    from .metrics import auc
    per_repeat = np.array_split(np.arange(len(results)), repeats)
    values = []
    for members in per_repeat:
        rows = np.concatenate([results[i].test for i in members])
        mu = np.concatenate([results[i].predictions for i in members])
        y, w = problem.y[rows], problem.part(problem.weights, rows)
        values.append([auc(y, mu[:, k], w) for k in range(mu.shape[1])])
    return np.mean(values, axis=0)


def fold_mean_se(scores, repeats=1) -> tuple[np.ndarray, np.ndarray]:
    """Cross-validated mean and standard error of fold scores (folds x penalties).

    The mean is over every fold, each counting equally. The standard error
    is over the K fold positions: with R repeats of K folds (the scores in
    repeat-major order) the R scores of each position are averaged first,
    then ``SE = sd(position means) / sqrt(K)``. Repeats steady the mean, but
    the folds of one partition are not independent of another's, so pooling
    all R K folds would shrink the SE as 1 / sqrt(R) and pull the
    one-standard-error pick onto the minimum (Hastie, Tibshirani & Friedman
    2009, section 7.10; Bengio & Grandvalet 2004 show no unbiased estimator
    of this variance exists, so this one is a working convention).
    """
    scores = np.asarray(scores, dtype=float)
    with warnings.catch_warnings(), np.errstate(invalid="ignore", divide="ignore"):
        warnings.simplefilter("ignore", RuntimeWarning)      # a metric undefined on every fold
        if repeats > 1 and scores.shape[0] % repeats == 0:
            scores = np.nanmean(scores.reshape(repeats, scores.shape[0] // repeats, -1), axis=0)
        count = np.count_nonzero(~np.isnan(scores), axis=0)     # folds where the metric is defined
        mean = np.nanmean(scores, axis=0)
        se = np.where(count > 1, np.nanstd(scores, axis=0, ddof=1) / np.sqrt(count), 0.0)
    return mean, se


def summarise(fits: dict, results, metrics, primary, repeats=1,
              pooled=None) -> tuple[pd.DataFrame, pd.DataFrame, float]:
    """Curves (mean and SE over folds), picks per mix, and the best mix."""
    rows, picks = [], []
    for mix, fit in fits.items():
        mine = [r for r in results if r.mix == mix]
        K = len(fit.penalties)
        train = np.mean([r.training for r in mine], axis=0)
        for metric in metrics:
            mean, se = fold_mean_se([r.held_out[metric] for r in mine], repeats)
            if pooled is not None and metric == "auc":
                mean, se = pooled[mix], np.zeros(K)   # pooled over folds: no spread between folds
            rows.append(pd.DataFrame({
                "mix": mix, "step": np.arange(K), "penalty": fit.penalties,
                "n_terms": fit.n_terms, "metric": metric, "cv_mean": mean, "cv_se": se,
                "train_mean": train if metric == "deviance" else np.nan,
            }))
            if metric == primary:
                for rule, k in pick_steps(mean, se, METRICS[metric].larger_is_better).items():
                    picks.append({"mix": mix, "rule": rule, "step": k, "penalty": fit.penalties[k],
                                  "n_terms": int(fit.n_terms[k]), "cv_mean": mean[k], "cv_se": se[k],
                                  "terms": ";".join(selected_terms(fit, k))})
    curves = pd.concat(rows, ignore_index=True)
    picks = pd.DataFrame(picks)
    best = picks[picks.rule == "min"]
    better = best.cv_mean.idxmax() if METRICS[primary].larger_is_better else best.cv_mean.idxmin()
    return curves, picks, float(best.loc[better, "mix"])


def pick_steps(mean, se, larger_is_better=False) -> dict:
    """Steps of the ``min`` and ``one_se`` picks on one curve (grid in decreasing penalty).

    Ties go to the larger penalty (the earlier step).
    """
    sign = -1.0 if larger_is_better else 1.0
    loss = sign * np.asarray(mean, dtype=float)
    best = int(np.nanargmin(loss))
    bound = loss[best] + se[best]
    one_se = int(np.flatnonzero(loss <= bound)[0])
    return {"min": best, "one_se": min(one_se, best)}


def selected_terms(fit, step) -> list:
    return [name for name, b in zip(fit.names, fit.coef[step]) if b != 0]


def cross_validate(problem: Problem, splits, *, mixes=(1.0,), metrics=("deviance",),
                   primary="deviance", decades=None, per_decade=None, n_penalties=None, rows=None,
                   fold_tol=None, full_tol=None, repeats=1, pool_auc=False, run=None) -> CVResult:
    """Cross-validate a path for each mix on the given (train, test) splits.

    The grid of each mix comes from its path on ``rows`` (default: all rows;
    in nested cross-validation, the outer training set), and the splits index
    into the full table. The fold fits converge to ``fold_tol`` (default
    1e-4; on the demo survey the held-out deviances then differ from fully
    converged ones by under 2% of their standard error and every pick is the
    same), the full-data paths to ``full_tol`` (default: the core's 1e-7).

    ``run(fn, tasks, shared)`` executes the fold tasks (default: in this
    process); pass a wrapper of :func:`pathfinder.parallel.run_tasks` to
    spread them over workers. With repeated cross-validation the splits come
    repeat by repeat and ``repeats`` says how many (see :func:`fold_mean_se`).
    With ``pool_auc`` (spatial-block folds) the AUC curve is computed over the
    pooled held-out predictions of all folds (:func:`pooled_auc`); its SE is
    then not defined and left empty.
    """
    metrics = tuple(dict.fromkeys((primary,) + tuple(metrics)))
    precision = {} if full_tol is None else {"tol": full_tol}
    fits = {float(mix): problem.fit(rows=rows, mix=float(mix), decades=decades,
                                    per_decade=per_decade, n_penalties=n_penalties, **precision) for mix in mixes}
    pool = bool(pool_auc) and "auc" in metrics
    tasks = fold_tasks(fits, splits, metrics, FOLD_TOL if fold_tol is None else fold_tol, pool)
    problem.cross_products  # computed once here, shipped with the problem to workers
    results = (run or run_here)(run_fold, tasks, problem)
    pooled = ({mix: pooled_auc(problem, [r for r in results if r.mix == mix], repeats)
               for mix in fits} if pool else None)
    curves, picks, best_mix = summarise(fits, results, metrics, primary, repeats, pooled)
    notes = tuple(f"a fold's path at mix {r.mix:g} (fold {r.fold + 1}) stopped after "
                  f"{r.n_fitted} of {len(fits[r.mix].penalties)} penalties; its last model "
                  "stands in for the rest" for r in results if r.n_fitted < len(fits[r.mix].penalties))
    return CVResult(fits, curves, picks, best_mix, primary, notes)
