"""Whole regularisation paths of penalised GLMs: lasso, elastic net, ridge.

For one penalty ``lam`` the fit minimises (Friedman, Hastie & Tibshirani 2010)

    (1/n) * sum_i w_i * deviance_i / 2
      + lam * sum_j v_j * [ (1 - mix) / 2 * b_j^2 + mix * |b_j| ]

with observation weights ``w`` rescaled to sum to n, an unpenalised intercept
and per-term penalty weights ``v_j >= 0`` (0 keeps the term in every model).
With uniform weights this is the scaling of scikit-learn's ``enet_path``
(alpha = lam, l1_ratio = mix), ``LogisticRegression`` (C = 1 / (n lam)) and
``PoissonRegressor`` (alpha = lam, mix = 0).

Predictors are centred and scaled to weighted population SD 1 before fitting
(unless ``standardize=False``); coefficients are returned on the original
scale of X (``coef``) and on the standardised scale (``coef_std``).

The path
--------
* Where it starts. With a lasso part (``mix > 0``) the grid starts at
  ``lam_max``, the smallest penalty at which every penalised coefficient is
  zero, computed exactly from the gradient at the model holding only the
  intercept and the unpenalised terms. A ridge penalty never sets a
  coefficient to zero, so for ridge, and for elastic nets whose ``lam_max``
  lies further out, the grid starts instead where the model has at most one
  effective degree of freedom: the ridge part alone then allows
  ``df = tr[G (G + lam (1 - mix) V)^-1] <= tr(V^-1 G) / (lam (1 - mix)) <= 1``,
  with ``G`` the weighted cross-products of the terms at the intercept-only
  fit and ``V`` the penalty weights (our rule: a model worth one parameter is
  where a reader starts to see effects).
* How far it runs: ``decades`` powers of ten below its start (default 3.5,
  or 2 when there are at least as many terms as rows), log-spaced with
  ``per_decade`` penalties in each power of ten (default 20), each fit
  warm-started from the previous one.
* Where it may stop early, on the automatic grid only: once at least
  ``MIN_STEPS_BEFORE_STOP`` penalties are fitted and the deviance left
  unexplained shrank by less than ``SMALL_CHANGE`` (0.01%) of itself over the
  last ``CHANGE_SPAN`` penalties. On any grid it stops when the deviance
  explained exceeds ``SATURATED`` (a saturated fit: for presence/absence data
  the classes are separated and the coefficients would run off to infinity),
  and says so in a warning.
* The solver (see :mod:`pathfinder.core.solvers`): Gram-matrix coordinate
  descent for Gaussian responses with n > p; for binomial and Poisson
  responses, Newton steps on a sampled Gram matrix on long tables
  (``LONG_TABLE_ROWS`` rows or more and ``LONG_TABLE_RATIO`` rows per
  column), IRLS with coordinate descent otherwise.
* Sequential strong rules (Tibshirani et al. 2012) choose the working set;
  after each fit every term outside it is checked against the KKT conditions
  and the fit is repeated with any violator added.
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from ..defaults import GRID_DECADES, GRID_DECADES_WIDE, GRID_PER_DECADE, MAX_SWEEPS, TOL
from ..errors import FitWarning, InputError
from .families import Family, get_family
from .glm import estimate_theta
from .solvers import (GramSolver, NaiveSolver, NewtonGramSolver, blas_threads, column_scales,
                      standardised_copy, weighted_mean)

SMALL_CHANGE = 1e-4       # early stop: share by which the unexplained deviance shrank ...
CHANGE_SPAN = 3           # ... over this many penalties
MIN_STEPS_BEFORE_STOP = 10
SATURATED = 0.9995        # stop: deviance explained (under 0.05% of the null deviance left)
GRAM_MAX_TERMS = 500      # Gaussian uses the Gram matrix when n > p and p <= this
LONG_TABLE_ROWS = 2_000   # binomial / Poisson use Newton-Gram steps from this many rows ...
LONG_TABLE_RATIO = 20     # ... when there are also at least this many rows per column
SUBSET_COPY_BYTES = 256 * 2**20  # ... and read a fit's rows of X in place if copying them takes more


@dataclass(frozen=True)
class PathResult:
    """A fitted path; row k of every (K, ...) array belongs to ``penalties[k]``."""

    family: str
    mix: float
    names: tuple
    penalties: np.ndarray
    intercept: np.ndarray
    coef: np.ndarray
    intercept_std: np.ndarray
    coef_std: np.ndarray
    deviance: np.ndarray
    null_deviance: float
    deviance_explained: np.ndarray
    n_terms: np.ndarray
    n_iter: np.ndarray
    kkt_violation: np.ndarray
    kkt_refits: np.ndarray
    center: np.ndarray
    scale: np.ndarray
    term_weights: np.ndarray
    n_obs: int
    standardize: bool
    stop_reason: str
    warnings: tuple = field(default=())
    theta: float | None = None      # the negative binomial's theta, held along the path
    theta_estimated: bool = False   # ... estimated from these data (a parameter criteria count)
    theta_note: str = ""            # ... how it was found, in words

    # ---- reading the path -------------------------------------------------
    def to_frame(self) -> pd.DataFrame:
        """Long table: one row per (step, term) with the original-scale and standardised coefficient."""
        K, p = self.coef.shape
        return pd.DataFrame({
            "step": np.repeat(np.arange(K), p),
            "penalty": np.repeat(self.penalties, p),
            "term": np.tile(np.asarray(self.names, dtype=object), K),
            "estimate": self.coef.ravel(),
            "estimate_std": self.coef_std.ravel(),
        })

    def summary_frame(self) -> pd.DataFrame:
        """One row per penalty: size and fit of the model there."""
        return pd.DataFrame({
            "step": np.arange(len(self.penalties)),
            "penalty": self.penalties,
            "n_terms": self.n_terms,
            "deviance": self.deviance,
            "deviance_explained": self.deviance_explained,
            "intercept": self.intercept,
        })

    def coefficients_at(self, penalty: float) -> tuple[float, np.ndarray]:
        """(intercept, coef) at any penalty inside the grid.

        Between two grid points the coefficients are interpolated linearly in
        log(penalty); at a grid point they are the fitted values exactly.
        """
        lam = np.asarray(self.penalties)
        if penalty >= lam[0]:
            return float(self.intercept[0]), self.coef[0].copy()
        if penalty <= lam[-1]:
            return float(self.intercept[-1]), self.coef[-1].copy()
        k = int(np.searchsorted(-lam, -penalty))  # lam[k-1] > penalty >= lam[k]
        if lam[k] == penalty:
            return float(self.intercept[k]), self.coef[k].copy()
        t = (np.log(lam[k - 1]) - np.log(penalty)) / (np.log(lam[k - 1]) - np.log(lam[k]))
        b0 = (1 - t) * self.intercept[k - 1] + t * self.intercept[k]
        return float(b0), (1 - t) * self.coef[k - 1] + t * self.coef[k]

    def predict(self, X: ArrayLike | pd.DataFrame, penalty: float | None = None, *,
                kind: str = "response", offset: ArrayLike | None = None) -> np.ndarray:
        """Predictions for rows of X: (n, K) for the whole path, (n,) at one penalty.

        ``kind="link"`` gives the linear predictor, ``"response"`` the mean
        (probability for binomial, expected count for Poisson).
        """
        X = _as_matrix(X, self.names)
        if penalty is None:
            eta = self.intercept[None, :] + X @ self.coef.T
        else:
            b0, b = self.coefficients_at(float(penalty))
            eta = b0 + X @ b
        if offset is not None:
            off = np.asarray(offset, dtype=float)
            eta = eta + (off[:, None] if eta.ndim == 2 else off)
        if kind == "link":
            return eta
        if kind != "response":
            raise InputError("kind must be 'link' or 'response'")
        return get_family(self.family).inverse_link(eta)


def _as_matrix(X, names=None):
    if isinstance(X, pd.DataFrame):
        if names is not None and all(isinstance(n, str) for n in names) and set(names) <= set(X.columns):
            X = X[list(names)]
        return X.to_numpy(dtype=float)
    return np.asarray(X, dtype=float)


def _check_vector(v, n, what):
    v = np.asarray(v, dtype=float).ravel()
    if v.shape[0] != n:
        raise InputError(f"{what} has {v.shape[0]} values but X has {n} rows; "
                         "pass one value per row")
    if not np.all(np.isfinite(v)):
        raise InputError(f"{what} contains missing or infinite values; drop or fill those rows")
    return v


@dataclass(frozen=True, eq=False)
class PathData:
    """The checked inputs of one path: rows chosen, weights rescaled to sum to n."""

    X: np.ndarray             # all rows of X, as given (never copied whole)
    y: np.ndarray
    offset: np.ndarray
    w: np.ndarray
    term_weights: np.ndarray
    rows: np.ndarray | None   # the rows fitted (sorted), or None for all
    names: tuple

    @property
    def n(self) -> int:
        return self.y.shape[0]

    @property
    def p(self) -> int:
        return self.X.shape[1]


def check_inputs(X, y, family, *, term_weights=None, offset=None, weights=None, rows=None,
                 names=None) -> PathData:
    """Check X, y, offset, weights and term weights once, at the core's boundary."""
    if names is None and isinstance(X, pd.DataFrame):
        names = tuple(str(c) for c in X.columns)
    if isinstance(X, pd.DataFrame):
        X = X.to_numpy(dtype=float)
    X = np.asarray(X)
    if X.ndim != 2:
        raise InputError("X must be two-dimensional (rows = sites, columns = predictors)")
    if not np.issubdtype(X.dtype, np.number):
        X = X.astype(float)
    n_all, p = X.shape
    names = tuple(f"x{j}" for j in range(p)) if names is None else tuple(str(c) for c in names)
    if len(names) != p:
        raise InputError(f"{len(names)} names for {p} columns of X; give one name per column")
    y = _check_vector(y, n_all, "y")
    offset = np.zeros(n_all) if offset is None else _check_vector(offset, n_all, "offset")
    w = np.ones(n_all) if weights is None else _check_vector(weights, n_all, "weights")
    if rows is not None:
        # in increasing order: X is then read front to back (the fit does not
        # depend on the order of its rows)
        rows = np.sort(np.asarray(rows, dtype=np.int64), kind="stable")
        y, offset, w = y[rows], offset[rows], w[rows]
    n = y.shape[0]
    if np.any(w < 0) or w.sum() <= 0:
        raise InputError("weights must be non-negative and not all zero")
    w = w * (n / w.sum())
    v = np.ones(p) if term_weights is None else _check_vector(term_weights, p, "term_weights")
    if np.any(v < 0):
        raise InputError("term_weights must be non-negative (0 keeps a term in every model)")
    family.check_response(y)
    return PathData(X, y, offset, w, v, rows, names)


