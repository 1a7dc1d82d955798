"""Speed and memory of the fitting core, as ratios against peers run side by side.

Run from the repository root:

    python tests/benchmarks/bench_core.py            # every case
    python tests/benchmarks/bench_core.py a b        # some cases

Each case times pathfinder and its peer alternately in this one process
(after a warm-up that also compiles the kernels) and prints the ratio of the
median times: below 1 means pathfinder is faster. Both sides get the same
penalty grid. The memory case runs in a child process so that its peak
resident size is its own. These are measurements, not tests: nothing here
fails on speed.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

from common import ROOT, ar_design, grid_for, print_cases, side_by_side, standardise  # noqa: E402

from pathfinder import fit_path  # noqa: E402


def case_a():
    from sklearn.linear_model import enet_path
    rng = np.random.default_rng(1)
    n, p = 20_000, 200
    X = ar_design(rng, n, p, 0.7)
    beta = np.zeros(p)
    beta[::10] = rng.standard_normal(20)
    y = X @ beta + 2 * rng.standard_normal(n)
    grid = grid_for(X, y, "gaussian", 100, 1e-4)
    Xs, yc = standardise(X), y - y.mean()
    ours, peer = side_by_side(lambda: fit_path(X, y, penalties=grid),
                              lambda: enet_path(Xs, yc, alphas=grid))
    _, gram = side_by_side(lambda: None, lambda: X.T @ X)
    return [("a1 Gaussian lasso 100 penalties, n=20,000 p=200 AR(0.7) / scikit-learn enet_path",
             ours, peer, 0.5),
            ("a2 the same fit / one X'X product on the same data", ours, gram, 2.5)]


def case_b():
    from sklearn.linear_model import LogisticRegression
    rng = np.random.default_rng(2)
    n, p = 10_000, 100
    X = ar_design(rng, n, p, 0.5)
    beta = np.zeros(p)
    beta[::10] = 0.5
    y = rng.binomial(1, 1 / (1 + np.exp(-(X @ beta - 0.5)))).astype(float)
    grid = grid_for(X, y, "binomial", 50, 1e-4)
    Xs = standardise(X)

    def peer():
        model = LogisticRegression(l1_ratio=1.0, solver="liblinear", warm_start=True)
        for lam in grid:
            model.set_params(C=1 / (n * lam)).fit(Xs, y)

    ours, theirs = side_by_side(lambda: fit_path(X, y, family="binomial", penalties=grid), peer, 3)
    return [("b  binomial lasso 50 penalties, n=10,000 p=100 / warm loop of LogisticRegression liblinear",
             ours, theirs, 0.1)]


def case_c():
    import statsmodels.api as sm
    rng = np.random.default_rng(3)
    n, p = 5_000, 50
    X = ar_design(rng, n, p, 0.5)
    beta = np.zeros(p)
    beta[:5] = 0.2
    y = rng.poisson(np.exp(X @ beta + 0.5)).astype(float)
    grid = grid_for(X, y, "poisson", 20, 1e-3)
    Xs = sm.add_constant(standardise(X))

    def peer():
        model = sm.GLM(y, Xs, family=sm.families.Poisson())
        weights = np.r_[0.0, np.ones(p)]  # leave the intercept unpenalised
        for lam in grid:
            model.fit_regularized(alpha=lam * weights, L1_wt=1.0)

    ours, theirs = side_by_side(lambda: fit_path(X, y, family="poisson", penalties=grid), peer, 1)
    return [("c  Poisson lasso 20 penalties, n=5,000 p=50 / statsmodels GLM.fit_regularized",
             ours, theirs, 0.01)]


def case_d():
    from sklearn.linear_model import enet_path
    rng = np.random.default_rng(4)
    n, p = 200, 5_000
    X = ar_design(rng, n, p, 0.7)
    beta = np.zeros(p)
    beta[:20] = 1.0
    y = X @ beta + rng.standard_normal(n)
    grid = grid_for(X, y, "gaussian", 100, 1e-2)
    Xs, yc = standardise(X), y - y.mean()
    ours, peer = side_by_side(lambda: fit_path(X, y, penalties=grid),
                              lambda: enet_path(Xs, yc, alphas=grid), 3)
    return [("d  Gaussian lasso p >> n, n=200 p=5,000 / scikit-learn enet_path", ours, peer, 1.0)]


def case_e():
    rng = np.random.default_rng(5)
    n, p = 20_000, 100
    X = ar_design(rng, n, p, 0.5)
    beta = np.zeros(p)
    beta[::20] = 0.3
    mu = np.exp(0.5 + X @ beta)
    y = rng.poisson(rng.gamma(1.5, mu / 1.5)).astype(float)      # NB2 counts, theta 1.5
    grid = grid_for(X, y, "poisson", 50, 1e-3)
    ours, peer = side_by_side(
        lambda: fit_path(X, y, family="negative_binomial", penalties=grid),
        lambda: fit_path(X, y, family="poisson", penalties=grid))
    held, peer2 = side_by_side(
        lambda: fit_path(X, y, family="negative_binomial", theta=1.5, penalties=grid),
        lambda: fit_path(X, y, family="poisson", penalties=grid))
    return [("e1 negative binomial lasso 50 penalties, theta estimated, n=20,000 p=100 / Poisson path, same data and grid",
             ours, peer, 2.0),
            ("e2 the same with theta given (no estimate) / Poisson path", held, peer2, 2.0)]


MEMORY_CHILD = """
import json, resource, sys, tracemalloc
import numpy as np
sys.path.insert(0, {root!r})
from pathfinder import fit_path
n, p = 1_000_000, 100
rng = np.random.default_rng(5)
X = np.empty((n, p))
for j in range(p):
    X[:, j] = rng.standard_normal(n)
y = (rng.random(n) < 1 / (1 + np.exp(-(X[:, :5].sum(1) * 0.3)))).astype(float)
fit_path(X[:2000], y[:2000], family="binomial", n_penalties=3)   # compile outside the measurement
before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
tracemalloc.start()
fit_path(X, y, family="binomial", n_penalties=50)
traced_peak = tracemalloc.get_traced_memory()[1]
after = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
print(json.dumps(dict(x_bytes=X.nbytes, rss_rise=after - before, traced_peak=traced_peak)))
"""


def case_memory():
    out = subprocess.run([sys.executable, "-c", MEMORY_CHILD.format(root=str(ROOT))],
                         capture_output=True, text=True, check=True)
    m = json.loads(out.stdout.strip().splitlines()[-1])
    x = m["x_bytes"]
    return [("m  binomial path n=1,000,000 p=100, X row-ordered (copied once): peak allocation above the data / size of X",
             m["traced_peak"] / x, 1.0, 2.0),
            ("m  the same, as rise of peak resident memory / size of X", m["rss_rise"] / x, 1.0, 2.0)]


CASES = {"a": case_a, "b": case_b, "c": case_c, "d": case_d, "e": case_e, "m": case_memory}


def main(argv):
    print_cases(CASES, argv)


if __name__ == "__main__":
    main(sys.argv[1:])
