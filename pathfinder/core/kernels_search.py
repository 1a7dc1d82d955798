"""Compiled forward-stepwise path and splicing search for the best subset of one size (numba).

Both work on the standardised predictors ``Xt`` (p, n) and reuse the Newton
fits of the exhaustive kernel (:mod:`pathfinder.core.kernels_subsets`): a
model with one more term is fitted from its parent's coefficients, the new
one at zero, with the parent's working weights kept so that the first Newton
step needs no pass over the rows. ``fam`` and ``shape`` (the negative
binomial's theta, held fixed; ignored by the other families) select the row
arithmetic as in ``kernels_subsets._rows``.

* :func:`forward_path` adds, at every size, the term whose refit gains the
  most log-likelihood (ties: the term listed first), every candidate fitted
  in full, up to ``max_size`` terms: forward stepwise at every size, not only
  where a criterion stops it (Hastie, Tibshirani & Tibshirani 2020,
  Statistical Science 35:579-592, compare methods size by size this way).
* :func:`splice` improves a model of fixed size by splicing (Zhu, Wen, Zhang,
  Wang & Wang 2020, PNAS 117:33117-33123): at the current fit each term in
  the model has a backward sacrifice ``b_i^2 h_i / 2`` (the log-likelihood
  lost, to second order, if it left) and each term out a forward sacrifice
  ``g_j^2 / (2 h_j)`` (gained, to second order, if it came in; ``g`` the
  score, ``h`` the diagonal of the information). For C = 1 .. ``max_swap``
  the C weakest terms in are exchanged for the C strongest out and the new
  set is refitted; the best exchange is kept when it gains more than ``tol``,
  and the search stops when none does. Only gains are accepted, so the model
  returned is never worse than the start. Every set fitted is offered to the
  kept slots of its size (duplicates are skipped).
"""

from __future__ import annotations

import numpy as np
from numba import njit

from .kernels_subsets import (_find_worst, _fit_child, _keep_vectors, _newton, _pass, _rows,
                              take_slot, fit_workspace, workspace)


@njit(cache=True)
def _offer(size, score, members, beta, slot_start, cap, filled, worst, best_score, best_members,
           best_coef):
    """Keep a subset of ``size`` sorted ``members`` if it is among the best, unless already kept."""
    if score != score:
        score = -np.inf
    c = cap[size]
    if c == 0:
        return
    base = slot_start[size]
    for s in range(base, base + filled[size]):
        same = True
        for t in range(size):
            if best_members[s, t] != members[t]:
                same = False
                break
        if same:
            if score > best_score[s]:
                best_score[s] = score
                for t in range(min(best_coef.shape[1], size + 1)):
                    best_coef[s, t] = beta[t]
                if filled[size] == c:
                    worst[size] = _find_worst(size, base, c, best_score, best_members)
            return
    take_slot(size, score, members, beta, base, c, filled, worst, best_score, best_members,
              best_coef)


@njit(cache=True)
def _sorted_copy(members, k, out):
    for i in range(k):
        v = members[i]
        t = i
        while t > 0 and out[t - 1] > v:
            out[t] = out[t - 1]
            t -= 1
        out[t] = v


@njit(cache=True)
def _rising(objective, constant, penalty, last, window):
    """Has every criterion stayed above its lowest value for the ``window`` sizes up to ``last``?

    ``penalty[c, k]`` is criterion c's charge for a model of k terms, so that
    criterion c of size k is ``-2 (objective[k] + constant) + penalty[c, k]``.
    """
    if window <= 0 or last < window:
        return False
    for c in range(penalty.shape[0]):
        low_at = 0
        low = np.inf
        for k in range(last + 1):
            v = -2.0 * (objective[k] + constant) + penalty[c, k]
            if v < low:
                low = v
                low_at = k
        if low_at > last - window:
            return False
    return True


