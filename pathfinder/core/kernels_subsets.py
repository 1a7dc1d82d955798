"""Compiled loops of the best-subset and stepwise searches (numba, cached on disk).

Both exhaustive searches walk the tree of subsets depth first, in
lexicographic order of the sorted member indices: the children of a subset S
whose largest member is m are S + {j} for j > m. Every subset of up to
``max_size`` members is visited once, and each is reached from its parent, so
the work done for the parent is reused:

* :func:`gaussian_search` (least squares) works on the centred weighted
  cross-product matrix of the standardised predictors and the response. The
  residual sum of squares of S + {j} follows from the parent's Schur
  complement by one division (``RSS(S) - c_jy^2 / c_jj``); a subset that has
  children needs one symmetric elimination step on the indices above j. The
  number of rows never enters the loop.
* :func:`glm_search` (binomial, Poisson, negative binomial with theta held
  fixed) refits each subset by Newton's method, started from its parent's
  coefficients with the new one at zero.
  At that start the linear predictor is the parent's, so the first Hessian
  only needs one new row, formed from the parent's working weights and
  residuals (kept per depth, or recomputed when memory is short); usually one
  evaluated Newton step then reaches the tolerance, and the step it proposes
  next is taken without evaluation (near the optimum Newton's method squares
  the error).

A search can start at any position of the sequence and visit ``count``
subsets from there: the parents of the first subset are rebuilt by the same
steps in the same order as a search from the beginning would take, so every
subset's figures are identical however the sequence is cut into tasks.

Subsets are kept per size in fixed slots ("best ``cap[s]`` of size s"): a new
subset replaces the worst kept one when it is better. Better means a larger
score (log-likelihood up to a constant), ties going to the earlier subset in
lexicographic order, a total order, so the kept set does not depend on the
order in which subsets were met.

Nearly collinear terms: a term whose residual variance given the others is
below ``alias_tol`` times its own is treated as aliased (its coefficient is
held at zero), as a generalised inverse would.
"""

from __future__ import annotations

import numpy as np
from numba import njit

# Reassociation lets the compiler vectorise the long sums over rows; no flag
# that assumes finite values is set, so infinities still propagate.
_FAST = {"nsz", "arcp", "contract", "reassoc"}

GAUSSIAN, BINOMIAL, POISSON, NEGATIVE_BINOMIAL = 0, 1, 2, 3
_ETA_CAP = 500.0          # exp() of a Poisson (negative binomial) linear predictor stays finite
_VAR_FLOOR = 1e-12        # smallest binomial variance mu (1 - mu) used in the Hessian
_MAX_HALVINGS = 40


# ---- keeping the best subsets of each size -------------------------------------

@njit(cache=True, inline="always")
def _better(score_a, members_a, score_b, members_b, size):
    """Is subset a ranked above subset b (same size)? Larger score, then earlier order."""
    if score_a != score_b:
        return score_a > score_b
    for t in range(size):
        if members_a[t] != members_b[t]:
            return members_a[t] < members_b[t]
    return False


@njit(cache=True)
def _find_worst(size, base, filled, best_score, best_members):
    worst = base
    for s in range(base + 1, base + filled):
        if _better(best_score[worst], best_members[worst], best_score[s], best_members[s], size):
            worst = s
    return worst


@njit(cache=True)
def _record(size, score, members, beta, slot_start, cap, filled, worst, floor,
            best_score, best_members, best_coef):
    """Offer one subset to the slots of its size; keep it if it is among the best.

    ``floor[size]`` is the score of the worst subset kept once the slots of
    that size are full (minus infinity before): callers skip this call for a
    score below it, which is nearly every subset of a large search.
    """
    if score != score:  # NaN never wins
        score = -np.inf
    if cap[size] == 0:
        return
    if take_slot(size, score, members, beta, slot_start[size], cap[size], filled, worst,
                 best_score, best_members, best_coef):
        floor[size] = best_score[worst[size]]