def make_solver(data: PathData, family, standardize, max_sweeps, cross_products=None):
    """The solver for these data: ``(solver, mean, scale, constant)``.

    Gram-matrix coordinate descent for least squares with n > p; Newton steps
    on a sampled Gram matrix for long binomial and Poisson tables; IRLS with
    coordinate descent otherwise (see :mod:`pathfinder.core.solvers`).
    """
    X, y, w, offset, rows, n, p = data.X, data.y, data.w, data.offset, data.rows, data.n, data.p
    use_gram = family.least_squares and n > p and p <= GRAM_MAX_TERMS
    long_table = (not family.least_squares and n >= LONG_TABLE_ROWS
                  and n >= LONG_TABLE_RATIO * p and p <= GRAM_MAX_TERMS)
    mean = weighted_mean(X, w, rows)
    if not np.all(np.isfinite(mean)):   # a NaN or infinity anywhere in the rows used spreads here
        raise InputError("X contains missing or infinite values; drop or fill those rows")
    if use_gram:
        solver, scale, constant = GramSolver.from_data(X, y, w, offset, mean, standardize, 1.0,
                                                       max_sweeps, rows, cross_products)
        return solver, mean, scale, constant
    threads = blas_threads() if n * p >= 2**22 else 1
    # a subset of rows is gathered into a copy (faster) unless the copy would be big
    in_place = rows is None or n * p * 8 > SUBSET_COPY_BYTES
    if long_table and in_place and _readable_in_place(X):
        scale, constant, squares = column_scales(X, mean, w, standardize, threads, rows)
        solver = NewtonGramSolver(X, mean, scale, squares, y, w, offset, family, 1.0, max_sweeps,
                                  threads=threads, rows=rows)
        return solver, mean, scale, constant
    Xs, scale, constant, squares = standardised_copy(X, mean, w, standardize, rows, threads)
    if long_table:
        solver = NewtonGramSolver(Xs, np.zeros(p), np.ones(p), squares, y, w, offset, family,
                                  1.0, max_sweeps, threads=threads)
    else:
        solver = NaiveSolver(Xs, y, w, offset, family, 1.0, max_sweeps)
    return solver, mean, scale, constant


