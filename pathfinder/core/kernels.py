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


@njit(cache=True, inline="always")
def _gram_sweep(G, grad, beta, cols, count, l1, l2, active, record):
    """One sweep over ``cols[:count]``: returns (largest change, non-zero coordinates
    recorded in ``active`` when ``record``)."""
    p = G.shape[0]
    biggest = 0.0
    n_active = 0
    for k in range(count):
        j = cols[k]
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
        if record and beta[j] != 0.0:
            active[n_active] = j
            n_active += 1
    return biggest, n_active


@njit(cache=True)
def cd_gram(G, grad, beta, ws, l1, l2, tol, max_sweeps):
    """Coordinate descent on the Gram matrix; updates ``beta`` and ``grad`` in place.

    ``grad`` must hold ``c - G @ beta`` on entry for every coordinate (not only
    the working set) and holds it again on exit, so the caller can check the
    KKT conditions of the coordinates outside the working set for free.
    """
    sweeps = 0
    active = np.empty(ws.shape[0], dtype=np.int64)
    while sweeps < max_sweeps:
        # a full sweep over the working set
        biggest, n_active = _gram_sweep(G, grad, beta, ws, ws.shape[0], l1, l2, active, True)
        sweeps += 1
        if biggest < tol:
            break
        # sweeps over the non-zero coordinates only, until they settle
        while sweeps < max_sweeps:
            biggest, _ = _gram_sweep(G, grad, beta, active, n_active, l1, l2, active, False)
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


@njit(cache=True, inline="always")
def _naive_sweep(X, W, r, beta, b0, cols, count, xv, l1, l2, fit_intercept, sum_w, inv_n,
                 fresh, active, record):
    """One sweep over ``cols[:count]`` and the intercept: (b0, largest change, non-zero
    coordinates recorded in ``active`` when ``record``)."""
    biggest = 0.0
    n_active = 0
    for k in range(count):
        j = cols[k]
        if fresh:
            change = _update_naive_fresh(X, W, r, beta, j, xv, l1[j], l2[j], inv_n)
        else:
            change = _update_naive(X, W, r, beta, j, xv[j], l1[j], l2[j], inv_n)
        if change > biggest:
            biggest = change
        if record and beta[j] != 0.0:
            active[n_active] = j
            n_active += 1
    if fit_intercept:
        d, change = _update_intercept(W, r, sum_w, inv_n)
        b0 += d
        if change > biggest:
            biggest = change
    return b0, biggest, n_active


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
        b0, biggest, n_active = _naive_sweep(X, W, r, beta, b0, ws, ws.shape[0], xv, l1, l2,
                                             fit_intercept, sum_w, inv_n,
                                             fresh_norms and sweeps == 0, active, True)
        sweeps += 1
        if biggest < tol:
            break
        while sweeps < max_sweeps:
            b0, biggest, _ = _naive_sweep(X, W, r, beta, b0, active, n_active, xv, l1, l2,
                                          fit_intercept, sum_w, inv_n, False, active, False)
            sweeps += 1
            if biggest < tol:
                break
    return b0, sweeps


# ---- family arithmetic in one pass over the rows -----------------------------

BINOMIAL_ROWS = 1            # families.BINOMIAL_CODE (kernels import nothing; a test keeps them equal)
NEGATIVE_BINOMIAL_ROWS = 3   # families.NEGATIVE_BINOMIAL_CODE
# Each row function returns (w_i * deviance_i / 2, mean, h, q), computed
# stably from the linear predictor: the IRLS working weight is w_i * h (h the
# row's information about its linear predictor, floored) and the working
# residual (y_i - mu_i) / q, so that weight times residual is the score. For
# the canonical links (binomial, Poisson) h = q = V(mu), the floored variance.
# ``shape`` is the negative binomial's theta (ignored by the other families).


@njit(cache=True, inline="always")
def _binomial_row(yi, wi, e, floor):
    """(w_i * deviance_i / 2, mean, floored variance, the same) of one row, logit link."""
    t = np.exp(-abs(e))
    l = np.log1p(t)
    if e >= 0:
        m = 1.0 / (1.0 + t)
        log_m, log_1m = -l, -e - l
    else:
        m = t / (1.0 + t)
        log_m, log_1m = e - l, -l
    d = -(yi * log_m + (1.0 - yi) * log_1m)
    if 0.0 < yi < 1.0:
        d += yi * np.log(yi) + (1.0 - yi) * np.log(1.0 - yi)
    v = m * (1.0 - m)
    if v < floor:
        v = floor
    return wi * d, m, v, v


