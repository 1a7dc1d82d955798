"""Speed of cross-validation, as ratios against peers run side by side.

Run from the repository root:

    python tests/benchmarks/bench_cv.py          # both cases
    python tests/benchmarks/bench_cv.py g        # one

Both sides get the same folds and the same penalty grid; pathfinder runs in
this process (one job), like the peers. The ratio is ours / peer (below 1:
pathfinder is faster).
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

from common import ar_design, grid_for, print_cases, side_by_side, standardise  # noqa: E402

from pathfinder.choose.cv import cross_validate  # noqa: E402
from pathfinder.choose.problem import Problem  # noqa: E402
from pathfinder.choose.folds import random_folds, stratified_folds  # noqa: E402


def case_gaussian():
    from sklearn.linear_model import LassoCV
    rng = np.random.default_rng(11)
    n, p = 20_000, 200
    X = ar_design(rng, n, p, 0.7)
    beta = np.zeros(p)
    beta[::10] = rng.standard_normal(20)
    y = X @ beta + 2 * rng.standard_normal(n)
    Xs = np.asfortranarray(standardise(X))
    problem = Problem(Xs, y, "gaussian", tuple(f"x{j}" for j in range(p)), standardize=False)
    splits = random_folds(n, 10, seed=1).splits()
    grid = grid_for(Xs, y, "gaussian", 100, 1e-4)

    def ours():
        cross_validate(problem, splits, n_penalties=100, decades=4)

    def peer():
        LassoCV(alphas=grid, cv=splits).fit(Xs, y)

    a, b = side_by_side(ours, peer, 3)
    return [("g  10-fold CV, Gaussian lasso 100 penalties, n=20,000 p=200 / scikit-learn LassoCV(cv=10)",
             a, b, 0.4)]


def case_binomial():
    from sklearn.linear_model import LogisticRegressionCV
    rng = np.random.default_rng(12)
    n, p = 10_000, 100
    X = ar_design(rng, n, p, 0.5)
    beta = np.zeros(p)
    beta[::10] = 0.5
    y = rng.binomial(1, 1 / (1 + np.exp(-(X @ beta - 0.5)))).astype(float)
    Xs = np.asfortranarray(standardise(X))
    problem = Problem(Xs, y, "binomial", tuple(f"x{j}" for j in range(p)), standardize=False)
    splits = stratified_folds(y, 10, seed=1).splits()
    grid = grid_for(Xs, y, "binomial", 50, 1e-4)

    def ours():
        cross_validate(problem, splits, n_penalties=50, decades=4)

    def peer():
        LogisticRegressionCV(Cs=1 / (0.9 * n * grid), cv=splits, l1_ratios=(1.0,),
                             solver="liblinear").fit(Xs, y)

    a, b = side_by_side(ours, peer, 1)
    return [("b  10-fold CV, binomial lasso 50 penalties, n=10,000 p=100 / LogisticRegressionCV liblinear",
             a, b, 0.1)]


CASES = {"g": case_gaussian, "b": case_binomial}


def main(argv):
    print_cases(CASES, argv)


if __name__ == "__main__":
    main(sys.argv[1:])