def largest_penalty(grad, v, mix, penalised) -> float:
    """The smallest penalty at which every penalised coefficient is zero, exactly.

    From the gradient at the model of the intercept and the always-kept terms:
    ``max_j |g_j| / (mix v_j)``; infinite for pure ridge (``mix = 0``), whose
    coefficients are never exactly zero.
    """
    if mix <= 0:
        return np.inf
    return float(np.max(np.abs(grad[penalised]) / (mix * v[penalised])))


def one_df_penalty(mean_weight, v, mix, penalised) -> float:
    """The penalty from which the ridge part alone leaves at most one degree of freedom.

    For standardised terms at the intercept-only fit ``G_jj`` is the mean
    working weight, so ``tr(V^-1 G) = mean_weight * sum_j 1 / v_j`` over the
    penalised terms; dividing by ``1 - mix`` gives the penalty (infinite for
    the lasso, which needs no such start).
    """
    if mix >= 1:
        return np.inf
    return float(mean_weight * np.sum(1.0 / v[penalised]) / (1.0 - mix))


def penalty_grid(start, penalties, decades, per_decade, n, p, n_penalties=None):
    """``(grid, automatic)``: the penalties to fit, in decreasing order.

    The automatic grid runs from ``start`` down ``decades`` powers of ten
    with ``per_decade`` penalties in each (see the module notes), or
    ``n_penalties`` in all when that is given.
    """
    if penalties is not None:
        grid = np.sort(np.asarray(penalties, dtype=float).ravel())[::-1]
        if grid.size == 0 or np.any(grid < 0) or not np.all(np.isfinite(grid)):
            raise InputError("penalties must be finite and non-negative")
        return grid, False
    decades = (GRID_DECADES if n > p else GRID_DECADES_WIDE) if decades is None else float(decades)
    per_decade = GRID_PER_DECADE if per_decade is None else per_decade
    if not 0 < decades <= 12:
        raise InputError(f"the grid depth must lie between 0 and 12 decades (powers of ten), "
                         f"got {decades}")
    if isinstance(per_decade, bool) or int(per_decade) != per_decade or per_decade < 1:
        raise InputError(f"the penalties per decade must be a whole number of at least 1, "
                         f"got {per_decade}")
    if not 0 < start < np.inf:
        raise InputError("no predictor is related to the response at all (every gradient is 0)")
    count = int(round(decades * int(per_decade))) + 1
    if n_penalties is not None:
        if isinstance(n_penalties, bool) or int(n_penalties) != n_penalties or n_penalties < 2:
            raise InputError(f"the number of penalties must be a whole number of at least 2, "
                             f"got {n_penalties}")
        count = int(n_penalties)
    return start * np.logspace(0, -decades, count), True