@njit(cache=True, inline="always")
def take_slot(size, score, members, beta, base, c, filled, worst, best_score, best_members,
              best_coef):
    """Put a subset into a free slot of its size, or in place of the worst kept one if it
    is better; returns True when the slots of that size are full afterwards."""
    if filled[size] < c:
        slot = base + filled[size]
        filled[size] += 1
    else:
        slot = worst[size]
        if not _better(score, members, best_score[slot], best_members[slot], size):
            return False
    best_score[slot] = score
    for t in range(size):
        best_members[slot, t] = members[t]
    for t in range(min(best_coef.shape[1], size + 1)):
        best_coef[slot, t] = beta[t]
    if filled[size] == c:
        worst[size] = _find_worst(size, base, c, best_score, best_members)
        return True
    return False


# ---- least squares: elimination on the cross-product matrix --------------------

@njit(cache=True, inline="always")
def _pivot_rss(M, d, j, yv, diag0, alias_tol):
    """RSS after adding term j to the model whose Schur complement is M[d]; and is j aliased?

    Only the upper triangle (row index <= column index) of M[d] is kept.
    """
    piv = M[d, j, j]
    if not (piv > alias_tol * diag0[j]):
        return M[d, yv, yv], True
    return M[d, yv, yv] - (M[d, j, yv] / piv) * M[d, j, yv], False


@njit(cache=True, inline="always")
def _eliminate(M, d, j, yv, aliased):
    """M[d + 1]: Schur complement of pivot j in M[d], on the indices above j and the response."""
    if aliased:
        for a in range(j + 1, yv + 1):
            for b in range(a, yv + 1):
                M[d + 1, a, b] = M[d, a, b]
        return
    piv = M[d, j, j]
    for a in range(j + 1, yv + 1):
        f = M[d, j, a] / piv
        for b in range(a, yv + 1):
            M[d + 1, a, b] = M[d, a, b] - f * M[d, j, b]


@njit(cache=True, inline="always")
def _next_subset(d, nxt, members, max_size, p):
    """The next subset in depth-first order: climb to the deepest depth that can still
    grow, put its next member at ``members[d]``; ``(depth, member)``, depth -1 when done."""
    while d >= 0 and not (d < max_size and nxt[d] < p):
        d -= 1
    if d < 0:
        return d, -1
    j = nxt[d]
    nxt[d] = j + 1
    members[d] = j
    return d, j


@njit(cache=True)
def gaussian_search(A, start, count, max_size, alias_tol, slot_start, cap,
                    best_score, best_members):
    """Visit ``count`` subsets from ``start`` (sorted members); keep the smallest RSS per size.

    ``A`` is the (p + 1, p + 1) centred weighted cross-product matrix of the
    standardised predictors and (last) the response. Scores are ``-RSS``.
    Returns the number of subsets visited.
    """
    q = A.shape[0]
    p = q - 1
    yv = p
    depth_max = max_size + 1
    M = np.empty((depth_max, q, q))
    M[0] = A
    diag0 = np.empty(p)
    for j in range(p):
        diag0[j] = A[j, j]
    members = np.zeros(max(max_size, 1), dtype=np.int64)
    nxt = np.zeros(depth_max + 1, dtype=np.int64)
    filled = np.zeros(max_size + 1, dtype=np.int64)
    worst = np.zeros(max_size + 1, dtype=np.int64)
    floor = np.full(max_size + 1, -np.inf)
    no_coef = np.empty((0, 0))
    no_beta = np.empty(0)

    # Rebuild the parents of the first subset exactly as a search from the start would.
    d = start.shape[0]
    rss = A[yv, yv]
    for i in range(d):
        j = start[i]
        members[i] = j
        rss, aliased = _pivot_rss(M, i, j, yv, diag0, alias_tol)
        if i + 1 < max_size and j + 1 < p:
            _eliminate(M, i, j, yv, aliased)
        nxt[i] = j + 1
    nxt[d] = start[d - 1] + 1 if d > 0 else 0
    _record(d, -rss, members, no_beta, slot_start, cap, filled, worst, floor,
            best_score, best_members, no_coef)
    done = 1
    while done < count:
        d, j = _next_subset(d, nxt, members, max_size, p)
        if d < 0:
            break
        rss, aliased = _pivot_rss(M, d, j, yv, diag0, alias_tol)
        if d + 1 < max_size and j + 1 < p:
            _eliminate(M, d, j, yv, aliased)
        d += 1
        nxt[d] = j + 1
        if -rss >= floor[d]:
            _record(d, -rss, members, no_beta, slot_start, cap, filled, worst, floor,
                    best_score, best_members, no_coef)
        done += 1
    return done


