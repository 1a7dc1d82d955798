"""Choosers that are not a penalty pick: stability selection and subset searches.

Each selector chooses a model from some rows of a problem and returns plain
:class:`~pathfinder.choose.nested.Choice` objects, so the comparison treats
them exactly like the penalised methods: on the full data for the reported
terms, and redone from scratch inside each outer training set for the honest
outer error.

* ``stability selection / refit``: the terms stability selection calls stable
  (Meinshausen & Buhlmann 2010; Shah & Samworth 2013), refitted without
  penalty.
* ``best subset / aicc`` and ``/ bic``: the best subset by AICc and by BIC
  (Furnival & Wilson 1974 search; Hurvich & Tsai 1989).
* ``stepwise / aic``: stepwise selection in both directions by AIC.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..defaults import STABILITY_PAIRS
from .criteria import quasi_criteria
from .problem import BEST_SUBSET, STABILITY, STEPWISE, Choice, Problem, refit, subproblem
from .stability import stability_selection
from .subsets import best_subsets, stepwise


@dataclass(frozen=True, eq=False)
class StabilitySelector:
    """Stability selection followed by a refit on the stable terms."""

    n_pairs: int = STABILITY_PAIRS
    threshold: float | None = None
    pfer: float | None = None
    mix: float = 1.0
    strata: np.ndarray | None = None       # presence (0/1) for binomial, over all rows
    units: np.ndarray | None = None        # groups or spatial blocks, over all rows
    term_groups: tuple | None = None

    def run(self, problem: Problem, rows, seed, run=None):
        """(stability result, choices) for the sub-problem of ``rows``."""
        sub = problem if rows is None else subproblem(problem, rows)
        pick = (lambda v: None if v is None or rows is None else v[rows])
        result = stability_selection(
            sub, mix=self.mix, n_pairs=self.n_pairs, threshold=self.threshold, pfer=self.pfer,
            strata=self.strata if rows is None else pick(self.strata),
            units=self.units if rows is None else pick(self.units),
            term_groups=list(self.term_groups) if self.term_groups else None, seed=seed, run=run)
        active = np.flatnonzero(result.stable)
        b0, b = refit(sub, None, active)
        return result, [Choice(STABILITY, "refit", self.mix, float("nan"), b0, b,
                               float("nan"), problem.names)]

    def choose(self, problem: Problem, rows, seed):
        return self.run(problem, rows, seed)[1]


@dataclass(frozen=True, eq=False)
class SubsetSelector:
    """Best subset by AICc and BIC over every size searched, and stepwise by AIC.

    The search covers every size it can (see :func:`subsets.best_subsets`):
    least squares are proved best at every size by leaps and bounds; binomial
    and Poisson sizes are compared exhaustively while affordable and searched
    beyond, and the table says which. ``max_fits`` (None: the search's own
    default) bounds the exact part; what it leaves unproved is said in the
    notes. Criteria count the Gaussian error variance as a parameter (Hurvich
    & Tsai 1989), as the criteria table of the paths does.
    """

    max_fits: int | None = None
    max_size: int | None = None
    dispersion: float | None = None    # overdispersed counts kept Poisson: QAICc and QAIC

    def run(self, problem: Problem, rows, run=None):
        """(subset search, stepwise result, choices) on ``rows``."""
        base = np.arange(problem.n) if rows is None else rows
        search = best_subsets(problem, rows=base, max_fits=self.max_fits, max_size=self.max_size,
                              run=run, count_variance=True)
        out = []
        small = "aicc" if self.dispersion is None else "qaicc"
        for criterion in (small, "bic"):
            b0, b = self._best(problem, search, criterion)
            out.append(Choice(BEST_SUBSET, criterion, float("nan"), float("nan"), b0, b,
                              float("nan"), problem.names))
        by = "aic" if self.dispersion is None else "qaic"
        steps = stepwise(problem, direction="both", criterion=by, rows=base, count_variance=True,
                         dispersion=self.dispersion)
        out.append(Choice(STEPWISE, by, float("nan"), float("nan"), float(steps.intercept),
                          np.asarray(steps.coef, dtype=float), float("nan"), problem.names))
        return search, steps, out

    def _best(self, problem, search, criterion):
        if criterion != "qaicc":
            return search.best(criterion)[:2]
        table = search.table
        values = quasi_criteria(table["log_likelihood"], table["n_parameters"], search.n,
                                self.dispersion)["qaicc"]
        values = np.where(np.isfinite(values), values, np.inf)
        best = np.flatnonzero(values == values.min())
        row = int(best[np.argmin(table["k"].to_numpy()[best])])
        return refit(problem, search.rows, np.array(search.columns[row], dtype=np.int64), ridge=0.0)

    def choose(self, problem: Problem, rows, seed):
        return self.run(problem, rows)[2]
