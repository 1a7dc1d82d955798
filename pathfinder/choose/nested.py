"""Honest error: nested cross-validation around the whole choosing procedure.

Cross-validation that chooses the penalty also grades the choice on the same
folds, so its best score is optimistic. Nested cross-validation wraps the
entire procedure (choosing the mix, the penalty and, for the relaxed lasso,
the relaxation) inside each outer training set, with inner folds made there by
the same scheme, and grades the chosen model on the outer fold it never saw.
The gap between the inner best score and the outer score is the optimism.

The same outer folds judge every method and pick rule, so their outer scores
are comparable; :func:`comparison_table` summarises them.
"""

from __future__ import annotations

from dataclasses import dataclass
from itertools import combinations

import numpy as np
import pandas as pd

from ..defaults import FOLD_TOL, GRID_PER_DECADE, INNER_FOLDS, METRIC, NESTED_PER_DECADE
from .cv import cross_validate
from .folds import make_folds
from .metrics import score
from .problem import (ELASTIC_NET, LASSO, RELAXED_LASSO, RIDGE, Choice, Problem, refit,
                      run_here, spawn_seeds)
from .relaxed import relaxed_lasso




@dataclass(frozen=True, eq=False)
class FoldPlan:
    """How folds are made, so that inner folds follow the run's own scheme."""

    k: int = 10
    family: object = None      # a family (or its name); None: judged from the response
    groups: np.ndarray | None = None
    coords: np.ndarray | None = None
    block_size: float | None = None
    fold_labels: np.ndarray | None = None

    def make(self, y, rows, seed, k=None):
        """Folds of the sites ``rows`` (positions in the full table)."""
        def sub(values):
            return None if values is None else values[rows]
        return make_folds(len(rows), k=k or self.k, y=y[rows], family=self.family,
                          groups=sub(self.groups), coords=sub(self.coords),
                          block_size=self.block_size, fold_labels=sub(self.fold_labels), seed=seed)


def choices(cv, relaxed=None) -> list[Choice]:
    """The models each method and pick rule chose from a cross-validation.

    lasso (mix 1), ridge (mix 0) and the elastic net at its best mix strictly
    between 0 and 1, each with the ``min`` and ``one_se`` rules; and the relaxed
    lasso when it was cross-validated.
    """
    picks = cv.picks
    out = []
    mixes = sorted(cv.fits)
    plan = [(LASSO, 1.0), (RIDGE, 0.0)]
    middle = picks[(picks.mix > 0) & (picks.mix < 1) & (picks.rule == "min")]
    if len(middle):
        plan.append((ELASTIC_NET, float(middle.loc[middle.cv_mean.idxmin(), "mix"])))
    for method, mix in plan:
        if mix not in mixes:
            continue
        fit = cv.fits[mix]
        for _, pick in picks[picks.mix == mix].iterrows():
            k = int(pick.step)
            out.append(Choice(method, pick.rule, mix, float(fit.penalties[k]), float(fit.intercept[k]),
                              fit.coef[k].copy(), float(pick.cv_mean), fit.names))
    if relaxed is not None:
        lasso = cv.fits[1.0]
        for _, pick in relaxed.picks.iterrows():
            b0, b = relaxed.models[pick.rule]
            out.append(Choice(RELAXED_LASSO, pick.rule, 1.0, float(pick.penalty), float(b0), b,
                              float(pick.cv_mean), lasso.names, relaxation=float(pick.relaxation)))
    return out


@dataclass(frozen=True)
class OuterTask:
    fold: int
    train: np.ndarray
    test: np.ndarray
    seed: int
    plan: FoldPlan
    inner_k: int
    mixes: tuple
    metric: str
    decades: float | None
    per_decade: int
    n_penalties: int | None
    relaxed_lasso: bool
    selectors: tuple = ()


