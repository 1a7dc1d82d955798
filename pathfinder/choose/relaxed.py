"""The relaxed lasso (Meinshausen 2007, Comput. Stat. Data Anal. 52:374-393).

The lasso shrinks the coefficients of the terms it keeps. The relaxed lasso
separates the two jobs: the lasso at penalty ``lam`` chooses the active set
A(lam); an unpenalised refit on A(lam) gives ``b_refit``; the relaxed model
blends them, ``b = relaxation * b_lasso + (1 - relaxation) * b_refit``, with the
relaxation ``relaxation`` in [0, 1] (1 is the lasso itself, 0 the plain refit)
chosen together with ``lam`` on the same folds.

The "unpenalised" refit carries a ridge penalty of 1e-6 (on standardised
predictors) so that a refit on nearly collinear terms, or on presences that
one term separates, stays finite; its effect on well-posed refits is far below
the precision of any reported figure.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from .cv import FoldTask, _pad, fold_mean_se, pick_steps, selected_terms
from ..defaults import RELAXATION_STEPS
from .metrics import METRICS, score
from .problem import Problem, refit, run_here

# Relaxations tried: 0 (the refit), 1/8, ..., 1 (the lasso). Blending costs no fit,
# only scoring, so a grid finer than a handful of values is cheap.
RELAXATIONS = tuple(i / RELAXATION_STEPS for i in range(RELAXATION_STEPS + 1))



def refit_path(problem: Problem, fit, rows) -> tuple[np.ndarray, np.ndarray]:
    """Refits for every step of a path (each distinct active set fitted once)."""
    K, p = fit.coef.shape
    intercepts, coefs = np.empty(K), np.empty((K, p))
    cache = {}
    for k in range(K):
        active = tuple(np.flatnonzero(fit.coef[k]))
        if active not in cache:
            cache[active] = refit(problem, rows, np.array(active, dtype=np.int64))
        intercepts[k], coefs[k] = cache[active]
    return intercepts, coefs


def blend(fit, refit_intercepts, refit_coefs, relaxation):
    """Intercepts (K,) and coefficients (K, p) of the relaxed path at one ``relaxation``."""
    return (relaxation * fit.intercept + (1 - relaxation) * refit_intercepts,
            relaxation * fit.coef + (1 - relaxation) * refit_coefs)


@dataclass(frozen=True, eq=False)
class RelaxedScores:
    fold: int
    held_out: dict          # relaxation -> (K,) primary metric


def run_relaxed_fold(problem: Problem, task: FoldTask) -> RelaxedScores:
    """One fold: lasso path on the training rows, refits, scores of each relaxation."""
    fam = problem.family
    fit = problem.fit(rows=task.train, mix=1.0, penalties=task.penalties, tol=task.tol)
    b0_refit, b_refit = refit_path(problem, fit, task.train)
    y, w = problem.y[task.test], problem.part(problem.weights, task.test)
    metric = task.metrics[0]
    K = len(task.penalties)
    held = {}
    for relaxation in RELAXATIONS:
        b0, b = blend(fit, b0_refit, b_refit, relaxation)
        mu = fam.inverse_link(problem.linear_predictor(b0, b, task.test))
        held[relaxation] = _pad(np.array([score(metric, y, mu[:, k], fam, w)
                                     for k in range(mu.shape[1])]), K)
    return RelaxedScores(task.fold, held)


@dataclass(frozen=True, eq=False)
class RelaxedResult:
    curves: pd.DataFrame     # relaxation, step, penalty, n_terms, metric, cv_mean, cv_se
    picks: pd.DataFrame      # rule, relaxation, step, penalty, n_terms, cv_mean, cv_se, terms
    models: dict             # rule -> (intercept, coef (p,)) of the relaxed model picked


def relaxed_lasso(problem: Problem, lasso_fit, splits, *, metric="deviance", rows=None,
                  repeats=1, run=None) -> RelaxedResult:
    """Cross-validate the relaxation and the penalty of a lasso path on ``splits``.

    ``lasso_fit`` is the lasso path on ``rows`` (default: every row); the
    picked relaxed models are refitted on those rows.
    """
    tasks = [FoldTask(1.0, k, train, test, lasso_fit.penalties, (metric,))
             for k, (train, test) in enumerate(splits)]
    results = (run or run_here)(
        run_relaxed_fold, tasks, problem)
    K = len(lasso_fit.penalties)
    larger = METRICS[metric].larger_is_better
    parts, best = [], None
    for relaxation in RELAXATIONS:
        mean, se = fold_mean_se([r.held_out[relaxation] for r in results], repeats)
        parts.append(pd.DataFrame({"relaxation": relaxation, "step": np.arange(K), "penalty": lasso_fit.penalties,
                                   "n_terms": lasso_fit.n_terms, "metric": metric,
                                   "cv_mean": mean, "cv_se": se}))
        k = pick_steps(mean, se, larger)["min"]
        value = -mean[k] if larger else mean[k]
        if best is None or value < best[0]:
            best = (value, relaxation, mean, se)
    _, relaxation, mean, se = best
    base = np.arange(problem.n) if rows is None else rows
    picks, models = [], {}
    for rule, k in pick_steps(mean, se, larger).items():
        b0_refit, b_refit = refit(problem, base, np.flatnonzero(lasso_fit.coef[k]))
        models[rule] = (relaxation * lasso_fit.intercept[k] + (1 - relaxation) * b0_refit,
                        relaxation * lasso_fit.coef[k] + (1 - relaxation) * b_refit)
        picks.append({"rule": rule, "relaxation": relaxation, "step": k, "penalty": lasso_fit.penalties[k],
                      "n_terms": int(lasso_fit.n_terms[k]), "cv_mean": mean[k], "cv_se": se[k],
                      "terms": ";".join(selected_terms(lasso_fit, k))})
    return RelaxedResult(pd.concat(parts, ignore_index=True), pd.DataFrame(picks), models)