# ---- GLMs: Newton's method on a few columns ------------------------------------

@njit(cache=True, fastmath=_FAST)
def _dot(a, b):
    s = 0.0
    for i in range(a.shape[0]):
        s += a[i] * b[i]
    return s


@njit(cache=True, fastmath=_FAST)
def _sum(a):
    s = 0.0
    for i in range(a.shape[0]):
        s += a[i]
    return s


@njit(cache=True)
def _rows(Xt, y, w, off, fam, shape, members, k, beta, eta, v, r):
    """Linear predictor, Newton weights ``v``, scores ``r`` and the objective.

    The objective is the log-likelihood without the terms free of the
    coefficients: binomial ``sum w (y eta - log(1 + e^eta))``, Poisson
    ``sum w (y eta - e^eta)``, Gaussian ``-sum w (y - eta)^2 / 2``, negative
    binomial (NB2, theta = ``shape`` held fixed, log link)
    ``sum w (y eta - (y + theta) log(1 + mu / theta))``; the family's
    ``log_likelihood_constant`` adds the rest back (for the negative binomial
    ``sum w [log Gamma(y + theta) - log Gamma(theta) - log y! - y log theta]``).
    ``r`` is the derivative of each row's objective by its linear predictor
    and ``v`` minus its second derivative: ``r = w (y - mu)`` and ``v = w
    V(mu)`` for the canonical links; for the negative binomial (log link not
    canonical) ``r = w theta (y - mu) / (theta + mu)`` and the observed
    information ``v = w theta mu (theta + y) / (theta + mu)^2``, positive for
    every count, so the fits take true Newton steps (as
    :class:`pathfinder.core.families.NegativeBinomial` does). ``shape`` is
    ignored by the other families.
    """
    n = y.shape[0]
    b0 = beta[0]
    for i in range(n):
        eta[i] = b0 + off[i]
    for a in range(k):
        b = beta[a + 1]
        if b != 0.0:
            col = Xt[members[a]]
            for i in range(n):
                eta[i] += b * col[i]
    f = 0.0
    if fam == BINOMIAL:
        for i in range(n):
            e = eta[i]
            t = np.exp(-abs(e))
            if e >= 0:
                m = 1.0 / (1.0 + t)
                soft = e + np.log1p(t)
            else:
                m = t / (1.0 + t)
                soft = np.log1p(t)
            f += w[i] * (y[i] * e - soft)
            var = m * (1.0 - m)
            v[i] = w[i] * (var if var > _VAR_FLOOR else _VAR_FLOOR)
            r[i] = w[i] * (y[i] - m)
    elif fam == POISSON:
        for i in range(n):
            e = eta[i] if eta[i] < _ETA_CAP else _ETA_CAP
            m = np.exp(e)
            f += w[i] * (y[i] * eta[i] - m)
            v[i] = w[i] * m
            r[i] = w[i] * (y[i] - m)
    elif fam == NEGATIVE_BINOMIAL:
        theta = shape
        for i in range(n):
            e = eta[i] if eta[i] < _ETA_CAP else _ETA_CAP
            m = np.exp(e)
            tm = theta + m
            share = theta / tm               # 1 / (1 + mu / theta), kept in (0, 1]
            f += w[i] * (y[i] * eta[i] - (y[i] + theta) * np.log1p(m / theta))
            v[i] = w[i] * (m / tm) * share * (theta + y[i])
            r[i] = w[i] * share * (y[i] - m)
    else:
        for i in range(n):
            res = y[i] - eta[i]
            f -= 0.5 * w[i] * res * res
            v[i] = w[i]
            r[i] = w[i] * res
    return f


