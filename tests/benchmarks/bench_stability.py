"""Cost of stability selection, as a ratio against one full-data path fitted in the same run.

Run from the repository root:

    python tests/benchmarks/bench_stability.py

The case: a binomial lasso path, n = 5,000 sites, p = 100 AR(0.5) predictors,
ten true terms. Stability selection with 50 complementary pairs (100 fits on
halves) runs on 2 local processes and is timed alternately with one fit of
the full-data path on its automatic grid (100 penalties), after a warm-up
that also starts the workers and compiles the kernels. Two lines:

* s1 stability selection as a user runs it: the full-data path, the
  correlation clusters and the 100 half fits on the grid cut a few steps past
  2 q terms (see pathfinder.choose.stability);
* s2 the same with the whole 100-penalty grid given, so each half fit covers
  the same penalties as the full-data fit.

These are measurements, not tests: nothing here fails on speed.
"""

from __future__ import annotations

import sys
import warnings
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

from common import ar_design, side_by_side  # noqa: E402

from pathfinder import fit_path  # noqa: E402
from pathfinder.choose.problem import Problem  # noqa: E402
from pathfinder.choose.stability import stability_selection  # noqa: E402
from pathfinder.parallel import Backend, run_tasks  # noqa: E402

REPEATS = 3
GOAL = 30.0








def main():
    rng = np.random.default_rng(7)
    n, p = 5_000, 100
    X = np.asfortranarray(ar_design(rng, n, p, 0.5))
    beta = np.zeros(p)
    beta[::10] = 0.4
    y = rng.binomial(1, 1 / (1 + np.exp(-(X @ beta - 0.5)))).astype(float)
    problem = Problem(X, y, "binomial", tuple(f"x{j}" for j in range(p)))
    backend = Backend(jobs=2)

    def run(fn, tasks, shared):
        return run_tasks(fn, tasks, shared, backend)

    full = fit_path(X, y, family="binomial")
    grid = full.penalties

    def one_path():
        fit_path(X, y, family="binomial")

    def stability_cut():
        stability_selection(problem, n_pairs=50, strata=y, seed=1, run=run)

    def stability_whole():
        stability_selection(problem, n_pairs=50, strata=y, seed=1, run=run, penalties=grid)

    result = stability_selection(problem, n_pairs=50, strata=y, seed=1, run=run)
    print(f"full-data path: {len(grid)} penalties; stability grid: {len(result.penalties)} "
          f"penalties, region {result.region_steps}, q = {result.q}, "
          f"stable: {', '.join(result.stable_terms)}")
    print(f"{'case':<100} {'ours':>9} {'peer':>9} {'ratio':>7} {'goal':>6}")
    cases = [
        ("s1 stability selection, 50 pairs (100 half fits, cut grid), 2 processes / one full path",
         stability_cut),
        ("s2 the same on the whole 100-penalty grid / one full path", stability_whole),
    ]
    for label, ours in cases:
        mine, peer = side_by_side(ours, one_path, REPEATS)
        ratio = mine / peer
        mark = "met" if ratio <= GOAL else "MISSED"
        print(f"{label:<100} {mine:9.3f} {peer:9.3f} {ratio:7.2f} {GOAL:6.1f} {mark}", flush=True)


if __name__ == "__main__":
    warnings.simplefilter("ignore")
    main()
