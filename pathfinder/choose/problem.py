"""What every way of choosing a model shares: the problem, a choice, refits, runners, seeds.

Cross-validation, the relaxed lasso, stability selection, the subset
searches and nested cross-validation all work on one :class:`Problem` (the
data of a run, which travels to each worker once), fit it on some of its
rows (:func:`subproblem`, ``Problem.fit(rows=...)``), refit chosen terms
without penalty (:func:`refit`), and hand back :class:`Choice` objects that
the comparison treats alike. Their repeated fits are tasks run by
``run(fn, tasks, shared)``: :func:`run_here` in this process, or a session
of :mod:`pathfinder.parallel` on local processes or a cluster; seeds for
tasks are spawned from the run's seed (:func:`spawn_seeds`), so a result does
not depend on where its tasks ran.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np

from ..core import fit_path
from ..core.arrays import aligned
from ..core.families import Family, get_family
from ..core.glm import fit_glm
from ..core.path import GRAM_MAX_TERMS

# Method names as published (Tibshirani 1996; Hoerl & Kennard 1970; Zou &
# Hastie 2005; Meinshausen 2007; Meinshausen & Buhlmann 2010).
LASSO, RIDGE, ELASTIC_NET = "lasso", "ridge", "elastic net"
RELAXED_LASSO = "relaxed lasso"
STABILITY = "stability selection"
BEST_SUBSET, STEPWISE = "best subset", "stepwise"

REFIT_RIDGE = 1e-6   # the whisker of ridge that keeps refits on separated or collinear terms finite


def method_name(mix: float) -> str:
    """Published names of a penalised path: lasso (mix 1), ridge (mix 0), elastic net between."""
    if mix == 1.0:
        return LASSO
    if mix == 0.0:
        return RIDGE
    return ELASTIC_NET


@dataclass(frozen=True, eq=False)
class Problem:
    """What every fit of a run shares; it travels to each worker once.

    ``family`` may be given by name; it is held as a family object.
    """

    X: np.ndarray
    y: np.ndarray
    family: Family
    names: tuple
    offset: np.ndarray | None = None
    weights: np.ndarray | None = None
    standardize: bool = True
    term_weights: np.ndarray | None = None

    ARRAYS = ("X", "y", "offset", "weights", "term_weights")

    def __post_init__(self):
        object.__setattr__(self, "family", get_family(self.family))
        self._align()

    def __setstate__(self, state):
        # Unpickled in a worker: arrays from a network frame can start at any
        # byte; place them as in the parent (see pathfinder.core.arrays).
        self.__dict__.update(state)
        self._align()

    def _align(self):
        for name in self.ARRAYS:
            object.__setattr__(self, name, aligned(getattr(self, name)))

    @property
    def n(self) -> int:
        return self.y.shape[0]

    def fit(self, rows=None, **options):
        shortcut = self.cross_products if rows is not None and self.weights is None else None
        return fit_path(self.X, self.y, family=self.family, offset=self.offset,
                        weights=self.weights, standardize=self.standardize,
                        term_weights=self.term_weights, rows=rows, names=self.names,
                        cross_products=shortcut, **options)

    @cached_property
    def cross_products(self):
        """X'X of all rows, which speeds up least-squares fits on folds (see fit_path)."""
        if (not self.family.least_squares or self.X.shape[1] > GRAM_MAX_TERMS
                or self.X.shape[0] <= self.X.shape[1]):
            return None
        return self.X.T @ self.X

    def part(self, values, rows):
        return None if values is None else values[rows]

    def null_means(self, train, rows):
        """Means at ``rows`` of the intercept-only model fitted on the rows ``train``."""
        w = self.part(self.weights, train)
        w = np.ones(len(train)) if w is None else w * len(train) / w.sum()
        off_train = self.part(self.offset, train)
        b0 = self.family.null_intercept(self.y[train], w,
                                        np.zeros(len(train)) if off_train is None else off_train)
        off = self.part(self.offset, rows)
        return self.family.inverse_link(b0 + (np.zeros(len(rows)) if off is None else off))

    def linear_predictor(self, intercept, coef, rows):
        """(len(rows), K) linear predictors for intercepts (K,) and coefficients (K, p)."""
        eta = self.X[rows] @ coef.T + intercept
        if self.offset is not None:
            eta += self.offset[rows][:, None]
        return eta


def subproblem(problem: Problem, rows) -> Problem:
    """The problem restricted to ``rows`` (a copy of those rows)."""
    part = problem.part
    return Problem(np.asfortranarray(problem.X[rows]), problem.y[rows], problem.family, problem.names,
                   offset=part(problem.offset, rows), weights=part(problem.weights, rows),
                   standardize=problem.standardize, term_weights=problem.term_weights)


def refit(problem: Problem, rows, active, ridge=REFIT_RIDGE) -> tuple[float, np.ndarray]:
    """Unpenalised GLM on the columns ``active`` and the rows ``rows`` (all rows if None).

    Returns ``(intercept, coef of length p)`` in original units, zero for the
    terms left out. ``ridge`` (on standardised columns) keeps a refit on
    terms that separate presences from absences finite; 0 gives the
    maximum-likelihood fit.
    """
    rows = np.arange(problem.n) if rows is None else rows
    active = np.asarray(active, dtype=np.int64)
    coef = np.zeros(problem.X.shape[1])
    fit = fit_glm(problem.X[np.ix_(rows, active)], problem.y[rows], problem.family,
                  offset=problem.part(problem.offset, rows), weights=problem.part(problem.weights, rows),
                  ridge=ridge)
    coef[active] = fit.coef
    return fit.intercept, coef


@dataclass(frozen=True, eq=False)
class Choice:
    """One chosen model: which method and rule, and its coefficients."""

    method: str
    rule: str
    mix: float
    penalty: float
    intercept: float
    coef: np.ndarray
    inner_score: float
    names: tuple
    relaxation: float | None = None

    @property
    def terms(self) -> tuple:
        return tuple(n for n, b in zip(self.names, self.coef) if b != 0)


def run_here(fn, tasks, shared, on_done=None) -> list:
    """Run ``fn(shared, task)`` for every task in this process, in order."""
    results = []
    for i, task in enumerate(tasks):
        results.append(fn(shared, task))
        if on_done is not None:
            on_done(i)
    return results


def spawn_seeds(seed, count: int) -> list[int]:
    """``count`` independent whole-number seeds spawned from ``seed`` (numpy SeedSequence)."""
    return [int(s.generate_state(1)[0]) for s in np.random.SeedSequence(seed).spawn(count)]
