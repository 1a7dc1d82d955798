"""Small unpenalised GLM refits by Newton's method (IRLS with a direct solve).

The relaxed lasso, best-subset and stepwise searches refit many GLMs on a
handful of chosen terms. For a few dozen columns a direct Newton step (one
Cholesky factorisation of the weighted cross-product) converges in a few
iterations however correlated the columns are, where coordinate descent
would crawl. The objective is the fitting core's with a pure ridge term:

    (1/n) sum_i w_i deviance_i / 2 + ridge / 2 * sum_j b_j^2

on standardised columns (ridge = 0 gives maximum likelihood). A tiny ridge
keeps refits on nearly collinear terms, or on presences that one term
separates, finite; the caller says how much.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.linalg import LinAlgError, cho_factor, cho_solve

from .families import get_family


@dataclass(frozen=True, eq=False)
class GlmFit:
    intercept: float
    coef: np.ndarray          # original units
    deviance: float           # sum_i w_i d_i with w rescaled to sum to n
    n_iter: int
    converged: bool


def _solve(M, v):
    try:
        return cho_solve(cho_factor(M, lower=True, check_finite=False), v, check_finite=False)
    except LinAlgError:
        return np.linalg.lstsq(M, v, rcond=None)[0]


def fit_glm(X, y, family="gaussian", *, offset=None, weights=None, ridge=0.0, tol=1e-10,
            max_iter=100) -> GlmFit:
    """Fit a GLM with an intercept on the columns of X (n, k); k may be 0."""
    fam = get_family(family)
    X = np.asarray(X, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    n, k = X.shape
    w = np.ones(n) if weights is None else np.asarray(weights, dtype=np.float64) * (n / np.sum(weights))
    off = np.zeros(n) if offset is None else np.asarray(offset, dtype=np.float64)
    if k == 0:
        b0 = fam.null_intercept(y, w, off)
        dev, *_ = fam.evaluate(y, b0 + off, w)
        return GlmFit(b0, np.zeros(0), dev, 0, True)
    mean = w @ X / n
    sd = np.sqrt(w @ (X - mean) ** 2 / n)
    sd[sd == 0] = 1.0
    A = np.empty((n, k + 1))
    A[:, 0] = 1.0
    A[:, 1:] = (X - mean) / sd
    penalty = np.full(k + 1, ridge)
    penalty[0] = 0.0

    beta = np.zeros(k + 1)
    beta[0] = fam.null_intercept(y, w, off)
    eta = A @ beta + off
    dev, W, resid, _ = fam.evaluate(y, eta, w)
    objective = dev / (2 * n) + 0.5 * ridge * beta[1:] @ beta[1:]
    converged, it = False, 0
    for it in range(1, max_iter + 1):
        M = (A * W[:, None]).T @ A / n + np.diag(penalty)
        z = eta - off + resid
        new = _solve(M, (A * W[:, None]).T @ z / n)
        for _ in range(30):  # step halving if the objective went up
            eta_new = A @ new + off
            dev_new, W_new, resid_new, _ = fam.evaluate(y, eta_new, w)
            objective_new = dev_new / (2 * n) + 0.5 * ridge * new[1:] @ new[1:]
            if objective_new <= objective * (1 + 1e-12) + 1e-300 or fam.least_squares:
                break
            new = 0.5 * (new + beta)
        change = abs(objective - objective_new) / (abs(objective_new) + 0.1)
        beta, eta, dev, W, resid, objective = new, eta_new, dev_new, W_new, resid_new, objective_new
        if fam.least_squares or change < tol:
            converged = True
            break
    coef = beta[1:] / sd
    return GlmFit(float(beta[0] - coef @ mean), coef, float(dev), it, converged)
