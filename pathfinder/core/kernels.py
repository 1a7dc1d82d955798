"""Compiled coordinate-descent loops (numba, cached on disk).

Two kernels solve the same penalised weighted least-squares problem

    minimise  1/(2n) sum_i W_i (z_i - b0 - x_i b)^2
              + sum_j [ l1_j |b_j| + l2_j / 2 * b_j^2 ]

over the coordinates in a working set, by cyclic coordinate descent with
soft-thresholding (Friedman, Hastie & Tibshirani 2010, section 2):

* :func:`cd_gram`  "covariance updates": works on the weighted Gram matrix
  ``G = X'WX / n`` and keeps the gradient ``c - G b`` current, so a sweep costs
  O(p) per changed coefficient and nothing in n. Used for Gaussian responses
  when n > p (the intercept separates after centring).
* :func:`cd_naive` "naive updates": keeps the working residual ``r = z - eta``
  and touches one column of X per update, O(n). Used when p is large and inside
  the IRLS loop of the binomial and Poisson families.

Both alternate a full sweep over the working set with sweeps over its non-zero
coordinates until the largest weighted squared change of a coefficient,
``xv_j * (change_j)^2`` (the decrease it buys in the objective, up to a factor
of 2), falls below ``tol``. They return the number of sweeps; reaching
``max_sweeps`` is reported by the caller as a warning, never silently.
"""

from __future__ import annotations

import numpy as np
from numba import njit


@njit(cache=True, inline="always")
def _soft(u, t):
    if u > t:
        return u - t
    if u < -t:
        return u + t
    return 0.0


@njit(cache=True)
def cd_gram(G, grad, beta, ws, l1, l2, tol, max_sweeps):
    """Coordinate descent on the Gram matrix; updates ``beta`` and ``grad`` in place.

    ``grad`` must hold ``c - G @ beta`` on entry for every coordinate (not only
    the working set) and holds it again on exit, so the caller can check the
    KKT conditions of the coordinates outside the working set for free.
    """
    p = G.shape[0]
    sweeps = 0
    active = np.empty(ws.shape[0], dtype=np.int64)
    while sweeps < max_sweeps:
        # a full sweep over the working set
        biggest = 0.0
        n_active = 0
        for k in range(ws.shape[0]):
            j = ws[k]
            gjj = G[j, j]
            old = beta[j]
            new = _soft(grad[j] + gjj * old, l1[j]) / (gjj + l2[j])
            if new != old:
                d = new - old
                beta[j] = new
                for i in range(p):
                    grad[i] -= d * G[j, i]
                change = gjj * d * d
                if change > biggest:
                    biggest = change
            if beta[j] != 0.0:
                active[n_active] = j
                n_active += 1
        sweeps += 1
        if biggest < tol:
            break
        # sweeps over the non-zero coordinates only, until they settle
        while sweeps < max_sweeps:
            biggest = 0.0
            for k in range(n_active):
                j = active[k]
                gjj = G[j, j]
                old = beta[j]
                new = _soft(grad[j] + gjj * old, l1[j]) / (gjj + l2[j])
                if new != old:
                    d = new - old
                    beta[j] = new
                    for i in range(p):
                        grad[i] -= d * G[j, i]
                    change = gjj * d * d
                    if change > biggest:
                        biggest = change
            sweeps += 1
            if biggest < tol:
                break
    return sweeps


@njit(cache=True, fastmath=True)
def _dot_weighted(W, x, r):
    """sum_i W_i x_i r_i; fastmath lets the compiler vectorise the sum.

    The vectorised sum adds in lanes by index, not by memory address, so its
    rounding is the same wherever the arrays sit: results stay identical
    across processes and backends (tested in tests/study).
    """
    s = 0.0
    for i in range(W.shape[0]):
        s += W[i] * x[i] * r[i]
    return s


@njit(cache=True)
def _step(X, r, beta, j, g, xvj, l1j, l2j):
    """Soft-threshold coordinate j at gradient g; keep r current; return xv_j * change^2."""
    old = beta[j]
    new = _soft(g + xvj * old, l1j) / (xvj + l2j)
    if new == old:
        return 0.0
    d = new - old
    beta[j] = new
    for i in range(X.shape[0]):
        r[i] -= d * X[i, j]
    return xvj * d * d


@njit(cache=True)
def _update_naive(X, W, r, beta, j, xvj, l1j, l2j, inv_n):
    g = _dot_weighted(W, X[:, j], r) * inv_n
    return _step(X, r, beta, j, g, xvj, l1j, l2j)


@njit(cache=True, fastmath=True)
def _dot_and_norm(W, x, r):
    """(sum_i W_i x_i r_i, sum_i W_i x_i^2) in one pass over the column."""
    s = 0.0
    q = 0.0
    for i in range(W.shape[0]):
        wx = W[i] * x[i]
        s += wx * r[i]
        q += wx * x[i]
    return s, q