@njit(cache=True)
def forward_path(Xt, y, w, off, fam, shape, intercept_start, max_size, tol, max_iter, alias_tol,
                 stored, constant, penalty, window, added, objective, coef):
    """Forward stepwise at every size up to ``max_size``.

    With ``window > 0`` the path stops early once every criterion of
    ``penalty`` (see :func:`_rising`) has stayed above its lowest value for
    ``window`` sizes running. Fills ``added[k]`` (the term added to reach size k + 1), ``objective[k]``
    (the log-likelihood of the model of size k, less the constant free of the
    coefficients; see ``kernels_subsets._rows``) and ``coef[k, :k + 1]`` (its
    standardised coefficients, intercept first, in the order added).
    Returns ``(largest size reached, fits, fits that did not converge)``.
    """
    p, n = Xt.shape
    depth_max = max_size + 2
    q = max_size + 2
    betas, gs, Hs, fs, V, R, work, small, H_new, L = workspace(depth_max, q, n, stored)
    members = np.zeros(q, dtype=np.int64)
    inside = np.zeros(p, dtype=np.bool_)
    fits = 1
    bad = 0
    betas[0, 0] = intercept_start
    f = _pass(Xt, y, w, off, fam, shape, members, 0, betas[0], gs[0], Hs[0], 0, work)
    fs[0], ok, buffers = _newton(Xt, y, w, off, fam, shape, members, 0, betas[0], gs[0], Hs[0], f,
                                 tol, max_iter, alias_tol, work, small, H_new, L, 0)
    if not ok:
        bad += 1
    if stored:
        _keep_vectors(Xt, y, w, off, fam, shape, members, 0, betas[0], work, buffers, True, V, R, 0)
    objective[0] = fs[0]
    coef[0, 0] = betas[0, 0]
    for d in range(max_size):
        best_j = -1
        best_f = -np.inf
        for j in range(p):
            if inside[j]:
                continue
            members[d] = j
            _fit_child(Xt, y, w, off, fam, shape, members, d, betas, gs, Hs, fs, V, R, stored, tol,
                       max_iter, alias_tol, work, small, H_new, L)
            fits += 1
            if fs[d + 1] > best_f or best_j < 0:
                best_f = fs[d + 1]
                best_j = j
        members[d] = best_j
        inside[best_j] = True
        if not _fit_child(Xt, y, w, off, fam, shape, members, d, betas, gs, Hs, fs, V, R, stored,
                          tol, max_iter, alias_tol, work, small, H_new, L):
            bad += 1
        added[d] = best_j
        objective[d + 1] = fs[d + 1]
        for c in range(d + 2):
            coef[d + 1, c] = betas[d + 1, c]
        if _rising(objective, constant, penalty, d + 1, window):
            return d + 1, fits, bad
    return max_size, fits, bad


@njit(cache=True)
def _fit_set(Xt, y, w, off, fam, shape, members, k, beta, tol, max_iter, alias_tol, work, small, g,
             H, H_new, L):
    """Fit ``members[:k]`` from ``beta`` (updated in place); returns (objective, converged)."""
    f = _pass(Xt, y, w, off, fam, shape, members, k, beta, g, H, 0, work)
    f, ok, _ = _newton(Xt, y, w, off, fam, shape, members, k, beta, g, H, f, tol, max_iter,
                       alias_tol, work, small, H_new, L, 0)
    return f, ok


@njit(cache=True)
def _sacrifices(Xt, y, w, off, fam, shape, cur, k, beta, inside, sacrifice, eta, v, r):
    """Backward sacrifice of each term in (``b^2 h / 2``), forward of each term out (``g^2 / 2h``)."""
    p, n = Xt.shape
    _rows(Xt, y, w, off, fam, shape, cur, k, beta, eta, v, r)
    for j in range(p):
        col = Xt[j]
        gj = 0.0
        hj = 0.0
        for i in range(n):
            gj += r[i] * col[i]
            hj += v[i] * col[i] * col[i]
        sacrifice[j] = 0.0
        if inside[j]:
            for a in range(k):
                if cur[a] == j:
                    sacrifice[j] = 0.5 * beta[a + 1] * beta[a + 1] * hj
        elif hj > 0.0:
            sacrifice[j] = 0.5 * gj * gj / hj


@njit(cache=True)
def neighbour_start(Xt, y, w, off, fam, shape, members, beta, grow):
    """A start for the next size from a fitted model: add its strongest missing term
    (``grow``) or drop its weakest term, by the sacrifices of :func:`splice`.

    Returns ``(members, beta)`` of the start (members sorted, beta aligned,
    the new term at zero).
    """
    p, n = Xt.shape
    k = members.shape[0]
    inside = np.zeros(p, dtype=np.bool_)
    for a in range(k):
        inside[members[a]] = True
    sacrifice = np.empty(p)
    work = np.empty((3, n))
    _sacrifices(Xt, y, w, off, fam, shape, members, k, beta, inside, sacrifice, work[0], work[1],
                work[2])
    pick = -1
    for j in range(p):
        if inside[j] == grow:
            continue
        if pick < 0 or (grow and sacrifice[j] > sacrifice[pick]) or \
                (not grow and sacrifice[j] < sacrifice[pick]):
            pick = j
    size = k + 1 if grow else k - 1
    out = np.empty(size, dtype=np.int64)
    out_beta = np.zeros(size + 1)
    out_beta[0] = beta[0]
    m = 0
    for a in range(k):
        if (not grow) and members[a] == pick:
            continue
        out[m] = members[a]
        out_beta[m + 1] = beta[a + 1]
        m += 1
    if grow:
        out[m] = pick
    return out, out_beta