@njit(cache=True)
def _pass(Xt, y, w, off, fam, shape, members, k, beta, g, H, from_col, work):
    """Objective, gradient and Hessian at ``beta`` (intercept first, then ``members[:k]``).

    Only the gradient entries and Hessian rows of the columns at positions
    ``>= from_col`` are computed (and the intercept's when ``from_col == 0``);
    the rest must already hold the right values (a child keeps its parent's).
    """
    eta, v, r, vx = work[0], work[1], work[2], work[3]
    f = _rows(Xt, y, w, off, fam, shape, members, k, beta, eta, v, r)
    if from_col == 0:
        g[0] = _sum(r)
        H[0, 0] = _sum(v)
    for a in range(from_col, k):
        col = Xt[members[a]]
        g[a + 1] = _dot(r, col)
        for i in range(vx.shape[0]):
            vx[i] = v[i] * col[i]
        h = _sum(vx)
        H[a + 1, 0] = h
        H[0, a + 1] = h
        for b in range(a + 1):
            h = _dot(vx, Xt[members[b]])
            H[a + 1, b + 1] = h
            H[b + 1, a + 1] = h
    return f


@njit(cache=True)
def _solve(H, g, q, L, step, alias_tol):
    """Newton step ``H^-1 g`` by Cholesky, aliased columns held at zero; returns ``g.step / 2``."""
    for c in range(q):
        s = H[c, c]
        for t in range(c):
            s -= L[c, t] * L[c, t]
        if not (H[c, c] > 0.0 and s > alias_tol * H[c, c]):
            for rr in range(c, q):
                L[rr, c] = 0.0
            continue
        d = np.sqrt(s)
        L[c, c] = d
        for rr in range(c + 1, q):
            s2 = H[rr, c]
            for t in range(c):
                s2 -= L[rr, t] * L[c, t]
            L[rr, c] = s2 / d
    for c in range(q):
        if L[c, c] == 0.0:
            step[c] = 0.0
            continue
        s = g[c]
        for t in range(c):
            s -= L[c, t] * step[t]
        step[c] = s / L[c, c]
    for c in range(q - 1, -1, -1):
        if L[c, c] == 0.0:
            step[c] = 0.0
            continue
        s = step[c]
        for t in range(c + 1, q):
            s -= L[t, c] * step[t]
        step[c] = s / L[c, c]
    dec = 0.0
    for c in range(q):
        dec += g[c] * step[c]
    return 0.5 * dec


@njit(cache=True)
def solve_aliased(H, g, alias_tol):
    """``(x, rank)``: the solution of ``H x = g`` with aliased columns held at zero.

    ``H`` is a symmetric positive semi-definite cross-product matrix; a column
    whose residual variance given the earlier ones is below ``alias_tol`` of
    its own is aliased, the same rule as the searches.
    """
    q = H.shape[0]
    L = np.zeros((q, q))
    x = np.empty(q)
    _solve(H, g, q, L, x, alias_tol)
    rank = 0
    for c in range(q):
        if L[c, c] != 0.0:
            rank += 1
    return x, rank


# What the work buffers hold when Newton's method returns.
_FRESH, _UNTOUCHED, _STALE = 1, 0, -1


@njit(cache=True)
def _newton(Xt, y, w, off, fam, shape, members, k, beta, g, H, f, tol, max_iter, alias_tol,
            work, small, H_new, L, min_steps):
    """Newton's method from ``beta`` where ``f, g, H`` are already known; updates them in place.

    Stops when the Newton decrement ``g' H^-1 g / 2`` (the gain in
    log-likelihood the next step promises) is below ``tol * (|f| + 1)``, and
    then takes that last step without evaluating it: near the optimum
    Newton's method squares the error, so the coefficients gain many digits
    for free. The objective returned is the quadratic model's prediction
    ``f + decrement`` at the new point (its error is of third order in the
    step), and ``g`` becomes the linear prediction ``g - H step`` there.

    At least ``min_steps`` steps are evaluated (1 when ``f, g, H`` are
    themselves predictions, so that every figure returned rests on an exact
    evaluation). A step is accepted when the objective does not fall by more
    than the tolerance, else halved.
    Returns ``(f, converged, buffers)``: ``buffers`` says whether the working
    weights and residuals in ``work`` are those of the last point evaluated
    and accepted (``_FRESH``), were not touched (``_UNTOUCHED``), or hold a
    rejected trial (``_STALE``).
    """
    q = k + 1
    trial, step, g_new = small[0], small[1], small[2]
    buffers = _UNTOUCHED
    it = 0
    while True:
        dec = _solve(H, g, q, L, step, alias_tol)
        slack = tol * (abs(f) + 1.0)
        if dec <= slack and it >= min_steps:
            for c in range(q):
                beta[c] += step[c]
                for e in range(q):
                    g[c] -= H[c, e] * step[e]
            return f + dec, True, buffers
        if it >= max_iter:
            return f, False, buffers
        it += 1
        t = 1.0
        accepted = False
        f_new = f
        for _ in range(_MAX_HALVINGS):
            for c in range(q):
                trial[c] = beta[c] + t * step[c]
            f_new = _pass(Xt, y, w, off, fam, shape, members, k, trial, g_new, H_new, 0, work)
            if f_new >= f - slack:
                accepted = True
                break
            t *= 0.5
        if not accepted:
            # No step gains: the objective is flat to rounding at beta (g, H still hold beta's).
            return f, dec <= 1e-6 * (abs(f) + 1.0), _STALE
        buffers = _FRESH
        for c in range(q):
            beta[c] = trial[c]
            g[c] = g_new[c]
            for e in range(q):
                H[c, e] = H_new[c, e]
        f = f_new