@njit(cache=True, inline="always")
def _poisson_row(yi, wi, e, eta_max):
    """(w_i * deviance_i / 2, mean, floored variance, the same) of one row, log link."""
    if e > eta_max:
        e = eta_max
    m = np.exp(e)
    d = m - yi
    if yi > 0:
        d += yi * (np.log(yi) - e)
    v = m if m > 1e-10 else 1e-10
    return wi * d, m, v, v


@njit(cache=True, inline="always")
def _negative_binomial_row(yi, wi, e, eta_max, theta):
    """(w_i * deviance_i / 2, mean, Newton weight factor, residual divisor) of one row:
    NB2 (variance mu + mu^2 / theta), log link.

    Half the unit deviance is ``y log(y / mu) - (y + theta) log((y + theta) / (mu + theta))``,
    the second log taken as ``log1p((y - mu) / (mu + theta))`` so that it tends
    to the Poisson row's ``mu - y`` as theta grows. The log link is not
    canonical here, and the rows carry the observed information instead of
    Fisher's: the log-likelihood of a row is concave in eta with second
    derivative ``-theta mu (theta + y) / (theta + mu)^2``, so IRLS with that
    weight and the working residual ``(y - mu) (theta + mu) / (mu (theta + y))``
    is Newton's method itself (quadratic convergence; Fisher's weights
    ``mu theta / (theta + mu)`` converge only linearly when theta is small).
    Weight times residual is the score ``theta (y - mu) / (theta + mu)``.
    """
    if e > eta_max:
        e = eta_max
    m = np.exp(e)
    d = -(yi + theta) * np.log1p((yi - m) / (m + theta))
    if yi > 0:
        d += yi * (np.log(yi) - e)
    dm = m if m > 1e-10 else 1e-10
    tm = theta + m
    ty = theta + yi
    return wi * d, m, dm * theta * ty / (tm * tm), dm * ty / tm


@njit(cache=True, inline="always")
def mean_at(e, code, bound):
    """The mean at linear predictor ``e``, as the ``*_row`` functions give it."""
    if code == BINOMIAL_ROWS:
        t = np.exp(-abs(e))
        return 1.0 / (1.0 + t) if e >= 0 else t / (1.0 + t)
    return np.exp(e if e < bound else bound)


@njit(cache=True, inline="always")
def _family_row(yi, wi, e, code, bound, shape):
    """The row function of the family whose code is ``code`` (see
    :mod:`pathfinder.core.families`): ``bound`` is the variance floor
    (binomial) or the largest linear predictor (Poisson, negative binomial);
    ``shape`` is the negative binomial's theta."""
    if code == BINOMIAL_ROWS:
        return _binomial_row(yi, wi, e, bound)
    if code == NEGATIVE_BINOMIAL_ROWS:
        return _negative_binomial_row(yi, wi, e, bound, shape)
    return _poisson_row(yi, wi, e, bound)


@njit(cache=True)
def glm_evaluate(y, eta, w, code, bound, shape, W, resid, mu):
    """Binomial (logit), Poisson or negative binomial (log) rows: one exp and at most two logs each."""
    total = 0.0
    for i in range(y.shape[0]):
        d, m, h, q = _family_row(y[i], w[i], eta[i], code, bound, shape)
        total += d
        mu[i] = m
        W[i] = w[i] * h
        resid[i] = (y[i] - m) / q
    return 2.0 * total


# ---- one pass over the rows for the Newton solver of large tables ------------

PASS_ROWS = 256  # rows per block: a block of the columns read stays in cache


@njit(cache=True, nogil=True, fastmath=True)
def _add_columns(e, X, cols, coef, center, start, stop):
    """``e += (X[start:stop, cols] - center[cols]) @ coef[cols]``, four columns per pass over ``e``."""
    m = stop - start
    k = cols.shape[0]
    a = 0
    while a + 4 <= k:
        j0, j1, j2, j3 = cols[a], cols[a + 1], cols[a + 2], cols[a + 3]
        b0, b1, b2, b3 = coef[j0], coef[j1], coef[j2], coef[j3]
        c0, c1, c2, c3 = center[j0], center[j1], center[j2], center[j3]
        x0, x1 = X[start:stop, j0], X[start:stop, j1]
        x2, x3 = X[start:stop, j2], X[start:stop, j3]
        for i in range(m):
            e[i] += b0 * (x0[i] - c0) + b1 * (x1[i] - c1) + b2 * (x2[i] - c2) + b3 * (x3[i] - c3)
        a += 4
    while a < k:
        j = cols[a]
        bj, cj = coef[j], center[j]
        x = X[start:stop, j]
        for i in range(m):
            e[i] += bj * (x[i] - cj)
        a += 1