@njit(cache=True)
def splice(Xt, y, w, off, fam, shape, start, start_beta, max_swap, gain_tol, max_rounds, tol,
           max_iter, alias_tol, slot_start, cap, filled, worst, best_score, best_members,
           best_coef):
    """Splicing search for the best subset of size ``len(start)``, from ``start``.

    ``start_beta`` holds a starting intercept and coefficients (in the order
    of ``start``; zeros are fine). Returns ``(members, beta, objective, fits,
    fits that did not converge)`` of the best set found, members sorted.
    """
    p, n = Xt.shape
    k = start.shape[0]
    q = k + 1
    work, small, g, H, H_new, L = fit_workspace(q, n)
    cur = np.empty(k, dtype=np.int64)
    _sorted_copy(start, k, cur)
    beta = np.zeros(q)
    beta[0] = start_beta[0]
    for a in range(k):              # coefficients follow their terms into sorted order
        for b in range(k):
            if start[b] == cur[a]:
                beta[a + 1] = start_beta[b + 1]
    f, ok = _fit_set(Xt, y, w, off, fam, shape, cur, k, beta, tol, max_iter, alias_tol, work, small,
                     g, H, H_new, L)
    fits = 1
    bad = 0 if ok else 1
    _offer(k, f, cur, beta, slot_start, cap, filled, worst, best_score, best_members, best_coef)
    if k == 0 or k == p:
        return cur, beta, f, fits, bad
    inside = np.zeros(p, dtype=np.bool_)
    sacrifice = np.empty(p)
    trial = np.empty(k, dtype=np.int64)
    trial_sorted = np.empty(k, dtype=np.int64)
    trial_beta = np.empty(q)
    best_set = np.empty(k, dtype=np.int64)
    best_beta = np.empty(q)
    out_order = np.empty(p - k, dtype=np.int64)
    in_order = np.empty(k, dtype=np.int64)
    eta, v, r = work[0], work[1], work[2]
    for _ in range(max_rounds):
        for j in range(p):
            inside[j] = False
        for a in range(k):
            inside[cur[a]] = True
        _sacrifices(Xt, y, w, off, fam, shape, cur, k, beta, inside, sacrifice, eta, v, r)
        # terms in, weakest first; terms out, strongest first (ties: the term listed first)
        for a in range(k):
            in_order[a] = cur[a]
        for a in range(1, k):
            x = in_order[a]
            t = a
            while t > 0 and (sacrifice[in_order[t - 1]] > sacrifice[x] or
                             (sacrifice[in_order[t - 1]] == sacrifice[x] and in_order[t - 1] > x)):
                in_order[t] = in_order[t - 1]
                t -= 1
            in_order[t] = x
        m = 0
        for j in range(p):
            if not inside[j]:
                out_order[m] = j
                m += 1
        for a in range(1, m):
            x = out_order[a]
            t = a
            while t > 0 and (sacrifice[out_order[t - 1]] < sacrifice[x] or
                             (sacrifice[out_order[t - 1]] == sacrifice[x] and out_order[t - 1] > x)):
                out_order[t] = out_order[t - 1]
                t -= 1
            out_order[t] = x
        best_f = f
        found = False
        top = min(max_swap, k, p - k)
        for C in range(1, top + 1):
            # the trial set: cur without in_order[:C], plus out_order[:C]
            m = 0
            for a in range(k):
                leave = False
                for c in range(C):
                    if cur[a] == in_order[c]:
                        leave = True
                if not leave:
                    trial[m] = cur[a]
                    m += 1
            for c in range(C):
                trial[m] = out_order[c]
                m += 1
            _sorted_copy(trial, k, trial_sorted)
            trial_beta[0] = beta[0]
            for a in range(k):
                trial_beta[a + 1] = 0.0
                for b in range(k):
                    if cur[b] == trial_sorted[a]:
                        trial_beta[a + 1] = beta[b + 1]
            ft, ok = _fit_set(Xt, y, w, off, fam, shape, trial_sorted, k, trial_beta, tol, max_iter,
                              alias_tol, work, small, g, H, H_new, L)
            fits += 1
            if not ok:
                bad += 1
            _offer(k, ft, trial_sorted, trial_beta, slot_start, cap, filled, worst, best_score,
                   best_members, best_coef)
            if ft > best_f + gain_tol * (abs(best_f) + 1.0):
                best_f = ft
                found = True
                for a in range(k):
                    best_set[a] = trial_sorted[a]
                for a in range(q):
                    best_beta[a] = trial_beta[a]
        if not found:
            break
        f = best_f
        for a in range(k):
            cur[a] = best_set[a]
        for a in range(q):
            beta[a] = best_beta[a]
    return cur, beta, f, fits, bad
