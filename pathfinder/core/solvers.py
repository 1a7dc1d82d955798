"""The two solvers behind a path: one holds its state, solves at one penalty.

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
"""

from __future__ import annotations

import numpy as np

from .arrays import empty_aligned
from .families import Family, null_intercept
from .kernels import cd_gram, cd_naive

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


def standardised_copy(X, mean, w, standardize, rows=None):
    """One Fortran-ordered float64 copy of X's rows, centred and scaled in place.

    Returns the copy, the scales and the flags of columns with no spread.
    """
    p = X.shape[1]
    n = X.shape[0] if rows is None else len(rows)
    Xs = empty_aligned((n, p), "F")
    var = np.empty(p)
    for j in range(p):
        Xs[:, j] = X[:, j] if rows is None else X[rows, j]
        Xs[:, j] -= mean[j]
        var[j] = w @ (Xs[:, j] * Xs[:, j]) / n
    scale, constant = scale_from_variance(var, mean, standardize)
    for j in range(p):
        if scale[j] != 1.0:
            Xs[:, j] /= scale[j]
    return Xs, scale, constant


def penalty_value(beta, l1, l2):
    return float(np.sum(l1 * np.abs(beta)) + 0.5 * np.sum(l2 * beta * beta))


class GramSolver:
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

    def gradient(self):
        return self.grad

    def deviance(self):
        b = self.beta
        return max(self.n * (self.yy - b @ self.c - b @ self.grad), 0.0)

    def null_deviance(self):
        return self.n * self.yy


class NaiveSolver:
    """Any family: IRLS with naive coordinate descent on a standardised copy."""

    def __init__(self, Xs, y, w, offset, family: Family, tol, max_sweeps, max_newton=100):
        self.Xs = Xs
        self.y = y
        self.w = w
        self.offset = offset
        self.family = family
        self.n, p = Xs.shape
        self.beta = np.zeros(p)
        self.b0 = null_intercept(family, y, w, offset)
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
        gaussian = self.family.name == "gaussian"
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

    def gradient(self):
        return self.Xs.T @ (self.w * (self.y - self.mu)) / self.n

    def deviance(self):
        return self.dev

    def null_deviance(self):
        return self._null_deviance