@njit(cache=True)
def fit_subset(Xt, y, w, off, fam, shape, members, beta, tol, max_iter, alias_tol):
    """Maximum-likelihood fit on the columns ``members`` from the start ``beta`` (updated in place).

    ``Xt`` is (p, n): one standardised predictor per row; ``fam`` the family
    code and ``shape`` its theta (negative binomial; 0 otherwise). Returns
    ``(objective, converged)``; see :func:`_rows` for the objective.
    """
    k = members.shape[0]
    q = k + 1
    n = y.shape[0]
    work, small, g, H, H_new, L = fit_workspace(q, n)
    f = _pass(Xt, y, w, off, fam, shape, members, k, beta, g, H, 0, work)
    f, converged, _ = _newton(Xt, y, w, off, fam, shape, members, k, beta, g, H, f, tol, max_iter,
                              alias_tol, work, small, H_new, L, 0)
    return f, converged


@njit(cache=True)
def _keep_vectors(Xt, y, w, off, fam, shape, members, k, beta, work, buffers, from_pass, V, R, d):
    """Store the working weights and residuals of the subset at depth k for its children."""
    if buffers == _FRESH or (buffers == _UNTOUCHED and from_pass):
        V[k, :] = work[1]
        R[k, :] = work[2]
    elif buffers == _UNTOUCHED:
        V[k, :] = V[d]
        R[k, :] = R[d]
    else:
        _rows(Xt, y, w, off, fam, shape, members, k, beta, work[0], V[k], R[k])


@njit(cache=True)
def _fit_child(Xt, y, w, off, fam, shape, members, d, betas, gs, Hs, fs, V, R, stored, tol,
               max_iter, alias_tol, work, small, H_new, L):
    """Fit the subset ``members[:d + 1]`` from its parent (depth d) with the new coefficient at 0.

    At that start the linear predictor is the parent's, so only the new
    column's gradient entry and Hessian row are needed. With ``stored``
    they come from the parent's working weights and residuals kept in
    ``V[d], R[d]`` (no pass over the rows); otherwise from one pass that
    recomputes them.
    """
    k = d + 1
    beta, g, H = betas[k], gs[k], Hs[k]
    for c in range(d + 1):
        beta[c] = betas[d, c]
        g[c] = gs[d, c]
        for e in range(d + 1):
            H[c, e] = Hs[d, c, e]
    beta[k] = 0.0
    if stored:
        col = Xt[members[d]]
        vx = work[3]
        v, r = V[d], R[d]
        g[k] = _dot(r, col)
        for i in range(vx.shape[0]):
            vx[i] = v[i] * col[i]
        h = _sum(vx)
        H[k, 0] = h
        H[0, k] = h
        for b in range(k):
            h = _dot(vx, Xt[members[b]])
            H[k, b + 1] = h
            H[b + 1, k] = h
        f = fs[d]
    else:
        f = _pass(Xt, y, w, off, fam, shape, members, k, beta, g, H, k - 1, work)
    f, converged, buffers = _newton(Xt, y, w, off, fam, shape, members, k, beta, g, H, f, tol,
                                    max_iter, alias_tol, work, small, H_new, L,
                                    1 if stored else 0)
    fs[k] = f
    if stored:
        _keep_vectors(Xt, y, w, off, fam, shape, members, k, beta, work, buffers, False, V, R, d)
    return converged


