"""Speed of the best-subset searches, as ratios against plain refits run side by side.

Run from the repository root:

    python tests/benchmarks/bench_subsets.py            # every case
    python tests/benchmarks/bench_subsets.py g          # some cases

A peer that fits every subset one by one would take minutes to hours, so it
fits a random sample of the subsets and its time is scaled up to all of
them (the mean time per subset of the sample times the number of subsets).
The sample is drawn uniformly from all subsets, so its mix of sizes is that
of the full search. pathfinder's search runs whole, after a warm-up that also
compiles the kernels; each side is timed alternately, and the ratio of the
median times is printed (below 1 means pathfinder is faster). Both sides run
with one linear-algebra thread: the peers' many small solves only lose time
to thread start-up, and on a busy machine several threads made them erratic
(up to ten times slower from one run to the next). These are measurements,
not tests: nothing here fails on speed.
"""

from __future__ import annotations

import sys
import warnings
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

from common import ar_design, side_by_side  # noqa: E402

from pathfinder.choose.cv import Problem  # noqa: E402
from pathfinder.choose.subsets import best_subsets, count_subsets  # noqa: E402

REPEATS = 3




def random_subsets(rng, p, size):
    """``size`` subsets drawn uniformly from all 2^p (each term in or out with probability 1/2)."""
    return [np.flatnonzero(rng.random(p) < 0.5) for _ in range(size)]






def case_g():
    rng = np.random.default_rng(11)
    n, p = 1_000, 20
    X = ar_design(rng, n, p, 0.5)
    beta = np.zeros(p)
    beta[[0, 4, 9, 15]] = [1.0, -0.7, 0.5, 0.3]
    y = X @ beta + rng.standard_normal(n)
    problem = Problem(X, y, "gaussian", tuple(f"x{j + 1}" for j in range(p)))
    total = count_subsets(p)
    sample = random_subsets(rng, p, 2_000)
    ones = np.ones((n, 1))

    def peer():
        for cols in sample:
            np.linalg.lstsq(np.hstack([ones, X[:, cols]]), y, rcond=None)

    ours, theirs = side_by_side(lambda: best_subsets(problem), peer, REPEATS)
    return [(f"g  Gaussian best subset, all 2^20 = {total:,} subsets, n=1,000 p=20 / numpy lstsq "
             "per subset (2,000 sampled, scaled up)", ours, theirs * total / len(sample), 0.05)]


def case_b():
    import statsmodels.api as sm
    rng = np.random.default_rng(12)
    n, p = 2_000, 12
    X = ar_design(rng, n, p, 0.5)
    beta = np.zeros(p)
    beta[[0, 3, 7]] = [0.8, -0.5, 0.4]
    y = rng.binomial(1, 1 / (1 + np.exp(-(X @ beta - 0.3)))).astype(float)
    problem = Problem(X, y, "binomial", tuple(f"x{j + 1}" for j in range(p)))
    total = count_subsets(p)
    sample = random_subsets(rng, p, 200)
    family = sm.families.Binomial()

    def peer():
        for cols in sample:
            sm.GLM(y, sm.add_constant(X[:, cols], has_constant="add"), family=family).fit()

    ours, theirs = side_by_side(lambda: best_subsets(problem), peer, REPEATS)
    return [(f"b  binomial best subset, all 2^12 = {total:,} subsets, n=2,000 p=12 / statsmodels GLM "
             "fit per subset (200 sampled, scaled up)", ours, theirs * total / len(sample), 0.05)]


CASES = {"g": case_g, "b": case_b}


def main(argv):
    from threadpoolctl import threadpool_limits
    threadpool_limits(limits=1)
    chosen = argv or list(CASES)
    print(f"{'case':<118} {'ours':>9} {'peer':>9} {'ratio':>7} {'goal':>6}")
    warnings.simplefilter("ignore")
    for key in chosen:
        for label, ours, peer, goal in CASES[key]():
            ratio = ours / peer
            mark = "met" if ratio <= goal else "MISSED"
            print(f"{label:<118} {ours:9.4f} {peer:9.4f} {ratio:7.4f} {goal:6.2f} {mark}", flush=True)


if __name__ == "__main__":
    main(sys.argv[1:])
