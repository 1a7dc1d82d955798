"""What every benchmark script shares: invented designs, side-by-side timing, the table.

Not a test module (pytest collects only test_*.py); imported by the
bench_*.py scripts, which run from the repository root.
"""

from __future__ import annotations

import sys
import time
import warnings
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))


def ar_design(rng, n, p, rho):
    """AR(rho) correlated Gaussian predictors, built column by column (invented data)."""
    X = np.empty((n, p))
    X[:, 0] = rng.standard_normal(n)
    for j in range(1, p):
        X[:, j] = rho * X[:, j - 1] + np.sqrt(1 - rho**2) * rng.standard_normal(n)
    return X


def standardise(X):
    return (X - X.mean(0)) / X.std(0)


def timed(fn):
    start = time.perf_counter()
    fn()
    return time.perf_counter() - start


def side_by_side(ours, peer, repeats=5):
    """Median times of the two, run alternately so drift in the machine's speed hits both alike."""
    ours(), peer()  # warm-up (also compiles the kernels)
    a, b = [], []
    for _ in range(repeats):
        a.append(timed(ours))
        b.append(timed(peer))
    return float(np.median(a)), float(np.median(b))


def grid_for(X, y, family, n_penalties, ratio):
    """pathfinder's automatic grid for these data, so both sides fit the same penalties."""
    from pathfinder import fit_path
    lam_max = fit_path(X, y, family=family, n_penalties=2).penalties[0]
    return lam_max * np.logspace(0, np.log10(ratio), n_penalties)


def print_cases(cases: dict, argv) -> None:
    """Run the chosen cases (all by default) and print ours, peer, ratio and goal for each row.

    A case returns rows ``(label, ours, peer, goal)``; the ratio is ours / peer.
    """
    warnings.simplefilter("ignore")
    print(f"{'case':<100} {'ours':>9} {'peer':>9} {'ratio':>7} {'goal':>6}")
    for key in argv or list(cases):
        for label, ours, peer, goal in cases[key]():
            ratio = ours / peer
            print(f"{label:<100} {ours:9.4g} {peer:9.4g} {ratio:7.3f} {goal:6.2f} "
                  f"{'met' if ratio <= goal else 'MISSED'}", flush=True)
