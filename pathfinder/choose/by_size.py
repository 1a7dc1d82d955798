"""Best subset, forward stepwise, the lasso and the relaxed lasso, size by size.

Hastie, Tibshirani & Tibshirani (2020, Statistical Science 35:579-592)
compare these four ways of choosing a model at each number of terms. This
module puts their fits on the data side by side: for every size k, the
log-likelihood of

* ``best subset``: the best model of k terms the search kept (and how that
  size was found: exhaustive, proved or searched);
* ``forward stepwise``: forward stepwise's model of k terms;
* ``lasso``: the lasso's own (shrunken) coefficients at the first penalty of
  its path that holds k terms;
* ``relaxed lasso``: the unpenalised refit of those same k terms (the relaxed
  lasso with relaxation 0).

On the data they were chosen from, best subset can never fit worse than the
other three at the same size when the size is exhaustive or proved; the
lasso fits worst because it shrinks. Which predicts new sites best is the
question nested cross-validation answers (comparison.csv).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .problem import BEST_SUBSET, LASSO, RELAXED_LASSO, STEPWISE, Problem, refit


def _log_likelihood(problem: Problem, intercept, coef) -> float:
    rows = np.arange(problem.n)
    eta = problem.linear_predictor(np.array([intercept]), np.asarray(coef)[None, :], rows)[:, 0]
    w = np.ones(problem.n) if problem.weights is None else problem.weights * problem.n / problem.weights.sum()
    return float(problem.family.log_likelihood(problem.y, problem.family.inverse_link(eta), w))


def compare_by_size(problem: Problem, search, lasso_fit) -> pd.DataFrame:
    """One row per (size, method): k, method, terms, log_likelihood, found_by."""
    rows = []
    best = search.table[search.table["rank_within_size"] == 1]
    for _, model in best.iterrows():
        rows.append({"k": int(model["k"]), "method": BEST_SUBSET, "terms": model["terms"],
                     "log_likelihood": float(model["log_likelihood"]),
                     "found_by": model["found_by"]})
    if search.forward is not None:
        for _, model in search.forward.iterrows():
            rows.append({"k": int(model["k"]), "method": STEPWISE + " (forward)",
                         "terms": model["terms"],
                         "log_likelihood": float(model["log_likelihood"]), "found_by": ""})
    seen = set()
    for step, k in enumerate(lasso_fit.n_terms):
        k = int(k)
        if k in seen:
            continue
        seen.add(k)
        active = np.flatnonzero(lasso_fit.coef[step])
        terms = ";".join(lasso_fit.names[j] for j in active)
        rows.append({"k": k, "method": LASSO, "terms": terms, "found_by": "",
                     "log_likelihood": _log_likelihood(problem, lasso_fit.intercept[step],
                                                       lasso_fit.coef[step])})
        b0, b = refit(problem, None, active, ridge=0.0)
        rows.append({"k": k, "method": RELAXED_LASSO + " (refit)", "terms": terms, "found_by": "",
                     "log_likelihood": _log_likelihood(problem, b0, b)})
    table = pd.DataFrame(rows)
    return table.sort_values(["k", "method"], kind="stable").reset_index(drop=True)
