"""Speed of the best-subset searches, as ratios against plain refits run side by side.

Run from the repository root:

    python tests/benchmarks/bench_subsets.py            # every case
    python tests/benchmarks/bench_subsets.py g          # some cases

Cases g and b time the exhaustive searches against refits of sampled subsets;
l, c and s the searches of every size: l, Gaussian leaps and bounds at p=40
(it also prints how many of the 2^40 subsets were visited and the time
against the 30-second goal); c and s, binomial searches against one
cross-validated lasso path and one lasso path on the same data.

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

from pathfinder.choose.problem import Problem  # noqa: E402
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


def _binomial_problem(seed, n, p):
    rng = np.random.default_rng(seed)
    X = ar_design(rng, n, p, 0.5)
    beta = np.zeros(p)
    beta[[0, 3, 7, 12, 20, 25]] = [0.8, -0.5, 0.4, 0.3, -0.3, 0.2]
    y = rng.binomial(1, 1 / (1 + np.exp(-(X @ beta - 0.3)))).astype(float)
    return X, y, Problem(X, y, "binomial", tuple(f"x{j + 1}" for j in range(p)))


def _how(search):
    counts = search.sizes.found_by.value_counts().to_dict()
    return ", ".join(f"{v} {k}" for k, v in sorted(counts.items()))


def case_l():
    """Gaussian leaps and bounds, p=40, n=1,000: every size proved."""
    rng = np.random.default_rng(13)
    n, p = 1_000, 40
    X = ar_design(rng, n, p, 0.5)
    beta = np.zeros(p)
    beta[[0, 4, 9, 15, 22, 30, 35]] = [1.0, -0.7, 0.5, 0.3, 0.25, -0.2, 0.15]
    y = X @ beta + 2.0 * rng.standard_normal(n)
    problem = Problem(X, y, "gaussian", tuple(f"x{j + 1}" for j in range(p)))
    sample = random_subsets(rng, p, 2_000)
    ones = np.ones((n, 1))

    def peer():
        for cols in sample:
            np.linalg.lstsq(np.hstack([ones, X[:, cols]]), y, rcond=None)

    found = {}
    ours, theirs = side_by_side(lambda: found.setdefault("s", best_subsets(problem)), peer, REPEATS)
    search = best_subsets(problem)
    print(f"   l: {search.n_models:,} of 2^40 = {2**40:,} subsets visited ({_how(search)}); "
          f"{ours:.2f} s against the goal of 30 s", flush=True)
    return [(f"l  Gaussian best subset, every size 0..40 proved, n=1,000 p=40 / numpy lstsq per "
             "subset (2,000 sampled, scaled to 2^40)", ours, theirs * 2**40 / len(sample), 1e-6)]


def _cv_lasso(X, y, folds=10):
    from pathfinder import fit_path
    fold = np.arange(len(y)) % folds
    fit_path(X, y, family="binomial")
    for f in range(folds):
        fit_path(X, y, family="binomial", rows=np.flatnonzero(fold != f), tol=1e-4)


def case_c():
    """Binomial p=30, n=3,000: every size, against one 10-fold cross-validated lasso path."""
    X, y, problem = _binomial_problem(14, 3_000, 30)
    ours, theirs = side_by_side(lambda: best_subsets(problem, max_size=30), lambda: _cv_lasso(X, y),
                                REPEATS)
    search = best_subsets(problem, max_size=30)
    print(f"   c: sizes 0..{search.max_size}: {_how(search)}; {search.n_models:,} fits", flush=True)
    return [("c  binomial best subset, every size 0..30, n=3,000 p=30 / one 10-fold CV lasso path "
             "(11 paths)", ours, theirs, 20.0)]


def case_s():
    """Binomial p=60, n=20,000: every size searched, against one lasso path."""
    from pathfinder import fit_path
    X, y, problem = _binomial_problem(15, 20_000, 60)
    rows = []
    for label, options in (("sizes until AIC, AICc and BIC have risen for 5 sizes", {}),
                           ("every size 0..60", {"max_size": 60})):
        ours, theirs = side_by_side(lambda o=options: best_subsets(problem, **o),
                                    lambda: fit_path(X, y, family="binomial"), 1 if options else
                                    REPEATS)
        search = best_subsets(problem, **options)
        print(f"   s: sizes 0..{search.max_size}: {_how(search)}; {search.n_models:,} fits",
              flush=True)
        rows.append((f"s  binomial best subset, {label}, n=20,000 p=60 / one lasso path", ours,
                     theirs, 50.0))
    return rows


CASES = {"g": case_g, "b": case_b, "l": case_l, "c": case_c, "s": case_s}


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
