"""The solvers behind a path: each holds its state and solves at one penalty.

A solver owns the current coefficients (on the standardised scale) and knows
how to (a) minimise the penalised objective over a working set of terms, (b)
return the gradient of the log-likelihood part for every term (for strong
rules and the KKT check) and (c) report the deviance. The path driver in
:mod:`pathfinder.core.path` decides which terms are in the working set.

* :class:`GramSolver`  Gaussian response with n > p: coordinate descent on the
  weighted Gram matrix, computed once in row blocks without copying X.
* :class:`NaiveSolver` any family: IRLS (Newton) outer loop with
  coordinate descent on one standardised copy of X inside, step halving when
  the penalised objective does not decrease.
* :class:`NewtonGramSolver` binomial, Poisson and negative binomial on long tables (n >> p):
  Newton steps whose quadratic model uses the weighted Gram matrix of the
  working set, estimated from an evenly spread sample of rows and kept while
  it still converges fast; each step then costs one pass over the working
  set's columns of X.
"""

from __future__ import annotations

import numpy as np

from concurrent.futures import ThreadPoolExecutor

from .arrays import empty_aligned
from .families import Family
from .kernels import (PASS_ROWS, cd_gram, cd_naive, centre_column, column_spread, divide_column,
                      glm_deviance, glm_pass, weighted_sample)

BLOCK_BYTES = 32 * 2**20  # X is read in row blocks of about this size