@njit(cache=True, nogil=True, fastmath=True)
def _add_products(out, X, cols, center, score, start, stop):
    """``out[k] += (X[start:stop, cols[k]] - center[cols[k]]) @ score``, four columns at a time.

    The sums are vectorised in lanes by index (see _dot_weighted), so their
    rounding does not depend on where the arrays sit in memory.
    """
    m = stop - start
    k = cols.shape[0]
    a = 0
    while a + 4 <= k:
        x0, x1 = X[start:stop, cols[a]], X[start:stop, cols[a + 1]]
        x2, x3 = X[start:stop, cols[a + 2]], X[start:stop, cols[a + 3]]
        c0, c1, c2, c3 = center[cols[a]], center[cols[a + 1]], center[cols[a + 2]], center[cols[a + 3]]
        s0 = s1 = s2 = s3 = 0.0
        for i in range(m):
            si = score[i]
            s0 += (x0[i] - c0) * si
            s1 += (x1[i] - c1) * si
            s2 += (x2[i] - c2) * si
            s3 += (x3[i] - c3) * si
        out[a] += s0
        out[a + 1] += s1
        out[a + 2] += s2
        out[a + 3] += s3
        a += 4
    while a < k:
        x = X[start:stop, cols[a]]
        c = center[cols[a]]
        s = 0.0
        for i in range(m):
            s += (x[i] - c) * score[i]
        out[a] += s
        a += 1


@njit(cache=True, nogil=True)
def _gather(buf, X, rows, used, start, m):
    """``buf[:m, j] = X[rows[start:start + m], j]`` for the ``used`` columns, four at a time."""
    k = used.shape[0]
    a = 0
    while a + 4 <= k:
        j0, j1, j2, j3 = used[a], used[a + 1], used[a + 2], used[a + 3]
        for i in range(m):
            r = rows[start + i]
            buf[i, j0] = X[r, j0]
            buf[i, j1] = X[r, j1]
            buf[i, j2] = X[r, j2]
            buf[i, j3] = X[r, j3]
        a += 4
    while a < k:
        j = used[a]
        for i in range(m):
            buf[i, j] = X[rows[start + i], j]
        a += 1