@njit(cache=True)
def _update_naive_fresh(X, W, r, beta, j, xv, l1j, l2j, inv_n):
    """As _update_naive, but first computes xv[j] = sum W x_j^2 / n in the same pass."""
    g, q = _dot_and_norm(W, X[:, j], r)
    xv[j] = q * inv_n
    return _step(X, r, beta, j, g * inv_n, xv[j], l1j, l2j)


@njit(cache=True)
def _update_intercept(W, r, sum_w, inv_n):
    n = W.shape[0]
    g = 0.0
    for i in range(n):
        g += W[i] * r[i]
    d = g / sum_w
    if d != 0.0:
        for i in range(n):
            r[i] -= d
    return d, sum_w * inv_n * d * d


@njit(cache=True)
def cd_naive(X, W, r, beta, b0, ws, xv, l1, l2, fit_intercept, tol, max_sweeps, fresh_norms=False):
    """Coordinate descent with residual updates; updates ``beta`` and ``r`` in place.

    ``r`` is the working residual ``z - b0 - X beta`` on entry and on exit;
    ``xv[j]`` must hold ``sum_i W_i X_ij^2 / n`` for every ``j`` in ``ws``,
    unless ``fresh_norms``: then the first sweep computes them on the way, in
    the same pass over each column as its gradient.
    Returns ``(b0, sweeps)``.
    """
    n = X.shape[0]
    inv_n = 1.0 / n
    sum_w = 0.0
    for i in range(n):
        sum_w += W[i]
    sweeps = 0
    active = np.empty(ws.shape[0], dtype=np.int64)
    while sweeps < max_sweeps:
        biggest = 0.0
        n_active = 0
        for k in range(ws.shape[0]):
            j = ws[k]
            if fresh_norms and sweeps == 0:
                change = _update_naive_fresh(X, W, r, beta, j, xv, l1[j], l2[j], inv_n)
            else:
                change = _update_naive(X, W, r, beta, j, xv[j], l1[j], l2[j], inv_n)
            if change > biggest:
                biggest = change
            if beta[j] != 0.0:
                active[n_active] = j
                n_active += 1
        if fit_intercept:
            d, change = _update_intercept(W, r, sum_w, inv_n)
            b0 += d
            if change > biggest:
                biggest = change
        sweeps += 1
        if biggest < tol:
            break
        while sweeps < max_sweeps:
            biggest = 0.0
            for k in range(n_active):
                j = active[k]
                change = _update_naive(X, W, r, beta, j, xv[j], l1[j], l2[j], inv_n)
                if change > biggest:
                    biggest = change
            if fit_intercept:
                d, change = _update_intercept(W, r, sum_w, inv_n)
                b0 += d
                if change > biggest:
                    biggest = change
            sweeps += 1
            if biggest < tol:
                break
    return b0, sweeps


# ---- family arithmetic in one pass over the rows -----------------------------
# Each fills the IRLS working weights W = w V(mu) (V floored), the working
# residuals (y - mu) / V(mu) and the means, and returns the weighted deviance
# sum_i w_i d_i, computed stably from the linear predictor.


@njit(cache=True)
def binomial_evaluate(y, eta, w, prob_eps, W, resid, mu):
    """Logit link; y in [0, 1]. One exp and one log1p per row."""
    floor = prob_eps * (1.0 - prob_eps)
    total = 0.0
    for i in range(y.shape[0]):
        e = eta[i]
        t = np.exp(-abs(e))
        l = np.log1p(t)
        if e >= 0:
            m = 1.0 / (1.0 + t)
            log_m, log_1m = -l, -e - l
        else:
            m = t / (1.0 + t)
            log_m, log_1m = e - l, -l
        yi = y[i]
        d = -(yi * log_m + (1.0 - yi) * log_1m)
        if 0.0 < yi < 1.0:
            d += yi * np.log(yi) + (1.0 - yi) * np.log(1.0 - yi)
        total += w[i] * d
        v = m * (1.0 - m)
        if v < floor:
            v = floor
        mu[i] = m
        W[i] = w[i] * v
        resid[i] = (yi - m) / v
    return 2.0 * total


@njit(cache=True)
def poisson_evaluate(y, eta, w, eta_max, W, resid, mu):
    """Log link. One exp per row (log y is needed only where y > 0)."""
    total = 0.0
    for i in range(y.shape[0]):
        e = eta[i] if eta[i] < eta_max else eta_max
        m = np.exp(e)
        yi = y[i]
        d = m - yi
        if yi > 0:
            d += yi * (np.log(yi) - e)
        total += w[i] * d
        v = m if m > 1e-10 else 1e-10
        mu[i] = m
        W[i] = w[i] * v
        resid[i] = (yi - m) / v
    return 2.0 * total