@njit(cache=True)
def fit_workspace(q, n):
    """Work arrays of one Newton fit of ``q - 1`` terms on ``n`` rows:
    (row work, small work, gradient, Hessian, spare Hessian, Cholesky factor)."""
    return (np.empty((4, n)), np.empty((3, q)), np.empty(q), np.empty((q, q)),
            np.empty((q, q)), np.zeros((q, q)))


@njit(cache=True)
def workspace(depth_max, q, n, stored):
    """Per-depth Newton state of a tree walk over subsets of up to ``q - 1`` terms:
    (betas, gradients, Hessians, objectives, stored vectors V and R, row work arrays,
    small work arrays, a spare Hessian, a Cholesky factor)."""
    kept_n = n if stored else 0
    return (np.zeros((depth_max, q)), np.zeros((depth_max, q)), np.zeros((depth_max, q, q)),
            np.zeros(depth_max), np.empty((depth_max, kept_n)), np.empty((depth_max, kept_n)),
            np.empty((4, n)), np.empty((3, q)), np.empty((q, q)), np.zeros((q, q)))


@njit(cache=True)
def glm_search(Xt, y, w, off, fam, shape, intercept_start, start, count, max_size, tol, max_iter,
               alias_tol, stored, slot_start, cap, best_score, best_members, best_coef):
    """Visit ``count`` subsets from ``start``; keep the largest log-likelihood per size.

    ``Xt`` is (p, n), one standardised predictor per row. The standardised
    coefficients of kept subsets (intercept first) go to ``best_coef``.
    ``stored`` keeps two vectors of length n per depth so that a child's
    first Newton step needs no pass over the rows (set it when
    ``2 (max_size + 1) n`` numbers fit in memory comfortably).
    Returns ``(subsets visited, fits that did not converge)``.
    """
    p, n = Xt.shape
    depth_max = max_size + 1
    q = max_size + 1
    betas, gs, Hs, fs, V, R, work, small, H_new, L = workspace(depth_max, q, n, stored)
    members = np.zeros(max(max_size, 1), dtype=np.int64)
    nxt = np.zeros(depth_max + 1, dtype=np.int64)
    filled = np.zeros(max_size + 1, dtype=np.int64)
    worst = np.zeros(max_size + 1, dtype=np.int64)
    floor = np.full(max_size + 1, -np.inf)
    not_converged = 0

    # The intercept-only model, then the parents of the first subset, as from the start.
    betas[0, 0] = intercept_start
    f = _pass(Xt, y, w, off, fam, shape, members, 0, betas[0], gs[0], Hs[0], 0, work)
    fs[0], converged, buffers = _newton(Xt, y, w, off, fam, shape, members, 0, betas[0], gs[0],
                                        Hs[0], f, tol, max_iter, alias_tol, work, small, H_new,
                                        L, 0)
    if stored:
        _keep_vectors(Xt, y, w, off, fam, shape, members, 0, betas[0], work, buffers, True, V, R, 0)
    d = start.shape[0]
    if d == 0 and not converged:
        not_converged += 1
    for i in range(d):
        members[i] = start[i]
        converged = _fit_child(Xt, y, w, off, fam, shape, members, i, betas, gs, Hs, fs, V, R,
                               stored, tol, max_iter, alias_tol, work, small, H_new, L)
        nxt[i] = start[i] + 1
        if i == d - 1 and not converged:
            not_converged += 1
    nxt[d] = start[d - 1] + 1 if d > 0 else 0
    _record(d, fs[d], members, betas[d], slot_start, cap, filled, worst, floor,
            best_score, best_members, best_coef)
    done = 1
    while done < count:
        d, j = _next_subset(d, nxt, members, max_size, p)
        if d < 0:
            break
        if not _fit_child(Xt, y, w, off, fam, shape, members, d, betas, gs, Hs, fs, V, R, stored,
                          tol, max_iter, alias_tol, work, small, H_new, L):
            not_converged += 1
        d += 1
        nxt[d] = j + 1
        if fs[d] >= floor[d]:
            _record(d, fs[d], members, betas[d], slot_start, cap, filled, worst, floor,
                    best_score, best_members, best_coef)
        done += 1
    return done, not_converged