def strong_set(grad, v, mix, lam, lam_prev, usable):
    """Terms the sequential strong rule keeps for ``lam`` (Tibshirani et al. 2012)."""
    return usable & (np.abs(grad) >= mix * v * (2 * lam - lam_prev))


def kkt_violators(grad, l1, usable, working):
    """Terms outside the working set whose gradient breaks the KKT conditions."""
    return usable & ~working & (np.abs(grad) > l1 * (1 + 1e-9))


def solve_at(solver, l1, l2, working, usable):
    """Fit one penalty: solve on the working set, check KKT, add violators, repeat.

    Returns ``(gradient, sweeps, refits, converged)``; ``working`` grows in place.
    """
    iters, refits, converged = 0, 0, True
    while True:
        ws = np.flatnonzero(working).astype(np.int64)
        sweeps, ok = solver.solve(l1, l2, ws)
        iters += sweeps
        converged &= ok
        solver.refresh()
        grad = solver.gradient(limit=l1).copy()
        violators = kkt_violators(grad, l1, usable, working)
        if not violators.any():
            break
        working |= violators
        refits += 1
    return grad, iters, refits, converged


def stop_here(family, dev_explained, k, automatic, lam, last_index):
    """``(reason, message)`` when the path should stop after step ``k``, else ``(None, None)``.

    On any grid: deviance explained above ``SATURATED``; on the automatic grid
    only, after ``MIN_STEPS_BEFORE_STOP`` penalties, an unexplained deviance
    that shrank by less than ``SMALL_CHANGE`` of itself over the last
    ``CHANGE_SPAN`` penalties.
    """
    now = dev_explained[-1]
    if now > SATURATED:
        return (f"deviance explained above {SATURATED}",
                family.saturation_message(lam) if k < last_index else None)
    if automatic and k + 1 >= max(MIN_STEPS_BEFORE_STOP, CHANGE_SPAN + 1):
        left, before = 1.0 - now, 1.0 - dev_explained[-1 - CHANGE_SPAN]
        if before - left < SMALL_CHANGE * left:
            return "deviance explained stopped changing", None
    return None, None