@njit(cache=True, nogil=True)
def glm_pass(X, rows, used, center, coef, b0, offset, y, w, active, gcols, code, bound, shape,
             with_deviance, lo, hi, eta, grad, anchor, track):
    """Rows ``lo:hi``: linear predictor from scratch, family arithmetic, gradient.

    With ``Xc = X - center`` (column by column, on the fly: X itself is never
    copied), ``eta = offset + b0 + Xc[:, active] @ coef[active]``; then the
    means (and, if ``with_deviance``, the deviances: a log per row) as in
    :func:`glm_evaluate`; then
    ``grad[k] += sum_i Xc[i, gcols[k]] * s_i`` and, in the last slot, the same
    sum for the intercept, with the scores ``s_i = w_i (y_i - mu_i)`` (divided
    by ``1 + mu_i / shape`` for the negative binomial, whose log link is not
    canonical). An empty ``offset`` stands for
    zeros and empty weights ``w`` for ones. Rows go in blocks of ``PASS_ROWS``,
    so each block of X comes from memory once and is reused from cache.

    With ``rows`` (not empty) the fit's row i is row ``rows[i]`` of X: each
    block first gathers the ``used`` columns (all of ``active`` and ``gcols``)
    into a small buffer, so a fold or a subsample is never copied whole.

    ``anchor`` holds the scores ``w_i (y_i - mu_i)`` of an earlier point:
    ``track == 1`` sums the squared distance to them, ``track == 2`` stores
    the present scores there instead, ``track == 0`` leaves them alone.
    Returns the weighted deviance of the rows (``sum w_i d_i``, or 0 without
    ``with_deviance``) and that squared distance.
    """
    total = 0.0
    drift = 0.0
    kg = gcols.shape[0]
    score = np.empty(PASS_ROWS)
    subset = rows.shape[0] > 0
    buf = np.empty((X.shape[1] if subset else 0, PASS_ROWS)).T     # column-ordered
    for start in range(lo, hi, PASS_ROWS):
        stop = min(start + PASS_ROWS, hi)
        m = stop - start
        e = eta[start:stop]
        if offset.shape[0]:
            for i in range(m):
                e[i] = offset[start + i] + b0
        else:
            e[:] = b0
        if subset:
            _gather(buf, X, rows, used, start, m)
            _add_columns(e, buf, active, coef, center, 0, m)
        else:
            _add_columns(e, X, active, coef, center, start, stop)
        s0 = 0.0
        for i in range(m):
            r = start + i
            wr = w[r] if w.shape[0] else 1.0
            if with_deviance:
                d, mean, h, q = _family_row(y[r], wr, e[i], code, bound, shape)
                total += d
            else:
                mean = mean_at(e[i], code, bound)
            if code == NEGATIVE_BINOMIAL_ROWS:
                score[i] = wr * (y[r] - mean) / (1.0 + mean / shape)
            else:
                score[i] = wr * (y[r] - mean)
            s0 += score[i]
            if track == 1:
                gap = score[i] - anchor[r]
                drift += gap * gap
            elif track == 2:
                anchor[r] = score[i]
        if subset:
            _add_products(grad, buf, gcols, center, score, 0, m)
        else:
            _add_products(grad, X, gcols, center, score, start, stop)
        grad[kg] += s0
    return 2.0 * total, drift


# ---- the standardised copy -----------------------------------------------------


@njit(cache=True, nogil=True, fastmath=True)
def centre_column(X, rows, j, mean, w, out):
    """``out = X[rows, j] - mean`` (all rows when ``rows`` is empty); returns
    ``sum w out^2 / n`` and ``sum out^2 / n``."""
    n = out.shape[0]
    s = 0.0
    q = 0.0
    if rows.shape[0] == 0:
        for i in range(n):
            out[i] = X[i, j] - mean
    else:
        for i in range(n):
            out[i] = X[rows[i], j] - mean
    for i in range(n):
        v = out[i]
        s += w[i] * (v * v)
        q += v * v
    return s / n, q / n


@njit(cache=True, nogil=True)
def divide_column(x, by):
    for i in range(x.shape[0]):
        x[i] /= by


@njit(cache=True, nogil=True, fastmath=True)
def column_spread(X, rows, j, mean, w):
    """``sum_i w_i (X[r_i, j] - mean)^2 / n`` and the same without weights, no copy made;
    ``r_i`` runs over ``rows``, or over every row when ``rows`` is empty.

    The sums are vectorised in lanes by index (see _dot_weighted)."""
    n = w.shape[0]
    s = 0.0
    q = 0.0
    if rows.shape[0] == 0:
        for i in range(n):
            v = X[i, j] - mean
            s += w[i] * (v * v)
            q += v * v
    else:
        for i in range(n):
            v = X[rows[i], j] - mean
            s += w[i] * (v * v)
            q += v * v
    return s / n, q / n


@njit(cache=True, nogil=True)
def glm_deviance(y, w, eta, code, bound, shape, lo, hi):
    """Weighted deviance ``sum w_i d_i`` of rows ``lo:hi`` at linear predictor ``eta``."""
    total = 0.0
    for r in range(lo, hi):
        d, mean, h, q = _family_row(y[r], w[r], eta[r], code, bound, shape)
        total += d
    return 2.0 * total


@njit(cache=True, nogil=True)
def weighted_sample(X, rows, cols, center, inv_scale, root, out):
    """``out[:, k] = (X[rows, j] - center[j]) * inv_scale[j] * root`` for ``j = cols[k]``;
    ``j = X.shape[1]`` stands for a column of ones (the intercept)."""
    for k in range(cols.shape[0]):
        j = cols[k]
        if j == X.shape[1]:
            for i in range(rows.shape[0]):
                out[i, k] = root[i]
        else:
            c, s = center[j], inv_scale[j]
            for i in range(rows.shape[0]):
                out[i, k] = (X[rows[i], j] - c) * s * root[i]
