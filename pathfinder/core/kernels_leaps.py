"""Compiled branch and bound for least-squares best subsets of every size (numba, cached).

The method is leaps and bounds (Furnival & Wilson 1974, Technometrics
16:499-511): a subset's residual sum of squares (RSS) is a lower bound of the
RSS of every subset of it, so a whole branch of the tree of subsets can be
skipped once its largest member set cannot beat the models already kept.

The tree
--------
A node is a set S (the terms already in) with an ordered list F of free
terms that may still join. Its children are, for each position t of F,
``S + {F[t]}`` with free list ``F[t+1:]``; every subset is reached exactly
once. The branch of child t holds subsets of ``S + F[t:]``, so
``bound[t] = RSS(S + F[t:])`` bounds every model in it, of sizes ``|S| + 1``
to ``|S| + len(F) - t``.

At each node the free terms are put in order by eliminating them one at a
time from the node's cross-products, each time taking the term that lowers
the RSS least: the last term left is the most useful, and goes first. One
elimination pass (about ``len(F)^3 / 3`` operations) gives the order and every
``bound[t]``: the tail sets ``F[t:]`` are then the worst sets of their size
the greedy pass finds, so the large branches (small t) lack the most useful
terms and are the first to be cut, while the first branch searched holds the
best terms and fills the kept lists with good models early.

Each node holds the Schur complement of its members in the centred
cross-product matrix of the free terms and the response (the arithmetic of
the sweep operator, as in the exhaustive kernel); a child follows from its
parent by one elimination step, and its RSS by one division. A term whose
residual variance given the members is below ``alias_tol`` of its own is
aliased: it lowers nothing and is held at zero.

Cutting a branch
----------------
``limit[s]`` is the RSS of the ``keep``-th best model of size s known so far
(the kept slots of this search, or given thresholds ``seed_limit`` from real
models found earlier; infinite while fewer are known). A size s is beaten in
a branch with bound B when ``B > limit[s] * (1 + rel_margin) + abs_margin``:
every model of that size in the branch is worse, by more than rounding, than
``keep`` models already in hand. A branch keeps only the sizes up to the
largest one not beaten (the limits fall as the size grows, so the sizes
beaten are mostly the largest), and is cut when every size it holds is
beaten. The margin keeps
the kept set the same whichever order the branches are searched in and
however the tree is cut into tasks (rounding differs between the route to a
subset and the route to its bound).

Cutting into tasks
------------------
Nodes with more than ``split_free`` free terms form the top of the tree; it
is searched identically by every task, cutting only with the given
thresholds. The children that leave the top (their free lists are shorter)
are numbered in the order met; task ``part`` of ``n_parts`` searches those
whose number is ``part`` modulo ``n_parts``, cutting with its own kept models
too. Models of the top are kept and counted by task 0 only.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from .kernels_subsets import _record


@njit(cache=True, inline="always")
def _get(M, d, a, b):
    """Entry (a, b) of the symmetric matrix of depth d, stored in its upper triangle."""
    if a <= b:
        return M[d, a, b]
    return M[d, b, a]


@njit(cache=True)
def _order_free(M, d, r, free, diag0, alias_tol, W, act, order, bound, rss):
    """Order the r free terms of the node at depth d; fill ``bound[d, t] = RSS(S + F[t:])``.

    Greedy pass on a copy: each step eliminates the remaining term that
    lowers the RSS least (ties: the later position). Then M[d] and free[d]
    are rewritten in the new order.
    """
    yv = r
    for a in range(r + 1):
        for b in range(a, r + 1):
            W[a, b] = M[d, a, b]
    n_act = r
    for a in range(r):
        act[a] = a
    cur = rss
    for step in range(r):
        pick = -1
        low = np.inf
        for i in range(n_act):
            v = act[i]
            piv = W[v, v]
            if piv > alias_tol * diag0[free[d, v]]:
                red = W[v, yv] * W[v, yv] / piv
            else:
                red = 0.0
            if red <= low:
                low = red
                pick = i
        v = act[pick]
        piv = W[v, v]
        if piv > alias_tol * diag0[free[d, v]]:
            cur = cur - W[v, yv] * W[v, yv] / piv
            # eliminate v from the remaining terms and the response (upper triangle)
            for i in range(n_act):
                a = act[i]
                if a == v:
                    continue
                fa = (W[a, v] if a < v else W[v, a]) / piv
                for k in range(i, n_act):
                    b = act[k]
                    if b == v:
                        continue
                    W[a, b] -= fa * (W[b, v] if b < v else W[v, b])
                W[a, yv] -= fa * W[v, yv]
            W[yv, yv] -= W[v, yv] * W[v, yv] / piv
        if cur < 0.0:
            cur = 0.0
        t = r - 1 - step
        order[t] = v
        bound[d, t] = cur
        for i in range(pick, n_act - 1):
            act[i] = act[i + 1]
        n_act -= 1
    # rewrite the node in the new order (W is free again)
    for a in range(r):
        oa = order[a]
        for b in range(a, r):
            W[a, b] = _get(M, d, oa, order[b])
        W[a, yv] = M[d, oa, yv]
    for a in range(r):
        act[a] = free[d, order[a]]
    for a in range(r):
        free[d, a] = act[a]
        for b in range(a, r + 1):
            M[d, a, b] = W[a, b]


@njit(cache=True)
def _alive_up_to(bound, lo, hi, limit, seed_limit, use_own, rel_margin, abs_margin):
    """Largest size in lo..hi that a branch whose models all have RSS >= bound could still
    improve; ``lo - 1`` when it can improve none (the branch is cut)."""
    for s in range(hi, lo - 1, -1):
        lim = seed_limit[s]
        if use_own and limit[s] < lim:
            lim = limit[s]
        if not (bound > lim * (1.0 + rel_margin) + abs_margin):
            return s
    return lo - 1


@njit(cache=True)
def _note_cut(lo, hi, cut_sizes):
    for s in range(lo, hi + 1):
        cut_sizes[s] = True


@njit(cache=True)
def leaps_search(A, max_size, keep, alias_tol, rel_margin, abs_margin, seed_limit,
                 split_free, part, n_parts, budget, slot_start, cap, best_score, best_members,
                 visited, cut_sizes, open_sizes):
    """Branch and bound over every subset size 0..max_size; keep the smallest RSS per size.

    ``A`` is the (p + 1, p + 1) centred weighted cross-product matrix of the
    standardised predictors and (last) the response. Kept models go to the
    slots ``best_score`` (``-RSS``) and ``best_members`` (sorted members).
    ``visited[s]`` counts the models of size s whose RSS was computed,
    ``cut_sizes[s]`` says a cut branch held models of size s, and
    ``open_sizes[s]`` that the search stopped at ``budget`` models with
    branches of size s still unsearched (their sizes are then not proved).
    Returns the number of models visited by this task.
    """
    q = A.shape[0]
    p = q - 1
    depth_max = max_size + 1
    M = np.zeros((depth_max + 1, q, q))
    free = np.zeros((depth_max + 1, q), dtype=np.int64)
    bound = np.zeros((depth_max + 1, q))
    n_free = np.zeros(depth_max + 1, dtype=np.int64)
    nxt = np.zeros(depth_max + 1, dtype=np.int64)
    rss = np.zeros(depth_max + 1)
    path = np.zeros(depth_max + 1, dtype=np.int64)          # members in the order added
    top = np.zeros(depth_max + 1, dtype=np.bool_)           # node belongs to the shared top
    ceiling = np.zeros(depth_max + 1, dtype=np.int64)        # largest size worth searching below
    W = np.zeros((q, q))
    act = np.zeros(q, dtype=np.int64)
    order = np.zeros(q, dtype=np.int64)
    sorted_members = np.zeros(max(max_size, 1), dtype=np.int64)
    diag0 = np.empty(p)
    for j in range(p):
        diag0[j] = A[j, j]
    filled = np.zeros(max_size + 1, dtype=np.int64)
    worst = np.zeros(max_size + 1, dtype=np.int64)
    floor = np.full(max_size + 1, -np.inf)
    limit = np.full(max_size + 1, np.inf)
    no_coef = np.empty((0, 0))
    no_beta = np.empty(0)

    for a in range(q):
        for b in range(a, q):
            M[0, a, b] = A[a, b]
    for j in range(p):
        free[0, j] = j
    n_free[0] = p
    rss[0] = A[p, p]
    top[0] = p > split_free
    ceiling[0] = max_size
    done = 0
    if part == 0 or not top[0]:
        visited[0] += 1
        done += 1
        _record(0, -rss[0], sorted_members, no_beta, slot_start, cap, filled, worst, floor,
                best_score, best_members, no_coef)
        if filled[0] == cap[0]:
            limit[0] = -floor[0]
    if max_size > 0 and p > 0:
        _order_free(M, 0, p, free, diag0, alias_tol, W, act, order, bound, rss[0])
    else:
        n_free[0] = 0
    leaving = 0                                              # children that left the top so far
    d = 0
    stopped = False
    while d >= 0:
        r = n_free[d]
        if nxt[d] >= r or d >= ceiling[d]:
            d -= 1
            continue
        if done >= budget:
            stopped = True
            break
        t = nxt[d]
        nxt[d] = t + 1
        hi = d + r - t
        if hi > ceiling[d]:
            hi = ceiling[d]
        own = not top[d]
        alive = _alive_up_to(bound[d, t], d + 1, hi, limit, seed_limit, own, rel_margin,
                             abs_margin)
        if own or part == 0:
            _note_cut(alive + 1, hi, cut_sizes)
        if alive < d + 1:
            continue
        hi = alive
        child_free = r - 1 - t
        child_top = child_free > split_free
        if top[d] and not child_top:
            mine = leaving % n_parts == part
            leaving += 1
            if not mine:
                continue
        counts = (not child_top) or part == 0
        # the child's RSS: one division
        yv = r
        piv = M[d, t, t]
        j = free[d, t]
        aliased = not (piv > alias_tol * diag0[j])
        if aliased:
            child_rss = rss[d]
        else:
            child_rss = rss[d] - M[d, t, yv] * M[d, t, yv] / piv
            if child_rss < 0.0:
                child_rss = 0.0
        path[d] = j
        if counts:
            visited[d + 1] += 1
            done += 1
            if -child_rss >= floor[d + 1]:
                # sorted copy of the members for the canonical order of ties
                for i in range(d + 1):
                    v = path[i]
                    k = i
                    while k > 0 and sorted_members[k - 1] > v:
                        sorted_members[k] = sorted_members[k - 1]
                        k -= 1
                    sorted_members[k] = v
                _record(d + 1, -child_rss, sorted_members, no_beta, slot_start, cap, filled,
                        worst, floor, best_score, best_members, no_coef)
                if filled[d + 1] == cap[d + 1]:
                    limit[d + 1] = -floor[d + 1]
        if child_free == 0 or d + 1 >= max_size:
            continue
        own_child = not child_top
        alive = _alive_up_to(bound[d, t], d + 2, hi, limit, seed_limit, own_child, rel_margin,
                             abs_margin)
        if own_child or part == 0:
            _note_cut(alive + 1, hi, cut_sizes)
        if alive < d + 2:
            continue
        # descend: Schur complement of pivot t on the later free terms and the response
        c = d + 1
        for a in range(t + 1, r + 1):
            a2 = a - t - 1
            if aliased:
                for b in range(a, r + 1):
                    M[c, a2, b - t - 1] = M[d, a, b]
            else:
                fa = M[d, t, a] / piv
                for b in range(a, r + 1):
                    M[c, a2, b - t - 1] = M[d, a, b] - fa * M[d, t, b]
        for a in range(t + 1, r):
            free[c, a - t - 1] = free[d, a]
        n_free[c] = child_free
        rss[c] = child_rss
        nxt[c] = 0
        top[c] = child_top
        ceiling[c] = alive
        _order_free(M, c, child_free, free, diag0, alias_tol, W, act, order, bound, child_rss)
        d = c
    if stopped:
        # every branch still waiting on the stack leaves its sizes unproved
        for e in range(d, -1, -1):
            r = n_free[e]
            if e >= ceiling[e]:
                continue
            for t in range(nxt[e], r):
                hi = e + r - t
                if hi > ceiling[e]:
                    hi = ceiling[e]
                alive = _alive_up_to(bound[e, t], e + 1, hi, limit, seed_limit, not top[e],
                                     rel_margin, abs_margin)
                for s in range(e + 1, alive + 1):
                    open_sizes[s] = True
    return done