def fit_path(X: ArrayLike | pd.DataFrame, y: ArrayLike, *, family: str | Family = "gaussian",
             mix: float = 1.0, penalties: ArrayLike | None = None, decades: float | None = None,
             per_decade: int | None = None, n_penalties: int | None = None,
             term_weights: ArrayLike | None = None, offset: ArrayLike | None = None,
             weights: ArrayLike | None = None, standardize: bool = True, tol: float = TOL,
             max_sweeps: int = MAX_SWEEPS, rows: ArrayLike | None = None,
             names: Sequence[str] | None = None, cross_products: np.ndarray | None = None,
             theta: float | None = None) -> PathResult:
    """Fit a lasso / elastic-net / ridge path of a Gaussian, binomial or Poisson GLM.

    Parameters
    ----------
    X : array or DataFrame (n, p). Column names of a DataFrame name the terms.
        A long binomial or Poisson table held column by column (Fortran
        order, float32 or float64) is read as it is, standardised on the fly:
        no copy, and float32 data stay float32 (sums are taken in float64).
    y : response (0/1 or proportions for binomial, counts for Poisson).
    family : "gaussian", "binomial", "poisson" or "negative_binomial" (or a
        family object of :mod:`pathfinder.core.families`).
    theta : the negative binomial's theta, held along the path. When not
        given (here or in the family object) it is estimated once by maximum
        likelihood from the model of every term and held (see
        :func:`pathfinder.core.glm.estimate_theta`); the result reports it as
        ``theta``, with ``theta_note`` saying how it was found.
    mix : 1 is the lasso, 0 ridge, in between the elastic net (Zou & Hastie 2005).
    penalties : a grid of penalties to use instead of the automatic one
        (sorted into decreasing order).
    decades : depth of the automatic grid, in powers of ten below its start
        (default 3.5, or 2 when terms are at least as many as rows).
    per_decade : penalties in each power of ten of the automatic grid (default 20).
    n_penalties : instead of ``per_decade``, the number of penalties over the whole depth.
    term_weights : per-term penalty weights ``v_j >= 0`` (0 = always kept).
    offset : added to the linear predictor (log survey effort for counts).
    weights : observation weights ``>= 0``, rescaled to sum to n.
    standardize : fit on standardised predictors (default) or on X as given.
    names : names of the columns of X (default: a DataFrame's column names,
        else x0, x1, ...).
    rows : fit on these rows of X only (y, offset and weights are given for
        all rows of X too). X is never copied whole: the rows are read block
        by block, gathered into a copy of their own, or (long column-ordered
        tables, when that copy would pass ``SUBSET_COPY_BYTES``) read where
        they are. This is how folds and subsamples are fitted.
    cross_products : optional ``X.T @ X`` of all rows of X, for repeated
        Gaussian fits on subsets of rows (cross-validation): with uniform
        weights a fit on ``rows`` then subtracts the rows left out instead of
        reading the rows kept.
    tol : convergence threshold: iterations stop once no standardised
        coefficient moves by more than about ``tol`` (relative to the spread of
        the response) in a sweep; precisely, once the largest
        ``(1/n) sum_i W_i x_ij^2 * change_j^2`` falls below
        ``tol^2 * null deviance / n``.
    """
    if not 0.0 <= float(mix) <= 1.0:
        raise InputError(f"mix must lie between 0 (ridge) and 1 (lasso), got {mix}")
    mix = float(mix)
    fam = get_family(family, theta)
    data = check_inputs(X, y, fam, term_weights=term_weights, offset=offset, weights=weights,
                        rows=rows, names=names)
    theta_estimated, theta_note = fam.needs_theta, ""
    if theta_estimated:
        found = estimate_theta(data.X, data.y, offset=data.offset, weights=data.w, rows=data.rows)
        fam, theta_note = fam.with_theta(found.theta), found.note
    elif fam.takes_theta:
        theta_estimated = fam.theta_estimated     # fixed here, but estimated from these data
        how = "estimated once from the model of every term" if theta_estimated else "as given"
        theta_note = f"theta {fam.theta:.4g}, {how}, held along the path"
    n, p, v = data.n, data.p, data.term_weights
    solver, mean, scale, constant = make_solver(data, fam, standardize, max_sweeps, cross_products)
    usable = ~constant
    penalised = usable & (v > 0)
    if not penalised.any():
        raise InputError("no penalised term with any spread: nothing for the penalty to choose")
    null_dev = solver.null_deviance()
    if null_dev <= 0:
        raise InputError("the response has no variation: there is nothing to explain")
    # Converged when no coefficient moved by more than tol (in SDs of the
    # working response): the largest weighted squared change is below tol^2
    # times the null deviance per observation.
    solver.tol = tol * tol * null_dev / n
    solver.loose_tol = 1e-8 * null_dev / n

    issues = []
    unpenalised = np.flatnonzero(usable & (v == 0)).astype(np.int64)
    zeros = np.zeros(p)
    if unpenalised.size:
        _, ok = solver.solve(zeros, zeros, unpenalised)
        if not ok:
            issues.append("the model with only the always-kept terms did not converge")
    grad = solver.gradient().copy()
    lam_zero = largest_penalty(grad, v, mix, penalised)
    ridge_start = np.inf
    if mix < 1:
        null_eta = fam.null_intercept(data.y, data.w, data.offset) + data.offset
        ridge_start = one_df_penalty(float(np.mean(fam.working_weights(null_eta, data.w))), v, mix,
                                     penalised)
    grid, automatic = penalty_grid(min(lam_zero, ridge_start), penalties, decades, per_decade, n, p,
                                   n_penalties)

    out = {k: [] for k in ("b0", "beta", "dev", "iters", "kkt", "refits", "explained")}
    ever_active = np.zeros(p, dtype=bool)
    ever_active[unpenalised] = True
    lam_prev = grid[0] if not np.isfinite(lam_zero) else max(lam_zero, grid[0])
    unconverged = []
    stop_reason = "end of grid"
    for k, lam in enumerate(grid):
        l1 = lam * mix * v
        l2 = lam * (1 - mix) * v
        working = ever_active | strong_set(grad, v, mix, lam, lam_prev, usable)
        if lam < lam_zero:   # from lam_zero up the answer is known: no penalised term
            grad, iters, refits, ok = solve_at(solver, l1, l2, working, usable)
        else:
            iters, refits, ok = 0, 0, True
        if not ok:
            unconverged.append(k)
        beta = solver.beta.copy()
        ever_active |= beta != 0
        out["b0"].append(solver.intercept)
        out["beta"].append(beta)
        out["dev"].append(solver.deviance())
        out["iters"].append(iters)
        out["kkt"].append(_kkt_violation(grad, beta, l1, l2, usable))
        out["refits"].append(refits)
        out["explained"].append(1 - out["dev"][-1] / null_dev)
        lam_prev = lam
        reason, message = stop_here(fam, out["explained"], k, automatic, lam, grid.size - 1)
        if message:
            issues.append(message)
        if reason:
            stop_reason = reason
            break

    if unconverged:
        issues.append(_unconverged_message(unconverged, grid))
    coef_std = np.array(out["beta"])
    intercept_std = np.array(out["b0"], dtype=float)
    coef = coef_std / scale
    intercept = intercept_std - coef @ mean
    deviance = np.array(out["dev"], dtype=float)
    for message in issues:
        warnings.warn(message, FitWarning, stacklevel=2)
    return PathResult(
        family=fam.name, mix=mix, names=data.names, penalties=grid[: len(deviance)].copy(),
        intercept=intercept, coef=coef, intercept_std=intercept_std, coef_std=coef_std,
        deviance=deviance, null_deviance=float(null_dev),
        deviance_explained=1 - deviance / null_dev, n_terms=(coef_std != 0).sum(axis=1),
        n_iter=np.array(out["iters"]), kkt_violation=np.array(out["kkt"]),
        kkt_refits=np.array(out["refits"]), center=mean, scale=scale, term_weights=v,
        n_obs=n, standardize=bool(standardize), stop_reason=stop_reason, warnings=tuple(issues),
        theta=fam.theta, theta_estimated=theta_estimated, theta_note=theta_note,
    )


def _readable_in_place(X):
    """Can the long-table solver read X as it is (standardising on the fly)?"""
    return X.dtype in (np.float32, np.float64) and X.flags.f_contiguous


def _kkt_violation(grad, beta, l1, l2, usable):
    """Largest violation of the KKT conditions (gradient units; 0 at an exact solution).

    Zero coefficients need ``|g_j| <= l1_j``; non-zero ones need
    ``g_j - l2_j b_j = l1_j sign(b_j)``.
    """
    nonzero = beta != 0
    at_zero = np.maximum(np.abs(grad) - l1, 0.0)
    off_zero = np.abs(grad - l2 * beta - l1 * np.sign(beta))
    viol = np.where(nonzero, off_zero, at_zero)
    return float(np.max(viol[usable], initial=0.0))


def _unconverged_message(steps, grid):
    where = (f"penalty {grid[steps[0]]:.4g} (step {steps[0]})" if len(steps) == 1 else
             f"{len(steps)} penalties between {grid[steps[-1]]:.4g} and {grid[steps[0]]:.4g} "
             f"(steps {steps[0]} to {steps[-1]})")
    return (f"the fit at {where} stopped at the iteration cap before converging; those "
            "coefficients are approximate")