def run_outer_fold(problem: Problem, task: OuterTask) -> list[dict]:
    """The whole choosing procedure on one outer training set, graded on its test set."""
    inner = task.plan.make(problem.y, task.train, task.seed, k=task.inner_k)
    splits = [(task.train[a], task.train[b]) for a, b in _all_splits(inner)]
    cv = cross_validate(problem, splits, mixes=task.mixes, primary=task.metric,
                        decades=task.decades, per_decade=task.per_decade, n_penalties=task.n_penalties,
                        rows=task.train, full_tol=FOLD_TOL)
    relaxed = None
    if task.relaxed_lasso and 1.0 in cv.fits:
        relaxed = relaxed_lasso(problem, cv.fits[1.0], splits, metric=task.metric, rows=task.train)
    fam = problem.family
    y, w = problem.y[task.test], problem.part(problem.weights, task.test)
    rows = []
    made = choices(cv, relaxed)
    for selector in task.selectors:
        made += selector.choose(problem, task.train, task.seed)
    for choice in made:
        eta = problem.linear_predictor(np.array([choice.intercept]), choice.coef[None, :], task.test)
        mu = fam.inverse_link(eta[:, 0])
        outer = score(task.metric, y, mu, fam, w)
        rows.append({"fold": task.fold, "method": choice.method, "rule": choice.rule,
                     "mix": choice.mix, "penalty": choice.penalty, "n_terms": len(choice.terms),
                     "terms": ";".join(choice.terms), "inner_score": choice.inner_score,
                     "outer_score": outer, "held_out": mu})
    return rows


def _all_splits(folds):
    out = []
    for r in range(folds.n_repeats):
        out.extend(folds.splits(r))
    return out


def nested_cv(problem: Problem, outer_splits, plan: FoldPlan, *, seed, inner_k=INNER_FOLDS, mixes=(1.0,),
              metric=METRIC, decades=None, per_decade=GRID_PER_DECADE, n_penalties=None, relaxed_lasso=True,
              selectors=(),
              run=None, keep_predictions=False):
    """Outer-fold scores of every method and rule: one row per (outer fold, method, rule).

    Each outer fold gets its own seed for its inner folds (spawned from
    ``seed``), so the result does not depend on where the folds ran.
    With ``keep_predictions`` it also returns each method's held-out
    predictions, ``{(method, rule): (n,) array}``: every site predicted by the
    model its outer fold chose without it (NaN for sites in no outer fold).
    ``selectors`` (see :mod:`pathfinder.choose.selectors`) add methods that
    are not a penalty pick, each redone on every outer training set. Inside
    the outer folds the paths use at most NESTED_PER_DECADE penalties per decade and converge to FOLD_TOL:
    ample for choosing, and it keeps the whole procedure affordable.
    """
    seeds = spawn_seeds(seed, len(outer_splits))
    tasks = [OuterTask(k, train, test, seeds[k], plan, inner_k, tuple(float(m) for m in mixes), metric,
                       decades, min(int(per_decade), NESTED_PER_DECADE), n_penalties, relaxed_lasso,
                       tuple(selectors))
             for k, (train, test) in enumerate(outer_splits)]
    results = (run or run_here)(run_outer_fold, tasks, problem)
    table = pd.DataFrame([{k: v for k, v in row.items() if k != "held_out"}
                          for rows in results for row in rows])
    if not keep_predictions:
        return table
    predictions = {}
    for task, rows in zip(tasks, results):
        for row in rows:
            key = (row["method"], row["rule"])
            predictions.setdefault(key, np.full(problem.n, np.nan))[task.test] = row["held_out"]
    return table, predictions


def mean_jaccard(term_sets) -> float:
    """Mean pairwise Jaccard index of the term sets chosen in the outer folds (1 = always the same)."""
    sets = [set(t.split(";")) - {""} for t in term_sets]
    pairs = list(combinations(sets, 2))
    if not pairs:
        return float("nan")
    return float(np.mean([len(a & b) / len(a | b) if a | b else 1.0 for a, b in pairs]))


