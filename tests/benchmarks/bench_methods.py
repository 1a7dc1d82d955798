"""Best subset, forward stepwise, the lasso and the relaxed lasso on the simulation of
Hastie, Tibshirani & Tibshirani (2020, Statistical Science 35:579-592).

Run from the repository root:

    python tests/benchmarks/bench_methods.py              # low setting, 3 replications
    python tests/benchmarks/bench_methods.py --reps 10    # more replications
    python tests/benchmarks/bench_methods.py --medium     # also n=500, p=100 (slower)

The design, as we recall it from the paper (not checked against its text
here): rows of X drawn from N(0, Sigma) with Sigma_ij = 0.35^|i-j|; "beta-type
2": the first 5 coefficients equal to 1, the rest 0; noise variance set so
that the signal-to-noise ratio beta' Sigma beta / sigma^2 takes 10 values
log-spaced from 0.05 to 6; the "low" setting n=100, p=10 and the "medium"
setting n=500, p=100. Each method is tuned on a validation set of n rows
drawn like the training set, and judged by its relative risk
``(b - beta)' Sigma (b - beta) / beta' Sigma beta`` (0 is perfect, 1 is the
null model). The published pattern (the paper's summary): the lasso ahead at
low SNR, best subset level or ahead at high SNR, forward stepwise close to
best subset throughout, the relaxed lasso close to the best everywhere.

Methods (pathfinder's own code throughout):
* best subset: ``best_subsets`` (every size proved in the low setting; in the
  medium setting sizes 0..15 under a budget of ``MEDIUM_BUDGET`` models, the
  sizes it leaves unproved searched by splicing),
  each size's least-squares fit scored on the validation set;
* forward stepwise: ``forward_path`` at every size, likewise;
* lasso: ``fit_path`` (Gaussian, lasso), the penalty picked on validation;
* relaxed lasso: the same path refitted on each active set
  (``choose.relaxed.refit_path``) and blended (``choose.relaxed.blend``) over
  pathfinder's relaxation grid, the pair picked on validation.
This is a study, not a speed benchmark: nothing is timed against a peer.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

import common  # noqa: E402,F401  (puts the repository on the path)

from pathfinder import fit_path  # noqa: E402
from pathfinder.choose.problem import Problem  # noqa: E402
from pathfinder.choose import relaxed  # noqa: E402
from pathfinder.choose.subsets import best_subsets, forward_path  # noqa: E402

RHO = 0.35
SNRS = np.exp(np.linspace(np.log(0.05), np.log(6.0), 10))
SETTINGS = {"low": (100, 10), "medium": (500, 100)}
MEDIUM_BUDGET = 200_000      # models the branch and bound may visit per search at p=100


def simulate(rng, n, p, snr):
    idx = np.arange(p)
    Sigma = RHO ** np.abs(idx[:, None] - idx[None, :])
    L = np.linalg.cholesky(Sigma)
    beta = np.zeros(p)
    beta[:5] = 1.0
    sigma = np.sqrt(beta @ Sigma @ beta / snr)
    draw = lambda: rng.standard_normal((n, p)) @ L.T                       # noqa: E731
    X, Xv = draw(), draw()
    y = X @ beta + sigma * rng.standard_normal(n)
    yv = Xv @ beta + sigma * rng.standard_normal(n)
    return X, y, Xv, yv, beta, Sigma


def least_squares(X, y, cols):
    A = np.column_stack([np.ones(len(y)), X[:, list(cols)]])
    b = np.linalg.lstsq(A, y, rcond=None)[0]
    coef = np.zeros(X.shape[1])
    coef[list(cols)] = b[1:]
    return b[0], coef


def pick(candidates, Xv, yv):
    """The (intercept, coef) with the smallest validation error."""
    errors = [np.mean((yv - b0 - Xv @ b) ** 2) for b0, b in candidates]
    return candidates[int(np.argmin(errors))]


def columns_of(terms, names):
    return [names.index(t) for t in terms.split(";") if t]


def run_once(rng, n, p, snr, medium):
    X, y, Xv, yv, beta, Sigma = simulate(rng, n, p, snr)
    names = tuple(f"x{j}" for j in range(p))
    problem = Problem(X, y, "gaussian", names)
    out = {}
    if medium:
        search = best_subsets(problem, keep_per_size=1, max_size=15, max_fits=MEDIUM_BUDGET)
    else:
        search = best_subsets(problem, keep_per_size=1)
    best = search.best_by_size
    out["best subset"] = pick([least_squares(X, y, columns_of(t, names)) for t in best.terms],
                              Xv, yv)
    forward = forward_path(problem, max_size=search.max_size)
    out["forward stepwise"] = pick([least_squares(X, y, columns_of(t, names))
                                    for t in forward.terms], Xv, yv)
    lasso = fit_path(X, y, family="gaussian")
    path = list(zip(lasso.intercept, lasso.coef))
    out["lasso"] = pick(path, Xv, yv)
    b0_refit, b_refit = relaxed.refit_path(problem, lasso, np.arange(n))
    grid = relaxed.RELAXATIONS
    blended = []
    for relaxation in grid:
        b0s, bs = relaxed.blend(lasso, b0_refit, b_refit, relaxation)
        blended += list(zip(b0s, bs))
    out["relaxed lasso"] = pick(blended, Xv, yv)
    signal = beta @ Sigma @ beta
    risk = {m: float((b - beta) @ Sigma @ (b - beta) / signal) for m, (_, b) in out.items()}
    found = ",".join(sorted(set(search.sizes.found_by)))
    return risk, found


def main(argv):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--reps", type=int, default=3)
    parser.add_argument("--medium", action="store_true")
    parser.add_argument("--seed", type=int, default=2020)
    args = parser.parse_args(argv)
    settings = ["low", "medium"] if args.medium else ["low"]
    methods = ("best subset", "forward stepwise", "lasso", "relaxed lasso")
    for setting in settings:
        n, p = SETTINGS[setting]
        print(f"\n{setting}: n={n}, p={p}, {args.reps} replications; mean relative risk (SE)")
        print(f"{'SNR':>6} " + " ".join(f"{m:>18}" for m in methods) + "  best-subset sizes")
        for snr in SNRS:
            rng = np.random.default_rng([args.seed, int(snr * 1000), n])
            risks, how = {m: [] for m in methods}, set()
            for _ in range(args.reps):
                risk, found = run_once(rng, n, p, snr, setting == "medium")
                how.add(found)
                for m in methods:
                    risks[m].append(risk[m])
            cells = []
            for m in methods:
                r = np.array(risks[m])
                se = r.std(ddof=1) / np.sqrt(len(r)) if len(r) > 1 else float("nan")
                cells.append(f"{r.mean():9.3f} ({se:5.3f})")
            print(f"{snr:6.2f} " + " ".join(f"{c:>18}" for c in cells) + "  " + ";".join(sorted(how)),
                  flush=True)


if __name__ == "__main__":
    main(sys.argv[1:])