def block_rows(p):
    """Rows per block when X is read in pieces."""
    return max(1024, BLOCK_BYTES // (8 * max(p, 1)))


def row_blocks(X, rows=None):
    """Yield ``(positions, block)``: X's rows (all, or those in ``rows``) as float64 blocks.

    ``positions`` index the rows of the fit (0..n-1). Only one block of
    ``rows`` is ever copied at a time, so a fit on a subsample (a fold, a half
    sample) never copies the whole of X. A block is a fresh copy, which the
    caller may change in place.
    """
    n = X.shape[0] if rows is None else len(rows)
    step = block_rows(X.shape[1])
    for start in range(0, n, step):
        where = slice(start, min(start + step, n))
        if rows is None:
            yield where, np.array(X[where], dtype=np.float64)
        else:
            yield where, gather_rows(X, rows[where])


def gather_rows(X, rows):
    """``X[rows]`` as a new float64 array, gathered column by column when X is
    Fortran-ordered (each column is contiguous, so this is several times faster
    than numpy's row-wise fancy indexing)."""
    if X.flags.f_contiguous:
        out = empty_aligned((len(rows), X.shape[1]), "F")
        for j in range(X.shape[1]):
            out[:, j] = np.take(X[:, j], rows)
        return out
    return np.array(X[rows], dtype=np.float64)


def weighted_mean(X, w, rows=None):
    """Weighted column means of X's rows (``w`` sums to the number of rows).

    For a subset of rows the weights are spread over all rows of X (zero
    elsewhere), so the means come from one matrix-vector product, no copy.
    """
    if rows is None:
        return (w @ X) / X.shape[0]
    spread = np.bincount(rows, weights=w, minlength=X.shape[0])  # repeated rows add up
    return (spread @ X) / len(rows)


def scale_from_variance(var, mean, standardize):
    """Population SDs as scales; columns with no spread get scale 1 and a flag.

    A flagged column's centred values are exactly 0, so it never enters a model.
    """
    sd = np.sqrt(np.maximum(var, 0.0))
    constant = sd <= 1e-10 * np.maximum(np.abs(mean), 1.0)
    scale = np.where(constant | (not standardize), 1.0, sd)
    return scale, constant


def centred_gram(X, w, mean, z, rows=None, XtX=None):
    """``(X - mean)' W (X - mean) / n`` and ``(X - mean)' W z / n``.

    With uniform weights and all rows this is one symmetric rank-k update of
    X itself (no copy). With uniform weights, distinct ``rows`` and the raw
    ``XtX = X'X`` of all rows at hand (cross-validation computes it once), the
    rows left out are subtracted instead: a fold costs a tenth of X'X, not
    nine tenths. Otherwise X is read in row blocks, holding at most one block
    of centred, weighted rows besides X.
    """
    p = X.shape[1]
    n = X.shape[0] if rows is None else len(rows)
    uniform = bool(np.all(w == w[0]))
    raw = None
    if uniform and X.dtype == np.float64:
        if rows is None:
            raw = X.T @ X
        elif XtX is not None and np.bincount(rows, minlength=X.shape[0]).max() <= 1:
            left_out = np.setdiff1d(np.arange(X.shape[0]), rows, assume_unique=True)
            rest = gather_rows(X, left_out)
            raw = XtX - rest.T @ rest
    if raw is not None:
        # Raw cross-products, then the centring correction: no copy of X.
        # The correction loses about log10(mean^2 / variance) digits, so this
        # route is taken only while that loss stays below 8 of the 16 digits.
        var = np.diag(raw) / n - mean * mean
        if np.all(mean * mean <= 1e8 * np.maximum(var, 1e-300)):
            G = raw - n * np.outer(mean, mean)
            if rows is None:
                c = z @ X - z.sum() * mean  # z is centred, so z.sum() is ~0
            else:
                spread = np.zeros(X.shape[0])
                spread[rows] = z
                c = spread @ X - z.sum() * mean
            return G * (w[0] / n), c * (w[0] / n)
    G = np.zeros((p, p))
    c = np.zeros(p)
    for where, block in row_blocks(X, rows):
        block -= mean
        c += (w[where] * z[where]) @ block
        if not uniform:
            block *= np.sqrt(w[where])[:, None]
        G += block.T @ block
    if uniform:
        G *= w[0]
    return G / n, c / n


def standardised_copy(X, mean, w, standardize, rows=None, threads=1):
    """One Fortran-ordered float64 copy of X's rows, centred and scaled in place.

    Each column is read, centred and its variance summed in one compiled
    pass, then scaled while it is still in cache; ``threads`` columns are
    done at a time. Returns the copy, the scales, the flags of columns with
    no spread and the mean squares of the copy's columns (unweighted).
    """
    p = X.shape[1]
    n = X.shape[0] if rows is None else len(rows)
    Xs = empty_aligned((n, p), "F")
    scale, constant, squares = np.ones(p), np.zeros(p, dtype=bool), np.empty(p)
    take = np.arange(0) if rows is None else np.asarray(rows, dtype=np.int64)

    def one(j):
        var, squares[j] = centre_column(X, take, j, mean[j], w, Xs[:, j])
        sd, flat = scale_from_variance(np.array([var]), mean[j:j + 1], standardize)
        scale[j], constant[j] = sd[0], flat[0]
        if scale[j] != 1.0:
            divide_column(Xs[:, j], scale[j])

    _each_column(one, p, threads if n * p >= 2**20 else 1)
    return Xs, scale, constant, squares / scale**2


def column_scales(X, mean, w, standardize, threads=1, rows=None):
    """As :func:`standardised_copy` without the copy: X (or its ``rows``) read in place."""
    p = X.shape[1]
    var, squares = np.empty(p), np.empty(p)
    take = np.arange(0) if rows is None else np.asarray(rows, dtype=np.int64)

    def one(j):
        var[j], squares[j] = column_spread(X, take, j, mean[j], w)

    _each_column(one, p, threads)
    scale, constant = scale_from_variance(var, mean, standardize)
    return scale, constant, squares / scale**2


def _each_column(work, p, threads):
    if threads > 1:
        with ThreadPoolExecutor(threads) as pool:
            list(pool.map(work, range(p)))
    else:
        for j in range(p):
            work(j)


def penalty_value(beta, l1, l2):
    return float(np.sum(l1 * np.abs(beta)) + 0.5 * np.sum(l2 * beta * beta))


class Solver:
    """What the path loop asks of every solver (see :mod:`pathfinder.core.path`).

    A solver holds the standardised coefficients ``beta`` and the intercept of
    the current fit; ``tol`` (and ``loose_tol``, the first inner tolerance of
    a Newton loop) are set by the path. The loop calls :meth:`solve` on a
    working set, then :meth:`refresh`, then :meth:`gradient` for the KKT
    check, and reads :meth:`deviance` once a penalty is done.
    """

    beta: np.ndarray
    tol: float = 0.0
    loose_tol: float = 0.0

    @property
    def intercept(self) -> float:
        raise NotImplementedError

    def solve(self, l1, l2, ws) -> tuple[int, bool]:
        """Minimise the penalised objective over the terms ``ws``: (sweeps, converged)."""
        raise NotImplementedError

    def refresh(self) -> None:
        """Drop accumulated round-off after a solve (nothing to do for most solvers)."""

    def gradient(self, limit=None) -> np.ndarray:
        """Gradient of the log-likelihood part for every term (exact where it may exceed ``limit``)."""
        raise NotImplementedError

    def deviance(self) -> float:
        raise NotImplementedError

    def null_deviance(self) -> float:
        raise NotImplementedError


class GramSolver(Solver):
    """Gaussian, n > p: covariance updates on ``G = Xs'WXs / n``."""

    def __init__(self, G, c, yy, ybar, n, tol, max_sweeps):
        self.n = n
        self.ybar = ybar
        self.G = np.ascontiguousarray(G)
        self.c = c
        self.yy = yy
        self.beta = np.zeros(G.shape[0])
        self.grad = self.c.copy()
        self.tol = tol
        self.max_sweeps = max_sweeps

    @classmethod
    def from_data(cls, X, y, w, offset, mean, standardize, tol, max_sweeps, rows=None, XtX=None):
        """Build from the data; returns the solver, the scales and the no-spread flags."""
        n = y.shape[0]
        z = y - offset
        ybar = float(w @ z / n)
        zc = z - ybar
        G, c = centred_gram(X, w, mean, zc, rows, XtX)
        scale, constant = scale_from_variance(np.diag(G).copy(), mean, standardize)
        G /= scale[:, None] * scale[None, :]
        c /= scale
        yy = float(w @ (zc * zc) / n)
        return cls(G, c, yy, ybar, n, tol, max_sweeps), scale, constant

    @property
    def intercept(self):
        return self.ybar

    def solve(self, l1, l2, ws):
        sweeps = cd_gram(self.G, self.grad, self.beta, ws, l1, l2, self.tol, self.max_sweeps)
        return sweeps, sweeps < self.max_sweeps

    def gradient(self, limit=None):
        return self.grad

    def deviance(self):
        b = self.beta
        return max(self.n * (self.yy - b @ self.c - b @ self.grad), 0.0)

    def null_deviance(self):
        return self.n * self.yy


class NaiveSolver(Solver):
    """Any family: IRLS with naive coordinate descent on a standardised copy."""

    def __init__(self, Xs, y, w, offset, family: Family, tol, max_sweeps, max_newton=100):
        self.Xs = Xs
        self.y = y
        self.w = w
        self.offset = offset
        self.family = family
        self.n, p = Xs.shape
        self.beta = np.zeros(p)
        self.b0 = family.null_intercept(y, w, offset)
        self._set_eta(self.b0 + offset)
        self._null_deviance = self.dev
        self.xv = np.zeros(p)
        self.tol = tol
        self.max_sweeps = max_sweeps
        self.max_newton = max_newton
        self.step_halvings = 0
        self.loose_tol = 0.0  # first inner tolerance of a Newton loop (set by the path)

    @property
    def intercept(self):
        return self.b0

    def _set_eta(self, eta):
        """Move to ``eta``: deviance, working weights, residuals and means there."""
        self.eta = eta
        self.dev, self.W, self.resid, self.mu = self.family.evaluate(self.y, eta, self.w)

    def solve(self, l1, l2, ws):
        """IRLS: each Newton step solves a penalised weighted least-squares problem.

        The inner tolerance starts loose and tightens with the Newton steps
        (a thousandth of the last step's change, never below ``tol``), so early
        steps, whose quadratic approximation is about to be replaced anyway,
        cost few sweeps. Convergence needs a step whose change is below ``tol``
        with the inner loop held to ``tol`` itself. A step that raises the
        penalised objective is halved back towards the previous point.
        """
        gaussian = self.family.least_squares
        total_sweeps = 0
        objective = self.dev / (2 * self.n) + penalty_value(self.beta, l1, l2)
        inner_tol = self.tol if gaussian else max(self.tol, self.loose_tol)
        for _ in range(self.max_newton):
            W, resid = self.W, self.resid
            r = resid.copy()
            beta_old, b0_old, eta_old = self.beta.copy(), self.b0, self.eta
            self.b0, sweeps = cd_naive(self.Xs, W, r, self.beta, self.b0, ws, self.xv,
                                       l1, l2, True, inner_tol, self.max_sweeps, True)
            total_sweeps += sweeps
            self._set_eta(eta_old + resid - r)  # z - r, where z = eta_old + resid
            if sweeps >= self.max_sweeps:
                return total_sweeps, False
            new_objective = self.dev / (2 * self.n) + penalty_value(self.beta, l1, l2)
            halvings = 0
            while new_objective > objective * (1 + 1e-12) + 1e-15 and halvings < 30:
                self.beta = 0.5 * (self.beta + beta_old)
                self.b0 = 0.5 * (self.b0 + b0_old)
                self._set_eta(0.5 * (self.eta + eta_old))
                new_objective = self.dev / (2 * self.n) + penalty_value(self.beta, l1, l2)
                halvings += 1
            self.step_halvings += halvings
            db = self.beta - beta_old
            change = max(float(np.max(self.xv[ws] * db[ws] ** 2, initial=0.0)),
                         float(W.sum() / self.n * (self.b0 - b0_old) ** 2))
            objective = new_objective
            if gaussian or (change < self.tol and inner_tol <= self.tol):
                return total_sweeps, True
            inner_tol = max(self.tol, min(inner_tol, 1e-3 * change))
        return total_sweeps, False

    def refresh(self):
        """Recompute the linear predictor from the coefficients (drops round-off)."""
        self._set_eta(self.b0 + self.Xs @ self.beta + self.offset)

    def gradient(self, limit=None):
        return self.Xs.T @ self.family.score(self.y, self.mu, self.w) / self.n

    def deviance(self):
        return self.dev

    def null_deviance(self):
        return self._null_deviance


HESSIAN_ROWS = 100_000    # the Newton solver's Gram matrix comes from about this many rows at most
SAMPLE_PIECE = 1024       # ... read in pieces of this many consecutive rows
KEEP_BYTES = 16 * 2**20   # the sample's columns are kept once read if this small, or a quarter of the rows
CHUNK_ROWS = 256 * PASS_ROWS  # a pass sums its gradient in pieces of this many rows, in order
FRESH_TERMS = 16          # on tables longer than the sample, a working set this small gets
                          # its Gram matrix afresh for each penalty (cheap, and fewer passes)
SLOW_RATE = 0.05          # refresh the Gram matrix when a Newton step shrinks the change less than this


def blas_threads() -> int:
    """Threads the linear-algebra library may use here (1 inside our workers)."""
    from threadpoolctl import threadpool_info

    counts = [m.get("num_threads") or 1 for m in threadpool_info() if m.get("user_api") == "blas"]
    return max(1, min(counts)) if counts else 1


class NewtonGramSolver(Solver):
    """Binomial, Poisson and negative binomial, n >> p: Newton steps on the working set's
    weighted Gram matrix.

    The penalised Newton step minimises the quadratic model

        -g' d + d' H d / 2 + penalty(beta + d)

    over the working set and the intercept, where ``g`` is the exact gradient
    of the log-likelihood (one pass over the rows) and ``H = X'WX / n`` the
    weighted Gram matrix (W the IRLS weights, Fisher's for the negative
    binomial's non-canonical log link). Coordinate descent on ``H`` (:func:`cd_gram`) costs
    nothing in n. ``H`` is only a metric for the step: any positive definite
    ``H`` has the same fixed point, the penalised maximum-likelihood fit. So it
    is estimated from an evenly spread sample of at most ``HESSIAN_ROWS`` rows,
    corrected after each step by the change of the exact gradient along it (a
    BFGS update), and kept across steps and penalties until a step shrinks the
    change by less than ``SLOW_RATE``; then it is rebuilt at the current
    weights. Rows for new terms are added at the weights it was built with.

    Each step is one pass over the rows (:func:`glm_pass`): the linear
    predictor from scratch (so no round-off builds up), the means and the
    gradient of the working set, in pieces of ``CHUNK_ROWS`` rows that are
    summed in a fixed order, so results do not depend on the number of
    threads. The deviance (a log per row) is computed only when asked for.
    Should a step make the change grow, the solver goes back, rebuilds ``H``
    and continues with steps that are halved until the penalised objective
    falls, as :class:`NaiveSolver` does.

    Iterations stop when a step's weighted squared change is below ``tol``,
    or when the last two steps shrink fast enough that the next one would be
    below ``tol / 100``.
    """

    def __init__(self, X, center, scale, squares, y, w, offset, family: Family, tol, max_sweeps,
                 max_newton=100, threads=1, rows=None):
        self.X = X                      # read as (X - center) / scale, never copied
        self.rows = np.zeros(0, dtype=np.int64) if rows is None else rows   # the fit's rows of X
        self.center = np.asarray(center, dtype=np.float64)
        self.inv_scale = 1.0 / np.asarray(scale, dtype=np.float64)
        self.col_norm = np.sqrt(squares)     # root mean square of each column as read
        self.y, self.w = y, w
        none = np.zeros(0)       # the passes skip reading a zero offset and unit weights
        self._offset = offset if np.any(offset) else none
        self._w = none if np.all(w == 1.0) else w
        self.n, self.p = y.shape[0], X.shape[1]
        self.family = family
        self.code = family.code
        self.bound = family.row_bound
        self.shape = family.row_shape
        self.tol = tol
        self.max_sweeps = max_sweeps
        self.max_newton = max_newton
        self.threads = threads
        self.loose_tol = 0.0
        self.step_halvings = self.hessian_builds = self.secant_updates = self.passes = 0
        self.beta = np.zeros(self.p)
        self.b0 = family.null_intercept(y, w, offset)
        self.eta = np.empty(self.n)
        self.grad = np.zeros(self.p + 1)           # last slot: the intercept
        self.grad_known = np.zeros(self.p + 1, dtype=bool)
        self.dev = None                            # deviance at the current point, once computed
        self.anchor = np.empty(self.n)             # scores where every gradient was last computed
        self.anchor_grad = None                    # ... and those gradients
        self.drift = np.inf                        # RMS distance of the scores from the anchor
        self.sample = sample_rows(self.n, HESSIAN_ROWS)
        self.H = np.zeros((self.p + 1, self.p + 1))
        self.in_H = np.zeros(self.p + 1, dtype=bool)
        self.H_weights = None
        m = self.sample.shape[0]
        keep = 4 * m <= self.n or m * (self.p + 1) * 8 <= KEEP_BYTES
        self.kept = empty_aligned((m, self.p + 1), "F") if keep else None
        self.slot = np.full(self.p + 1, -1)      # column of ``kept`` holding each term
        self.n_kept = 0
        self._pass(np.arange(self.p, dtype=np.int64), with_deviance=True)
        self._null_deviance = self.dev

    @property
    def intercept(self):
        return self.b0

    # ---- passes over the rows ---------------------------------------------
    def _chunks(self, work):
        """Run ``work(c, lo, hi)`` over the pieces of rows, on ``threads`` threads."""
        starts = range(0, self.n, CHUNK_ROWS)
        jobs = [(c, lo, min(lo + CHUNK_ROWS, self.n)) for c, lo in enumerate(starts)]
        if self.threads > 1 and len(jobs) > 1:
            with ThreadPoolExecutor(self.threads) as pool:
                list(pool.map(lambda job: work(*job), jobs))
        else:
            for job in jobs:
                work(*job)

    def _pass(self, gcols, with_deviance=False):
        """Move to the current coefficients: means, gradient on ``gcols`` (and the deviance).

        A pass over every column also makes the present point the anchor of
        the gradient bounds (see :meth:`gradient`); other passes measure how
        far the scores have moved from it.
        """
        active = np.flatnonzero(self.beta).astype(np.int64)
        coef = self.beta * self.inv_scale
        used = np.union1d(active, gcols) if self.rows.shape[0] else active
        k = gcols.shape[0]
        full = k == self.p
        track = 2 if full else (1 if self.anchor_grad is not None else 0)
        count = -(-self.n // CHUNK_ROWS)
        parts = np.zeros((count, k + 1))
        devs, drifts = np.zeros(count), np.zeros(count)

        def work(c, lo, hi):
            devs[c], drifts[c] = glm_pass(
                self.X, self.rows, used, self.center, coef, self.b0, self._offset, self.y,
                self._w, active, gcols,
                self.code, self.bound, self.shape, with_deviance, lo, hi, self.eta, parts[c],
                self.anchor, track)

        self._chunks(work)
        self.passes += 1
        self.dev = float(devs.sum()) if with_deviance else None
        total = parts.sum(axis=0) / self.n
        self.grad_known[:] = False
        self.grad[gcols] = total[:k] * self.inv_scale[gcols]
        self.grad[self.p] = total[k]
        self.grad_known[gcols] = True
        self.grad_known[self.p] = True
        if full:
            self.anchor_grad = self.grad[: self.p].copy()
            self.drift = 0.0
        elif track == 1:
            self.drift = float(np.sqrt(drifts.sum() / self.n))

    def _uncertain(self, limit, unknown=None):
        """Columns whose gradient is unknown here and might exceed ``limit`` in size.

        The gradient of column j moves from its value at the anchor by at most
        (Cauchy-Schwarz) its root mean square times the RMS change of the
        scores, so columns far enough below ``limit`` need no pass.
        """
        if unknown is None:
            unknown = ~self.grad_known[: self.p]
        if limit is None or self.anchor_grad is None or not np.isfinite(self.drift):
            return unknown
        reach = np.abs(self.anchor_grad) + self.col_norm * self.drift * (1 + 1e-6)
        return unknown & ~(reach <= np.asarray(limit) * (1 - 1e-9))

    def gradient(self, limit=None):
        """Gradient of every term at the present point.

        With ``limit`` (per term), a term whose bound shows ``|g_j| <= limit_j``
        keeps its value at the anchor instead of being computed: it cannot
        exceed the limit, which is all the KKT check asks of it.
        """
        need = self._uncertain(limit)
        if need.any():
            known, values = self.grad_known.copy(), self.grad.copy()
            cols = (np.arange(self.p) if 3 * need.sum() > self.p else np.flatnonzero(need))
            self._pass(cols.astype(np.int64))      # the same point: only adds columns
            self.grad[known] = values[known]
            self.grad_known |= known
        out = self.grad[: self.p].copy()
        stale = ~self.grad_known[: self.p]
        out[stale] = self.anchor_grad[stale]
        return out

    def deviance(self):
        if self.dev is None:
            devs = np.zeros(-(-self.n // CHUNK_ROWS))

            def work(c, lo, hi):
                devs[c] = glm_deviance(self.y, self.w, self.eta, self.code, self.bound,
                                       self.shape, lo, hi)

            self._chunks(work)
            self.dev = float(devs.sum())
        return self.dev

    def null_deviance(self):
        return self._null_deviance

    def _objective(self, l1, l2):
        return self.deviance() / (2 * self.n) + penalty_value(self.beta, l1, l2)

    # ---- the Gram matrix ----------------------------------------------------
    def _working_weights(self, rows):
        """IRLS weights at ``rows``, as :meth:`Family.evaluate` gives them (``w V(mu)``,
        floored, for the canonical links)."""
        return self.family.newton_weights(self.y[rows], self.eta[rows], self.w[rows])

    def _gram(self, cols, fresh):
        """Make ``H`` hold ``X'WX / n`` (sample estimate) for ``cols`` (intercept = p).

        When the sample is at most a quarter of the rows or ``KEEP_BYTES``, its
        standardised, weighted columns are kept once read, so a term that
        joins the working set costs the reading of its own column only.
        """
        if fresh or self.H_weights is None:
            self.H_weights = self._working_weights(self.sample)
            self.in_H[:] = False
            self.hessian_builds += 1
            self.slot[:] = -1
            self.n_kept = 0
        new = cols[~self.in_H[cols]]
        if new.size == 0:
            return
        block = self._sample_block(new, cols)
        self.H[np.ix_(new, cols)] = block
        self.H[np.ix_(cols, new)] = block.T
        self.in_H[new] = True

    def _sample_block(self, new, cols):
        """``Z[:, new]' Z[:, cols] / m`` for ``Z``, the weighted, standardised sample."""
        root = np.sqrt(self.H_weights)
        if self.kept is None:          # read the sample afresh, a piece at a time
            block = np.zeros((new.shape[0], cols.shape[0]))
            pos = np.searchsorted(cols, new)
            A = empty_aligned((SAMPLE_PIECE, cols.shape[0]), "F")
            for start in range(0, self.sample.shape[0], SAMPLE_PIECE):
                rows = self._rows_of_x(self.sample[start:start + SAMPLE_PIECE])
                part = A[: rows.shape[0]]
                weighted_sample(self.X, rows, cols, self.center, self.inv_scale,
                                root[start:start + SAMPLE_PIECE], part)
                block += part.T @ part if new.shape[0] == cols.shape[0] else part[:, pos].T @ part
            return block / self.sample.shape[0]
        Z = self.kept                  # read only the columns not kept yet, kept side by side
        missing = cols[self.slot[cols] < 0]
        if missing.size:
            first = self.n_kept
            self.n_kept += missing.shape[0]
            weighted_sample(self.X, self._rows_of_x(self.sample), missing, self.center,
                            self.inv_scale, root, Z[:, first:self.n_kept])
            self.slot[missing] = np.arange(first, self.n_kept)
        block = Z[:, self.slot[new]].T @ Z[:, : self.n_kept]
        return block[:, self.slot[cols]] / Z.shape[0]

    def _rows_of_x(self, positions):
        return self.rows[positions] if self.rows.shape[0] else positions

    def _secant(self, G, s, yv):
        """BFGS update of ``G`` (H on the working set) so that ``G s = yv``, the change in the gradient.

        The step just taken and the change of the exact gradient along it
        correct the sampled matrix in the direction the fit is moving
        (Nocedal & Wright 2006, section 6.1); skipped unless ``s'yv > 0``,
        which keeps ``G`` positive definite.
        """
        Hs = G @ s
        sHs = float(s @ Hs)
        sy = float(s @ yv)
        if sy <= 1e-8 * np.sqrt(float(s @ s) * float(yv @ yv)) or sHs <= 0:
            return False
        G += np.outer(yv / sy, yv)
        G -= np.outer(Hs / sHs, Hs)
        self.secant_updates += 1
        return True

    # ---- one penalty ----------------------------------------------------------
    def solve(self, l1, l2, ws):
        p = self.p
        cols = np.empty(ws.shape[0] + 1, dtype=np.int64)
        cols[:-1] = np.sort(ws)
        cols[-1] = p
        terms = cols[:-1]
        k = cols.shape[0]
        l1s = np.zeros(k)
        l2s = np.zeros(k)
        l1s[:-1], l2s[:-1] = l1[terms], l2[terms]
        order = np.arange(k, dtype=np.int64)
        if not self.grad_known[cols].all():
            self._pass(terms)
        self._gram(cols, fresh=k <= FRESH_TERMS and self.n >= HESSIAN_ROWS)
        G = self.H[np.ix_(cols, cols)]            # a copy; written back when it changes
        everything = np.arange(p, dtype=np.int64)
        total_sweeps = 0
        previous = None          # the last step's change, while H is kept
        careful = False          # halve steps until the objective falls
        objective = None
        old = np.empty(k)
        for _ in range(self.max_newton):
            g = self.grad[cols]
            old[:-1], old[-1] = self.beta[terms], self.b0
            b = old.copy()
            sweeps = cd_gram(G, g, b, order, l1s, l2s, 1e-3 * self.tol, self.max_sweeps)
            total_sweeps += sweeps
            if sweeps >= self.max_sweeps:
                return total_sweeps, False
            delta = b - old
            change = float(np.max(np.diag(G) * delta * delta))
            g_old = self.grad[cols]
            # the pass computes the working set's gradient, and when this step
            # is probably the last, that of every term the KKT check may need
            last = change < self.tol or (previous is not None
                                         and change * change / previous < 0.01 * self.tol)
            gcols = terms
            if last:
                extra = self._uncertain(l1, np.ones(p, dtype=bool))
                extra[terms] = True
                gcols = everything if 3 * extra.sum() > p else np.flatnonzero(extra).astype(np.int64)
            self._set(cols, old + delta, gcols, with_deviance=last or careful)
            if careful:
                new_objective = self._objective(l1, l2)
                halvings = 0
                while new_objective > objective * (1 + 1e-12) + 1e-15 and halvings < 30:
                    delta *= 0.5
                    self._set(cols, old + delta, gcols, with_deviance=True)
                    new_objective = self._objective(l1, l2)
                    halvings += 1
                self.step_halvings += halvings
                objective = new_objective
                change = float(np.max(np.diag(G) * delta * delta))
            elif previous is not None and change > previous:
                # the change grew: go back, rebuild H, halve from here on
                self._set(cols, old, terms)
                objective = self._objective(l1, l2)
                self._gram(cols, fresh=True)
                G = self.H[np.ix_(cols, cols)]
                careful, previous = True, None
                continue
            if last:
                return total_sweeps, True
            if previous is not None and change > SLOW_RATE ** 2 * previous:
                self._gram(cols, fresh=True)
                G = self.H[np.ix_(cols, cols)]
                previous = None
            else:
                if self._secant(G, delta, g_old - self.grad[cols]):
                    self.H[np.ix_(cols, cols)] = G
                previous = change
        return total_sweeps, False

    def _set(self, cols, b, gcols, with_deviance=False):
        self.beta[cols[:-1]] = b[:-1]
        self.b0 = float(b[-1])
        self._pass(gcols, with_deviance)


def sample_rows(n, size):
    """About ``size`` of the rows 0..n-1 (all when n <= size), in pieces of
    ``SAMPLE_PIECE`` consecutive rows spread evenly over the table: a fixed
    choice, and cheap to read from a column-ordered copy."""
    if n <= size:
        return np.arange(n, dtype=np.int64)
    pieces = max(1, size // SAMPLE_PIECE)
    starts = (np.arange(pieces) * (n - SAMPLE_PIECE)) // max(pieces - 1, 1)
    return (starts[:, None] + np.arange(SAMPLE_PIECE)[None, :]).ravel().astype(np.int64)