def comparison_table(full_choices, outer: pd.DataFrame, metric: str) -> pd.DataFrame:
    """One row per method and rule: the full-data choice beside its honest outer score.

    ``optimism`` is the outer mean minus the mean inner (cross-validated) score
    of the choice; for a loss such as deviance a positive value means the
    inner cross-validation flattered the method.
    """
    rows = []
    for choice in full_choices:
        mine = outer[(outer.method == choice.method) & (outer.rule == choice.rule)]
        k = len(mine)
        rows.append({
            "method": choice.method, "rule": choice.rule, "mix": choice.mix,
            "penalty": choice.penalty, "n_terms": len(choice.terms), "terms": ";".join(choice.terms),
            "metric": metric,
            "outer_mean": mine.outer_score.mean() if k else np.nan,
            "outer_se": mine.outer_score.std(ddof=1) / np.sqrt(k) if k > 1 else np.nan,
            "inner_mean": mine.inner_score.mean() if k else np.nan,
            "optimism": (mine.outer_score - mine.inner_score).mean() if k else np.nan,
            "outer_n_terms": mine.n_terms.mean() if k else np.nan,
            "jaccard": mean_jaccard(mine.terms) if k else np.nan,
            "cv_score": choice.inner_score,
        })
    return pd.DataFrame(rows)


def recommend(comparison: pd.DataFrame | None, full_choices) -> Choice:
    """The model pathfinder suggests, by a one-standard-error rule across methods.

    Among every method and pick rule, take the smallest outer-fold error; of
    the choices whose outer error lies within one outer standard error of it,
    suggest the one with the fewest terms (ties: the smaller outer error).
    Without nested cross-validation: the lasso's one-SE pick (or the first
    choice there is).
    """
    if comparison is None or comparison.outer_mean.isna().all():
        for choice in full_choices:
            if choice.method == LASSO and choice.rule == "one_se":
                return choice
        return full_choices[0]
    table = comparison.reset_index(drop=True)
    best = table.outer_mean.idxmin()
    bound = table.outer_mean[best] + (table.outer_se[best] if np.isfinite(table.outer_se[best]) else 0)
    near = table[table.outer_mean <= bound].sort_values(["n_terms", "outer_mean"], kind="stable")
    winner = near.iloc[0]
    for choice in full_choices:
        if choice.method == winner.method and choice.rule == winner.rule:
            return choice
    raise ValueError("the comparison names a choice that was not made")


def held_out_predictions(problem: Problem, splits, choice: Choice, grid) -> np.ndarray:
    """Each site's prediction from the model refitted without its fold (response scale).

    The penalised methods are refitted at the chosen penalty on each fold's
    training rows (on the full grid down to that penalty, as the path was
    fitted); the relaxed lasso is blended with its refit at the chosen
    relaxation. Methods without a penalty (stability selection, subsets)
    refit their chosen terms without the fold.
    """
    fam = problem.family
    out = np.full(problem.n, np.nan)
    penalised = np.isfinite(choice.penalty)
    steps = grid[grid >= choice.penalty * (1 - 1e-12)] if penalised else None
    for train, test in splits:
        if not penalised:
            b0, b = refit(problem, train, np.flatnonzero(choice.coef))
            eta = problem.linear_predictor(np.array([b0]), b[None, :], test)[:, 0]
            out[test] = fam.inverse_link(eta)
            continue
        fit = problem.fit(rows=train, mix=choice.mix, penalties=steps, tol=FOLD_TOL)
        b0, b = fit.intercept[-1], fit.coef[-1]
        if choice.relaxation is not None:
            r0, r = refit(problem, train, np.flatnonzero(b))
            b0, b = choice.relaxation * b0 + (1 - choice.relaxation) * r0, choice.relaxation * b + (1 - choice.relaxation) * r
        eta = problem.linear_predictor(np.array([b0]), b[None, :], test)[:, 0]
        out[test] = fam.inverse_link(eta)
    return out
