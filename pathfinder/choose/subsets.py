"""Best-subset and stepwise selection by information criteria, with Akaike weights.

Many reviewers still ask for the model chosen by AIC among all subsets of the
candidate predictors, or by stepwise selection, and for Akaike weights and
the summed weights of each term. This module gives them, with the project's
conventions, so that the result can be set beside the penalised paths and
judged on the same outer folds (:func:`subset_choice`).

Searches
--------
* :func:`best_subsets` keeps, for each size, the best ``keep_per_size``
  models by log-likelihood, and says how each size was found (``found_by``:
  exhaustive, proved or searched; :mod:`pathfinder.choose.subset_search`).
  Within a size every criterion (AIC, AICc, BIC, adjusted R^2, Cp) ranks
  models as the log-likelihood does, because the number of parameters is the
  same; so the best model by any criterion is always among those kept.

  - Gaussian: every size 0..p by leaps and bounds (Furnival & Wilson 1974,
    Technometrics 16:499-511) on the centred weighted cross-product matrix:
    the residual sum of squares of a set bounds that of all its subsets, so
    whole branches of the tree of subsets are skipped once they cannot beat
    the models kept (:mod:`pathfinder.core.kernels_leaps`). The number of
    rows enters only once, when the cross-products are formed.
  - Binomial and Poisson: every subset of the smallest sizes is refitted by
    Newton's method from its parent's coefficients while that is affordable
    (:mod:`pathfinder.core.kernels_subsets`); larger sizes are searched by
    splicing (Zhu, Wen, Zhang, Wang & Wang 2020, PNAS 117:33117-33123)
    started from forward stepwise and the neighbouring sizes, never worse
    than forward stepwise at the same size, up to the size where AIC, AICc
    and BIC have all risen for several sizes running.
  - Negative binomial: the same, with theta held fixed at the family's value
    (a run estimates it once from the model of every term); every subset is
    fitted by Newton's method on the observed information, and its
    log-likelihood is the full negative-binomial one at that theta.
  - Long searches are cut into tasks run through ``run(fn, tasks, shared)``;
    the kept models are the same whichever way they are cut or run.

* :func:`forward_path` is forward stepwise at every size, to compare the
  methods size by size.
* :func:`stepwise` adds (forward), removes (backward) or does either (both)
  one term at a time, each time taking the change that lowers the criterion
  most, and stops when no change lowers it. It works for any number of
  predictors, but it is a greedy path, not a search: it may miss the best
  subset.

Conventions (those of :mod:`pathfinder.choose.criteria`)
--------------------------------------------------------
* ``k`` in the tables is the number of predictors in the model;
  ``n_parameters = k + 1`` (the intercept), plus 1 for a Gaussian response
  when ``count_variance=True``, plus 1 for the negative binomial's theta when
  it was estimated from these data (``family.theta_estimated``; a theta
  given by the user is not counted). By default the Gaussian error variance
  is not counted, as in statsmodels' GLM ``aic`` and ``bic_llf``.
* ``AIC = -2 logL + 2 n_parameters``; ``AICc = AIC + 2 n_parameters
  (n_parameters + 1) / (n - n_parameters - 1)`` (Hurvich & Tsai 1989,
  Biometrika 76:297-307), infinite when the denominator is not positive;
  ``BIC = -2 logL + n_parameters log(n)``, with n the rows of positive
  weight. The log-likelihood is the full one, computed by the same function
  as the criteria of penalised paths (Gaussian: maximum-likelihood variance
  RSS / n).
* Gaussian only: ``deviance_explained`` is R^2 (also given for the other
  families, as 1 - deviance / null deviance); ``adjusted_r2 = 1 - (1 - R^2)
  (n - 1) / (n - k - 1)``; Mallows' ``cp = RSS / s^2 - n + 2 (k + 1)``, with
  ``s^2 = RSS_full / (n - r - 1)`` from the model with all p predictors (r
  its rank) fitted on the same rows.
* Observation weights are rescaled to sum to the number of rows, and the
  offset enters every model, as in the fitting core.
* Terms nearly collinear with the others already in a subset (residual
  variance below 1e-10 of their own) are held at zero: such a subset fits no
  better than its smaller twin and costs one more parameter.

Akaike weights
--------------
:func:`akaike_table` turns criterion values into Akaike weights
``exp(-delta / 2) / sum exp(-delta / 2)`` and the 95% confidence set of
models (Burnham & Anderson 2002, Model Selection and Multimodel Inference,
sections 2.9 and 4.2); :func:`variable_importance` sums the weights of the
models holding each term; :func:`model_average` averages coefficients. The
table of a best-subset search holds the best ``keep_per_size`` models of each
size, not all ``2^p``: weights are normalised over the models listed, and
:meth:`SubsetSearch.weight_left_out` bounds the weight the unlisted ones
could carry.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np
import pandas as pd

from ..core import kernels_subsets as kernels
from ..core.families import Family, get_family, null_intercept
from ..errors import InputError
from . import subset_search as search
from .criteria import quasi_criteria
from .problem import Problem, refit

QUASI = ("qaic", "qaicc")         # quasi-likelihood criteria of overdispersed counts
CRITERIA = ("aic", "aicc", "bic")
GAUSSIAN_CRITERIA = ("adjusted_r2", "cp")
DIRECTIONS = ("forward", "backward", "both")
METHODS = ("best", "forward", "backward", "both")

ALIAS_TOL = search.ALIAS_TOL
NEWTON_TOL = search.NEWTON_TOL
NEWTON_MAX_ITER = search.NEWTON_MAX_ITER
GAUSSIAN_BLOCK = 1 << 21     # subsets per task: about 0.1 s of least-squares search
GLM_BLOCK = 1 << 12          # subsets per task: about a second of Newton fits
MAX_TASKS = 256
STORED_VECTORS = 1 << 22     # GLM search: keep per-depth working vectors up to 2 x 32 MB
CONFIDENCE = 0.95
SATURATED = 0.999            # deviance explained at which a binomial fit counts as separated


# ---- the rows searched, prepared once --------------------------------------------

@dataclass(frozen=True, eq=False)
class SearchData:
    """The rows a search works on, standardised; sent once to every worker."""

    family: Family
    names: tuple
    Xt: np.ndarray            # (p, n) standardised predictors, one per row of the array
    y: np.ndarray
    w: np.ndarray             # rescaled to sum to n_rows
    offset: np.ndarray
    center: np.ndarray        # weighted means (p,)
    scale: np.ndarray         # weighted population SDs (p,), 1 for constant columns
    n: int                    # rows with positive weight
    intercept_start: float    # intercept of the intercept-only model
    null_deviance: float
    gram: np.ndarray | None   # Gaussian: (p + 1, p + 1) centred weighted cross-products of [Xs, y]
    y_mean: float             # Gaussian: weighted mean of y - offset

    @property
    def p(self) -> int:
        return self.Xt.shape[0]


def _as_rows(rows, n_all):
    if rows is None:
        return np.arange(n_all)
    rows = np.asarray(rows)
    if rows.dtype == bool:
        if rows.shape != (n_all,):
            raise InputError(f"the row mask has {rows.size} values but the data have {n_all} rows; "
                             "pass one value per row or a list of row positions")
        return np.flatnonzero(rows)
    if rows.ndim != 1 or not np.issubdtype(rows.dtype, np.integer):
        raise InputError("rows must be a list of whole-number row positions or a mask of rows")
    if rows.size and (rows.min() < -n_all or rows.max() >= n_all):
        raise InputError(f"row positions must lie between 0 and {n_all - 1}; check the rows passed")
    return rows


def prepare(problem: Problem, rows=None) -> SearchData:
    """Standardise the rows to search once, and check what a search needs."""
    fam = get_family(problem.family)
    if fam.code not in search.SEARCHABLE:
        raise InputError(f"the subset searches do not cover the {fam.name} family yet; use "
                         "the penalised paths and stability selection, or --no-subsets")
    if fam.needs_theta:
        raise InputError("the subset searches hold theta fixed, but the negative binomial "
                         "family given has none: pass it with theta set "
                         "(NegativeBinomial(theta), e.g. theta estimated once from the model "
                         "of every term)")
    X_all = np.asarray(problem.X, dtype=float)
    if X_all.ndim != 2:
        raise InputError(f"the predictors must form a table (rows x columns), got shape {X_all.shape}")
    rows = _as_rows(rows, X_all.shape[0])
    X = X_all[rows]
    y = np.asarray(problem.y, dtype=float)[rows]
    n_rows, p = X.shape
    names = tuple(str(v) for v in problem.names) if problem.names is not None else ()
    if len(names) != p:
        names = tuple(f"x{j + 1}" for j in range(p))
    if n_rows < 2:
        raise InputError(f"a subset search needs at least 2 rows, got {n_rows}")
    if not np.all(np.isfinite(X)) or not np.all(np.isfinite(y)):
        raise InputError("the predictors or the response contain missing or infinite values; "
                         "drop or fill those rows before a subset search")
    fam.check_response(y, where="the response column")
    if problem.weights is None:
        w = np.ones(n_rows)
    else:
        w = np.asarray(problem.weights, dtype=float)[rows]
        if not np.all(np.isfinite(w)) or np.any(w < 0) or w.sum() <= 0:
            raise InputError("observation weights must be finite, non-negative and not all zero")
        w = w * (n_rows / w.sum())
    off = np.zeros(n_rows) if problem.offset is None else np.asarray(problem.offset, dtype=float)[rows]
    if not np.all(np.isfinite(off)):
        raise InputError("the offset contains missing or infinite values; fill or drop those rows")

    total = w.sum()
    center = w @ X / total
    Xc = X - center
    scale = np.sqrt(w @ (Xc * Xc) / total)
    scale[scale == 0] = 1.0
    Xt = np.ascontiguousarray((Xc / scale).T)
    b0 = null_intercept(fam, y, w, off)
    null_deviance = fam.deviance(y, fam.inverse_link(b0 + off), w)
    gram, y_mean = None, 0.0
    if fam.least_squares:
        z = y - off
        y_mean = float(w @ z / total)
        augmented = np.vstack([Xt, z - y_mean])                    # (p + 1, n), centred
        gram = (augmented * w) @ augmented.T
    return SearchData(fam, names, Xt, y, w, off, center, scale, int(np.count_nonzero(w > 0)),
                      float(b0), float(null_deviance), gram, y_mean)


# ---- criteria ------------------------------------------------------------------

def _n_parameters(k_terms, family, count_variance):
    """Parameters counted: the terms, the intercept, and those every model carries
    (:func:`pathfinder.choose.subset_search.extra_parameters`)."""
    return np.asarray(k_terms, dtype=float) + 1.0 + search.extra_parameters(family, count_variance)


def criteria_columns(log_likelihood, n_parameters, n) -> dict:
    """AIC, AICc and BIC of models with these log-likelihoods and parameter counts."""
    ll = np.asarray(log_likelihood, dtype=float)
    k = np.asarray(n_parameters, dtype=float)
    aic = -2.0 * ll + 2.0 * k
    room = n - k - 1.0
    with np.errstate(divide="ignore", invalid="ignore"):
        aicc = np.where(room > 0, aic + 2.0 * k * (k + 1.0) / room, np.inf)
    bic = -2.0 * ll + k * np.log(n)
    return {"aic": aic, "aicc": aicc, "bic": bic}


def _check_criterion(criterion, family, allowed=CRITERIA + GAUSSIAN_CRITERIA):
    criterion = str(criterion).lower()
    if criterion not in allowed:
        raise InputError(f"unknown criterion {criterion!r}; use one of {', '.join(allowed)}")
    if criterion in GAUSSIAN_CRITERIA and not family.least_squares:
        raise InputError(f"{criterion} applies to a Gaussian response only; use aic, aicc or bic")
    return criterion


# ---- the exhaustive search -----------------------------------------------------

@lru_cache(maxsize=None)
def _n_below(free: int, room: int) -> int:
    """Number of subsets of ``free`` items with at most ``room`` members."""
    return sum(math.comb(free, i) for i in range(min(free, room) + 1)) if room >= 0 else 0


def count_subsets(p: int, max_size: int | None = None) -> int:
    """Number of models an exhaustive search fits: all subsets of up to ``max_size`` of p."""
    return _n_below(int(p), int(p if max_size is None else min(max_size, p)))


def _subset_at(position: int, p: int, max_size: int) -> tuple:
    """The subset at ``position`` of the depth-first (lexicographic) visiting order."""
    members, first = [], 0
    while position > 0:
        position -= 1                                  # step past the current subset
        for j in range(first, p):
            below = _n_below(p - 1 - j, max_size - len(members) - 1)
            if position < below:
                members.append(j)
                first = j + 1
                break
            position -= below
    return tuple(members)


@dataclass(frozen=True)
class SearchTask:
    """One block of the visiting order: ``count`` subsets from ``start``."""

    start: tuple
    count: int
    max_size: int
    keep_per_size: int


@dataclass(frozen=True, eq=False)
class BlockResult:
    sizes: np.ndarray         # (m,) size of each kept subset
    scores: np.ndarray        # (m,) ranking score: -RSS (Gaussian), else log-likelihood less a constant
    members: np.ndarray       # (m, max_size) member indices, -1 padded
    coef: np.ndarray          # (m, max_size + 1) standardised coefficients (GLMs), else (m, 0)
    n_models: int
    not_converged: int


def _slots(p, max_size, keep, count):
    cap = np.array([min(keep, math.comb(p, s), count) for s in range(max_size + 1)], dtype=np.int64)
    start = np.concatenate([[0], np.cumsum(cap)[:-1]]).astype(np.int64)
    return start, cap


def run_block(data: SearchData, task: SearchTask) -> BlockResult:
    """Search one block of subsets; keep the best of each size (module level, for workers)."""
    p = data.p
    slot_start, cap = _slots(p, task.max_size, task.keep_per_size, task.count)
    total = int(cap.sum())
    scores = np.full(total, np.nan)                     # NaN marks an empty slot
    members = np.full((total, max(task.max_size, 1)), -1, dtype=np.int64)
    start = np.asarray(task.start, dtype=np.int64)
    if data.family.least_squares:
        coef = np.empty((total, 0))
        visited = kernels.gaussian_search(data.gram, start, task.count, task.max_size, ALIAS_TOL,
                                          slot_start, cap, scores, members)
        not_converged = 0
    else:
        coef = np.zeros((total, task.max_size + 1))
        visited, not_converged = kernels.glm_search(
            data.Xt, data.y, data.w, data.offset, data.family.code, data.family.row_shape,
            data.intercept_start, start, task.count, task.max_size, NEWTON_TOL, NEWTON_MAX_ITER,
            ALIAS_TOL, (task.max_size + 1) * data.y.shape[0] <= STORED_VECTORS, slot_start, cap,
            scores, members, coef)
    sizes = np.repeat(np.arange(task.max_size + 1), cap)
    used = ~np.isnan(scores)
    return BlockResult(sizes[used], scores[used], members[used][:, :task.max_size], coef[used],
                       int(visited), int(not_converged))


def _merge(parts, p, max_size, keep):
    """The best ``keep`` subsets of each size over all parts, in a fixed order.

    ``parts`` are ``(sizes, scores, members, coef)`` tuples; a subset found by
    more than one part counts once, with its best score.
    """
    width = max(max_size, 1)
    sizes = np.concatenate([np.asarray(q[0], dtype=np.int64) for q in parts])
    scores = np.concatenate([np.asarray(q[1], dtype=float) for q in parts])
    members = np.concatenate([_pad(q[2], width, -1) for q in parts])[:, :max_size]
    coef = np.concatenate([_pad(q[3], max_size + 1, 0.0) for q in parts])
    # Best first: larger score, then the earlier subset in lexicographic order.
    keys = [members[:, t] for t in range(members.shape[1] - 1, -1, -1)] + [-scores, sizes]
    order = np.lexsort(keys)
    chosen, seen = [], set()
    count = np.zeros(max_size + 1, dtype=np.int64)
    for i in order:
        s = int(sizes[i])
        key = (s, tuple(members[i, :s]))
        if s > max_size or key in seen or count[s] >= min(keep, math.comb(p, s)):
            continue
        seen.add(key)
        count[s] += 1
        chosen.append(i)
    chosen = np.array(chosen, dtype=np.int64)
    return sizes[chosen], members[chosen], coef[chosen]


def _pad(a, width, value):
    a = np.asarray(a)
    out = np.full((a.shape[0], width), value, dtype=a.dtype if a.size else type(value))
    k = min(width, a.shape[1]) if a.ndim == 2 else 0
    if k:
        out[:, :k] = a[:, :k]
    return out


def search_tasks(p, max_size, family, keep_per_size):
    """The blocks an exhaustive search is cut into (a fixed rule: the result never depends on it)."""
    total = count_subsets(p, max_size)
    block = GAUSSIAN_BLOCK if family.least_squares else GLM_BLOCK
    n_tasks = min(MAX_TASKS, max(1, -(-total // block)))
    block = -(-total // n_tasks)
    return [SearchTask(_subset_at(pos, p, max_size), min(block, total - pos), max_size, keep_per_size)
            for pos in range(0, total, block)]


def _check_int(value, what, low):
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < low:
        raise InputError(f"{what} must be a whole number of at least {low}, got {value!r}")
    return int(value)


def _size_limit(data: SearchData) -> int:
    """Most terms a model may hold: p, and at most n - 2 so one residual degree of freedom is left."""
    return max(0, min(data.p, data.n - 2))


def _log_constant(data: SearchData) -> float:
    """Log-likelihood less the kernels' objective (Poisson: -sum w log y!; binomial 0/1: 0;
    negative binomial: ``sum w [log Gamma(y + theta) - log Gamma(theta) - log y! - y log theta]``),
    as the family gives it (``log_likelihood_constant``)."""
    return data.family.log_likelihood_constant(data.y, data.w)


def _exhaustive(data: SearchData, size, keep, run, progress):
    """Every subset of up to ``size`` terms (the existing depth-first kernels)."""
    tasks = search_tasks(data.p, size, data.family, keep)
    if run is None:
        blocks, done = [], 0
        for task in tasks:
            blocks.append(run_block(data, task))
            done += blocks[-1].n_models
            if progress is not None:
                progress(done)
    else:
        blocks = run(run_block, tasks, data)
    n_models = sum(b.n_models for b in blocks)
    if n_models != count_subsets(data.p, size):
        raise RuntimeError(f"the subset search visited {n_models} models instead of "
                           f"{count_subsets(data.p, size)}")
    part = (np.concatenate([b.sizes for b in blocks]), np.concatenate([b.scores for b in blocks]),
            np.concatenate([b.members for b in blocks]), np.concatenate([b.coef for b in blocks]))
    return part, sum(b.not_converged for b in blocks)


def _affordable_size(data: SearchData, top, budget):
    """Largest size whose exhaustive search (every smaller size too) fits the fit budget."""
    size = -1
    while size < top:
        fits = count_subsets(data.p, size + 1)
        if fits > budget or fits * data.y.shape[0] > search.EXHAUSTIVE_ROW_FITS:
            break
        size += 1
    return size


def _likelihood_search(data: SearchData, requested, keep, budget, count_variance, run, progress):
    """Binomial, Poisson, negative binomial: exhaustive small sizes, splicing beyond
    (see subset_search)."""
    limit = _size_limit(data)
    constant = _log_constant(data)
    penalty = search.criterion_penalties(data, limit, count_variance)
    common = dict(tol=NEWTON_TOL, max_iter=NEWTON_MAX_ITER, alias_tol=ALIAS_TOL,
                  stored_limit=STORED_VECTORS)
    everything = _affordable_size(data, limit, budget) == limit
    if requested is None and not everything:
        forward = search.forward_steps(data, limit, window=search.RISING_SIZES,
                                       count_variance=count_variance, constant=constant, **common)
    else:   # a fixed range, or every size when all of them can be fitted one by one
        forward = search.forward_steps(data, limit if requested is None else min(requested, limit),
                                       **common)
        requested = forward.max_size
    top = forward.max_size
    exact = _affordable_size(data, top, budget)
    parts, not_converged, visited = [], forward.not_converged, np.zeros(limit + 1, dtype=np.int64)
    visited[0] += 1
    for s in range(1, top + 1):
        visited[s] += data.p - s + 2               # every candidate, and the refit of the best
    best_exact = None
    if exact >= 0:
        part, bad = _exhaustive(data, exact, keep, run, progress)
        parts.append(part)
        not_converged += bad
        for s in range(exact + 1):
            visited[s] += math.comb(data.p, s)
        mine = part[0] == exact
        i = np.flatnonzero(mine)[np.argmax(part[1][mine])]
        best_exact = (part[2][i, :exact].copy(), part[3][i, :exact + 1].copy(), float(part[1][i]))
    while True:
        searched = list(range(exact + 1, top + 1))
        slots = search.SpliceSlots(data.p, top, keep)
        starts = {s: [(forward.added[:s], forward.coef[s, :s + 1])] for s in searched}
        best, fits, bad, per_size = search.splice_sizes(data, searched, starts, slots, best_exact,
                                                        tol=NEWTON_TOL, max_iter=NEWTON_MAX_ITER,
                                                        alias_tol=ALIAS_TOL)
        objective = np.array([max(forward.objective[s], best[s][2]) if s in best else
                              (forward.objective[s] if s > exact else _best_score(parts, s))
                              for s in range(top + 1)])
        if requested is not None or top >= limit or search.rising(objective, constant, penalty,
                                                                  search.RISING_SIZES):
            break
        # a searched size beat the path late: cover more sizes
        top = min(limit, top + search.RISING_SIZES)
        forward = search.forward_steps(data, top, **common)
    for s, count in per_size.items():
        visited[s] += count
    not_converged += bad
    parts.append(slots.kept(searched))
    if progress is not None:
        progress(int(visited.sum()))
    found_by = tuple("exhaustive" if s <= exact else "searched" for s in range(top + 1))
    return parts, top, found_by, visited[:top + 1], not_converged, forward, exact


def _best_score(parts, s):
    scores = [part[1][part[0] == s] for part in parts]
    scores = np.concatenate(scores) if scores else np.zeros(0)
    return float(scores.max()) if scores.size else -np.inf


def _least_squares_search(data: SearchData, requested, keep, budget, run):
    """Gaussian: leaps and bounds over every size; splicing only where a budget stopped it."""
    limit = _size_limit(data)
    top = limit if requested is None else min(requested, limit)
    sizes, scores, members, found_by, visited, done = search.least_squares_sizes(
        data, top, keep, budget, run)
    parts = [(sizes, scores, members, np.zeros((len(sizes), 0)))]
    open_sizes = [s for s in range(top + 1) if found_by[s] == "searched"]
    added, _ = search.least_squares_forward(data.gram, top, ALIAS_TOL)
    if open_sizes:
        slots = search.SpliceSlots(data.p, top, keep)
        starts = {}
        for s in open_sizes:
            starts[s] = [(added[:s], np.zeros(s + 1))]
            mine = sizes == s
            if mine.any():
                i = np.flatnonzero(mine)[np.argmax(scores[mine])]
                starts[s].append((members[i, :s], np.zeros(s + 1)))
        _, fits, _, per_size = search.splice_sizes(data, open_sizes, starts, slots, None,
                                                   tol=NEWTON_TOL, max_iter=NEWTON_MAX_ITER,
                                                   alias_tol=ALIAS_TOL)
        for s, count in per_size.items():
            visited[s] += count
        k_sizes, k_scores, k_members, _ = slots.kept(open_sizes)
        # the splicing objective is -RSS / 2; the branch and bound ranks by -RSS
        parts.append((k_sizes, 2.0 * k_scores, k_members, np.zeros((len(k_sizes), 0))))
    return parts, top, found_by, visited, added


def best_subsets(problem: Problem, *, max_size=None, rows=None, keep_per_size=10, max_fits=None,
                 max_models=None, count_variance=False, run=None,
                 progress=None) -> "SubsetSearch":
    """The best models of every size; each size says whether it was proved best or searched.

    Gaussian: leaps and bounds proves the best ``keep_per_size`` models of
    every size 0..p (see :mod:`pathfinder.choose.subset_search`).
    Binomial, Poisson and negative binomial (theta held fixed; a family
    whose theta is still unknown is refused): every subset of the smallest
    sizes is fitted while
    that is affordable, and larger sizes are searched by splicing from
    forward stepwise and the neighbouring sizes, from 0 until AIC, AICc and
    BIC have all risen for ``RISING_SIZES`` sizes running (or p).

    ``max_size`` covers exactly the sizes 0..max_size instead. ``rows``
    restricts the search to some rows (positions or a mask), as in a
    cross-validation fold. ``max_fits`` (``max_models`` is the same) caps
    the models fitted or evaluated by the exact part of the search: the
    branch and bound (Gaussian; default ``DEFAULT_GAUSSIAN_MODELS``) or the
    exhaustive sizes (the other families; by default those whose fits
    times rows stay below ``EXHAUSTIVE_ROW_FITS``); sizes the budget leaves
    unproved are searched, and ``notes`` says so and how to lift it.
    ``run(fn, tasks, shared)`` carries out the tasks of a long search
    (default: in this process); ``progress(done)`` is told the number of
    models fitted so far.
    """
    data = prepare(problem, rows)
    p = data.p
    requested = None if max_size is None else _check_int(max_size, "the largest subset size", 0)
    keep = _check_int(keep_per_size, "keep_per_size", 1)
    if max_fits is None:
        max_fits = max_models
    budget = None if max_fits is None else _check_int(max_fits, "max_fits", 1)
    limit = _size_limit(data)
    notes = []
    if data.family.least_squares:
        parts, top, found_by, visited, added = _least_squares_search(
            data, requested, keep, search.DEFAULT_GAUSSIAN_MODELS if budget is None else budget, run)
        not_converged, exact = 0, top
        forward_members = [added[:s] for s in range(top + 1)]
        forward_coef = None
        if progress is not None:
            progress(int(visited.sum()))
    else:
        parts, top, found_by, visited, not_converged, forward, exact = _likelihood_search(
            data, requested, keep, np.inf if budget is None else budget, count_variance, run,
            progress)
        forward_members = [forward.added[:s] for s in range(top + 1)]
        forward_coef = forward.coef
    sizes, members, coef_std = _merge(parts, p, top, keep)
    intercepts, coefs = _original_units(data, sizes, members, coef_std)
    table = _model_table(data, sizes, members, intercepts, coefs, count_variance)
    order = np.lexsort([-table["log_likelihood"].to_numpy(), table["k"].to_numpy()])
    table = table.iloc[order].reset_index(drop=True)
    table.insert(2, "rank_within_size", table.groupby("k").cumcount() + 1)
    table["found_by"] = [found_by[k] for k in table["k"]]
    forward_table = _forward_table(data, forward_members, forward_coef, count_variance)
    best_ll = table.groupby("k")["log_likelihood"].max()
    size_table = pd.DataFrame({
        "k": np.arange(top + 1),
        "found_by": list(found_by),
        "models_visited": np.asarray(visited[:top + 1], dtype=np.int64),
        "models_of_this_size": [math.comb(p, s) for s in range(top + 1)],
        "log_likelihood": best_ll.reindex(np.arange(top + 1)).to_numpy(),
        "forward_log_likelihood": forward_table["log_likelihood"].to_numpy()[:top + 1],
    })
    n_models = int(size_table["models_visited"].sum())
    notes += _search_notes(data, requested, top, limit, found_by, exact, budget, table,
                           not_converged, n_models)
    columns = tuple(tuple(int(j) for j in members[i, :sizes[i]]) for i in order)
    return SubsetSearch(table=table, coefficients=coefs[order], intercepts=intercepts[order],
                        columns=columns,
                        family=data.family, names=data.names, n=data.n, p=p, max_size=top,
                        keep_per_size=keep, n_models=n_models,
                        models_per_size=tuple(math.comb(p, s) for s in range(top + 1)),
                        count_variance=count_variance, problem=problem,
                        rows=None if rows is None else _as_rows(rows, problem.X.shape[0]),
                        notes=tuple(notes), sizes=size_table, forward=forward_table,
                        full_log_likelihood=_full_log_likelihood(data))


def _search_notes(data, requested, top, limit, found_by, exact, budget, table, not_converged,
                  n_models):
    """Plain words on every limit that applied to the search, and how to lift it."""
    notes, p = [], data.p
    if requested is not None and requested < limit:
        notes.append(f"only subsets of up to {top} of the {p} terms were searched (a largest size "
                     f"was asked for); leave the largest size (--subset-sizes, max_size=) unset "
                     "to cover every size")
    elif top < p and limit < p:
        notes.append(f"models were limited to {limit} terms so that each leaves at least one "
                     f"residual degree of freedom ({data.n} rows)")
    elif top < p:
        notes.append(f"sizes 0 to {top} of {p} were covered: AIC, AICc and BIC had all risen for "
                     f"{search.RISING_SIZES} sizes running by then; ask for a largest size of "
                     f"{p} (--subset-sizes {p}, or max_size=) to cover every size")
    searched = [s for s in range(top + 1) if found_by[s] == "searched"]
    if searched:
        span = _span(searched)
        if data.family.least_squares:
            limit_used = budget or search.DEFAULT_GAUSSIAN_MODELS
            notes.append(f"the branch and bound stopped at its budget of {limit_used:,} models "
                         f"before proving sizes {span}; those sizes were searched by splicing, "
                         "not proved; raise the subset budget (--subset-budget N, or max_fits=) to prove them")
        else:
            what = (f"every subset of up to {exact} terms was fitted (exhaustive); "
                    if exact >= 0 else "")
            lift = ("raise the subset budget (--subset-budget N, or max_fits=) to fit more sizes "
                    "exhaustively" if budget is not None else
                    "subsets beyond that many fits are not compared one by one")
            notes.append(f"{what}sizes {span} were searched by splicing from forward stepwise "
                         f"and the neighbouring sizes: the best found, not proved best; {lift}")
        notes.append("the weight of the models not listed cannot be bounded closely at searched "
                     "sizes")
    if data.family.binary and (table["deviance_explained"] >= SATURATED).any():
        notes.append("some subsets separate presences from absences almost perfectly; their "
                     "coefficients run towards infinity and the criteria favour them, so check "
                     "those terms before trusting the choice")
    if not_converged:
        notes.append(f"{not_converged:,} of {n_models:,} fits did not converge (often a term that "
                     "separates presences from absences); their log-likelihoods are lower bounds")
    return notes


def _span(sizes):
    return f"{sizes[0]} to {sizes[-1]}" if len(sizes) > 1 else f"{sizes[0]}"


def _forward_table(data: SearchData, members_by_size, coef_std, count_variance) -> pd.DataFrame:
    """Forward stepwise at every size: k, terms, log-likelihood and criteria (refitted)."""
    top = len(members_by_size) - 1
    sizes = np.arange(top + 1)
    members = np.full((top + 1, max(top, 1)), -1, dtype=np.int64)
    coef = np.zeros((top + 1, top + 1))
    for s, m in enumerate(members_by_size):
        order = np.argsort(m, kind="stable")
        members[s, :s] = np.asarray(m)[order]
        if coef_std is not None:
            coef[s, 0] = coef_std[s, 0]
            coef[s, 1:s + 1] = coef_std[s, 1:s + 1][order]
    intercepts, coefs = _original_units(data, sizes, members, coef)
    table = _model_table(data, sizes, members, intercepts, coefs, count_variance)
    return table[["k", "terms", "log_likelihood", "aic", "aicc", "bic"]]


def _full_log_likelihood(data: SearchData) -> float:
    """Log-likelihood of the model with every term (the largest any subset can reach), or NaN."""
    if data.n - 2 < data.p:
        return float("nan")
    cols = np.arange(data.p, dtype=np.int64)
    if data.family.least_squares:
        b = _least_squares(data.gram, cols)
        rss = max(float(data.gram[-1, -1] - b @ data.gram[cols, -1]), 0.0)
        total = data.w.sum()
        return -0.5 * total * (np.log(2 * np.pi * rss / total) + 1.0) if rss > 0 else np.inf
    beta = np.zeros(data.p + 1)
    beta[0] = data.intercept_start
    f, _ = kernels.fit_subset(data.Xt, data.y, data.w, data.offset, data.family.code,
                              data.family.row_shape, cols, beta, NEWTON_TOL, NEWTON_MAX_ITER,
                              ALIAS_TOL)
    return float(f) + _log_constant(data)


def _original_units(data: SearchData, sizes, members, coef_std):
    """Intercepts (m,) and coefficients (m, p) in original units of the kept subsets."""
    m, p = len(sizes), data.p
    intercepts, coefs = np.empty(m), np.zeros((m, p))
    for i in range(m):
        cols = members[i, :sizes[i]]
        if data.family.least_squares:
            b = _least_squares(data.gram, cols)
            coefs[i, cols] = b / data.scale[cols]
            intercepts[i] = data.y_mean - coefs[i, cols] @ data.center[cols]
        else:
            b = coef_std[i, :sizes[i] + 1]
            coefs[i, cols] = b[1:] / data.scale[cols]
            intercepts[i] = b[0] - coefs[i, cols] @ data.center[cols]
    return intercepts, coefs


def _least_squares(gram, cols):
    """Standardised least-squares coefficients of the columns ``cols`` from the cross-products."""
    if len(cols) == 0:
        return np.zeros(0)
    cols = np.asarray(cols, dtype=np.int64)
    G = np.ascontiguousarray(gram[np.ix_(cols, cols)])
    return kernels.solve_aliased(G, np.ascontiguousarray(gram[cols, -1]), ALIAS_TOL)[0]


def _model_table(data: SearchData, sizes, members, intercepts, coefs, count_variance):
    """One row per model: terms, size, log-likelihood, deviance and the criteria."""
    fam = get_family(data.family)
    X = (data.Xt.T * data.scale) + data.center          # the rows searched, original units
    m = len(sizes)
    ll, dev = np.empty(m), np.empty(m)
    for lo in range(0, m, 256):                          # a bounded (n, 256) block at a time
        hi = min(m, lo + 256)
        eta = X @ coefs[lo:hi].T + intercepts[lo:hi] + data.offset[:, None]
        mu = fam.inverse_link(eta)
        ll[lo:hi] = fam.log_likelihood(data.y, mu, data.w)
        dev[lo:hi] = (data.w[:, None] * fam.unit_deviance(data.y[:, None], mu)).sum(axis=0)
    k_params = _n_parameters(sizes, data.family, count_variance)
    table = pd.DataFrame({
        "terms": [";".join(data.names[j] for j in members[i, :sizes[i]]) for i in range(m)],
        "k": sizes.astype(int),
        "n_parameters": k_params.astype(int),
        "log_likelihood": ll,
        "deviance": dev,
        **criteria_columns(ll, k_params, data.n),
    })
    with np.errstate(divide="ignore", invalid="ignore"):
        r2 = 1.0 - dev / data.null_deviance if data.null_deviance > 0 else np.full(m, np.nan)
    table["deviance_explained"] = r2
    if data.family.least_squares:
        n = data.n
        with np.errstate(divide="ignore", invalid="ignore"):
            table["adjusted_r2"] = np.where(n - sizes - 1 > 0,
                                            1.0 - (1.0 - r2) * (n - 1.0) / (n - sizes - 1.0), np.nan)
        s2 = _full_model_variance(data)
        table["cp"] = dev / s2 - n + 2.0 * (sizes + 1.0) if s2 > 0 else np.nan
    return table


def _full_model_variance(data: SearchData) -> float:
    """Residual variance of the model with all p predictors, RSS / (n - rank - 1) (for Cp)."""
    cols = np.arange(data.p)
    b, rank = kernels.solve_aliased(np.ascontiguousarray(data.gram[:-1, :-1]),
                                    np.ascontiguousarray(data.gram[:-1, -1]), ALIAS_TOL)
    rss = data.gram[-1, -1] - b @ data.gram[cols, -1]
    room = data.n - rank - 1
    return float(rss / room) if room > 0 else np.nan


@dataclass(frozen=True, eq=False)
class SubsetSearch:
    """What a best-subset search found.

    ``table`` has one row per model kept (the best ``keep_per_size`` of each
    size), sorted by size and then log-likelihood: terms (";"-joined names),
    k (number of terms), rank_within_size, n_parameters, log_likelihood,
    deviance, aic, aicc, bic, deviance_explained, and for a Gaussian response
    adjusted_r2 and cp, and found_by: how the models of that size were found
    (exhaustive: every subset of that size compared; proved: branch and
    bound proved them the best; searched: the best a local search found, not
    proved). Row i of ``coefficients`` (original units, zeros for absent
    terms), ``intercepts`` and ``columns`` (the positions of the model's
    terms among the predictors) belongs to row i of the table.

    Sizes 0..``max_size`` are covered. ``sizes`` has one row per size: k,
    found_by, models_visited (models fitted or evaluated at that size),
    models_of_this_size, log_likelihood (the best kept) and
    forward_log_likelihood (forward stepwise's model of that size).
    ``n_models`` is the total of models_visited. ``forward`` is forward
    stepwise at every size covered (k, terms, log_likelihood, aic, aicc,
    bic). ``full_log_likelihood`` is that of the model with every term, which
    no subset can exceed (NaN with fewer than p + 2 rows). ``notes`` states
    in words every limit that applied and how to lift it.
    """

    table: pd.DataFrame
    coefficients: np.ndarray
    intercepts: np.ndarray
    columns: tuple
    family: Family
    names: tuple
    n: int
    p: int
    max_size: int
    keep_per_size: int
    n_models: int
    models_per_size: tuple
    count_variance: bool
    problem: Problem = field(repr=False)
    rows: np.ndarray | None = field(default=None, repr=False)
    notes: tuple = ()
    sizes: pd.DataFrame | None = field(default=None, repr=False)
    forward: pd.DataFrame | None = field(default=None, repr=False)
    full_log_likelihood: float = float("nan")

    @property
    def proved_sizes(self) -> tuple:
        """Sizes whose kept models are proved best (exhaustive or proved)."""
        return tuple(int(k) for k, how in zip(self.sizes.k, self.sizes.found_by)
                     if how != "searched")

    @property
    def best_by_size(self) -> pd.DataFrame:
        """The model with the largest log-likelihood of each size."""
        return self.table[self.table.rank_within_size == 1].reset_index(drop=True)

    def chosen_row(self, criterion="aicc") -> int:
        """Row of the table that is best by ``criterion`` (ties: fewer terms)."""
        criterion = _check_criterion(criterion, self.family)
        values = self.table[criterion].to_numpy(dtype=float)
        if criterion == "adjusted_r2":
            values = -values
        values = np.where(np.isnan(values), np.inf, values)
        if not np.isfinite(values).any():
            raise InputError(f"no model of the search has a finite {criterion}; with {self.n} rows "
                             "use a smaller largest subset size or another criterion")
        best = np.flatnonzero(values == values.min())
        return int(best[np.argmin(self.table["k"].to_numpy()[best])])

    def best(self, criterion="aicc") -> tuple[float, np.ndarray, tuple]:
        """The model best by ``criterion``, refitted on the rows searched.

        Returns ``(intercept, coef, terms)``: ``coef`` has length p in
        original units, zero for the terms left out.
        """
        columns = self.columns[self.chosen_row(criterion)]
        intercept, coef = refit(self.problem, self.rows, np.array(columns, dtype=np.int64), ridge=0.0)
        return intercept, coef, tuple(self.names[j] for j in columns)

    def akaike(self, criterion="aicc") -> pd.DataFrame:
        """The Akaike table of the models listed (see :func:`akaike_table`)."""
        return akaike_table(self.table, _check_criterion(criterion, self.family, CRITERIA))

    def weight_left_out(self, criterion="aicc") -> float:
        """Upper bound on the Akaike weight of the models not in the table (all sizes 0..p).

        At a size whose models are proved best (exhaustive or proved), a model
        left out fits no better than the worst model kept of that size and has
        the same number of parameters, so its criterion is at least as large.
        At a searched size, or a size not covered, nothing is proved about the
        models left out except that none fits better than the best proved
        model of any larger size, nor than the model with every term
        (``full_log_likelihood``); that gives a valid but loose bound, often
        close to 1. Summing the bounds over the models left out gives the
        largest share of weight they could hold. NaN when no such bound is
        known (too few rows for the model with every term).
        """
        criterion = _check_criterion(criterion, self.family, CRITERIA)
        values = self.table[criterion].to_numpy(dtype=float)
        finite = np.isfinite(values)
        if not finite.any():
            return float("nan")
        low = values[finite].min()
        listed = np.exp(-(values[finite] - low) / 2).sum()
        how = dict(zip(self.sizes.k, self.sizes.found_by)) if self.sizes is not None else {}
        groups = dict(tuple(self.table.groupby("k")))
        best_ll = {int(k): float(g["log_likelihood"].max()) for k, g in groups.items()}
        ceiling = self.full_log_likelihood
        left = 0.0
        for s in range(self.p, -1, -1):
            group = groups.get(s)
            listed_here = 0 if group is None else len(group)
            missing = math.comb(self.p, s) - listed_here
            proved = how.get(s, "searched") != "searched"
            if missing > 0:
                if proved:
                    bound = group[criterion].max()
                else:
                    if not np.isfinite(ceiling):
                        return float("nan")
                    k_params = _n_parameters(s, self.family, self.count_variance)
                    bound = criteria_columns(ceiling, k_params, self.n)[criterion]
                if np.isfinite(bound):
                    left += missing * np.exp(-(bound - low) / 2)
            if proved and s in best_ll:
                # no model of a smaller size fits better than the best of this size
                ceiling = min(ceiling, best_ll[s]) if np.isfinite(ceiling) else best_ll[s]
        return float(left / (listed + left))


# ---- stepwise ------------------------------------------------------------------

@dataclass(frozen=True, eq=False)
class StepwiseResult:
    """The path of a stepwise search and the model it ended on.

    ``steps`` has one row per step: step (0 is the starting model), action
    (start, add, remove), term, k (number of terms after the step),
    terms, log_likelihood and value (the criterion after the step).
    ``intercept`` and ``coef`` (length p, original units, zero for terms left
    out) are the final model refitted on the rows searched.
    """

    steps: pd.DataFrame
    terms: tuple
    intercept: float
    coef: np.ndarray
    criterion: str
    direction: str
    value: float
    stopped: str


class _Fitter:
    """Log-likelihood of any subset of the prepared rows, by warm-started Newton fits."""

    def __init__(self, data: SearchData, count_variance: bool, dispersion=None):
        self.data = data
        self.code = data.family.code
        self.count_variance = count_variance
        self.dispersion = dispersion
        self.constant = _log_constant(data)

    def fit(self, members, start):
        """(log-likelihood, standardised coefficients) of the subset ``members``."""
        d = self.data
        beta = np.array(start, dtype=float)
        f, _ = kernels.fit_subset(d.Xt, d.y, d.w, d.offset, self.code, d.family.row_shape,
                                  np.asarray(members, dtype=np.int64), beta, NEWTON_TOL,
                                  NEWTON_MAX_ITER, ALIAS_TOL)
        if d.family.least_squares:
            total = d.w.sum()
            rss = max(-2.0 * f, 0.0)
            ll = -0.5 * total * (np.log(2 * np.pi * rss / total) + 1.0) if rss > 0 else np.inf
        else:
            ll = f + self.constant
        return float(ll), beta

    def criterion(self, ll, k_terms, criterion):
        k = _n_parameters(k_terms, self.data.family, self.count_variance)
        if criterion in QUASI:
            return float(quasi_criteria(ll, k, self.data.n, self.dispersion)[criterion])
        return float(criteria_columns(ll, k, self.data.n)[criterion])


def stepwise(problem: Problem, *, direction="forward", criterion="aic", rows=None, max_steps=None,
             max_terms=None, count_variance=False, dispersion=None) -> StepwiseResult:
    """Add or remove one term at a time while the criterion falls.

    ``direction``: ``forward`` starts from the intercept-only model and adds
    terms; ``backward`` starts from the model with every predictor and
    removes them; ``both`` starts from the intercept-only model and at each
    step considers every addition and every removal. Each step takes the
    change that lowers ``criterion`` (aic, aicc or bic) the most; the search
    stops when no change lowers it, after ``max_steps`` steps, or when an
    addition would exceed ``max_terms`` terms. Ties go to removals, then to
    the term listed first. With ``dispersion`` (overdispersed counts kept
    Poisson) ``criterion`` may be ``qaic`` or ``qaicc`` (Burnham & Anderson
    2002, section 2.5; see :func:`pathfinder.choose.criteria.quasi_criteria`).
    """
    direction = str(direction).lower()
    if direction not in DIRECTIONS:
        raise InputError(f"unknown stepwise direction {direction!r}; use forward, backward or both")
    data = prepare(problem, rows)
    criterion = _check_criterion(criterion, data.family,
                                 CRITERIA + (QUASI if dispersion is not None else ()))
    p = data.p
    max_steps = None if max_steps is None else _check_int(max_steps, "max_steps", 0)
    max_terms = _size_limit(data) if max_terms is None else min(_size_limit(data),
                                                                 _check_int(max_terms, "max_terms", 0))
    fitter = _Fitter(data, count_variance, dispersion)

    members = list(range(p)) if direction == "backward" else []
    if direction == "backward" and data.n <= p + 1:
        raise InputError(f"backward stepwise starts from the model with all {p} predictors, which "
                         f"needs more rows than that ({data.n} rows); use forward or both")
    start = np.zeros(len(members) + 1)
    start[0] = data.intercept_start
    ll, beta = fitter.fit(members, start)
    value = fitter.criterion(ll, len(members), criterion)
    steps = [dict(step=0, action="start", term="", k=len(members),
                  terms=";".join(data.names[j] for j in members), log_likelihood=ll, value=value)]
    stopped = "no change lowers the criterion"
    while True:
        if max_steps is not None and len(steps) - 1 >= max_steps:
            stopped = "reached the largest number of steps"
            break
        candidates = []
        if direction in ("backward", "both"):
            for pos, j in enumerate(members):
                kept = members[:pos] + members[pos + 1:]
                trial_ll, trial_beta = fitter.fit(kept, np.delete(beta, pos + 1))
                candidates.append((fitter.criterion(trial_ll, len(kept), criterion), 0, j, "remove",
                                   kept, trial_ll, trial_beta))
        if direction in ("forward", "both") and len(members) < max_terms:
            inside = set(members)
            for j in range(p):
                if j in inside:
                    continue
                grown = members + [j]
                trial_ll, trial_beta = fitter.fit(grown, np.append(beta, 0.0))
                candidates.append((fitter.criterion(trial_ll, len(grown), criterion), 1, j, "add",
                                   grown, trial_ll, trial_beta))
        if not candidates:
            stopped = ("reached the largest number of terms" if len(members) >= max_terms
                       else "no term left to add or remove")
            break
        best = min(candidates, key=lambda c: (c[0], c[1], c[2]))
        # A start with an infinite criterion (AICc with too few rows) improves on any finite one.
        margin = 1e-10 * (1.0 + abs(value)) if np.isfinite(value) else 0.0
        if not best[0] < value - margin:
            break
        value, _, j, action, members, ll, beta = best
        steps.append(dict(step=len(steps), action=action, term=data.names[j], k=len(members),
                          terms=";".join(data.names[t] for t in sorted(members)),
                          log_likelihood=ll, value=value))
    chosen = np.array(sorted(members), dtype=np.int64)
    intercept, coef = refit(problem, None if rows is None else _as_rows(rows, problem.X.shape[0]),
                            chosen, ridge=0.0)
    return StepwiseResult(pd.DataFrame(steps), tuple(data.names[j] for j in chosen), intercept, coef,
                          criterion, direction, value, stopped)


def forward_path(problem: Problem, *, rows=None, max_size=None,
                 count_variance=False) -> pd.DataFrame:
    """Forward stepwise at every size 0..max_size, not only where a criterion stops it.

    Each step adds the term that raises the log-likelihood most (ties: the
    term listed first), every candidate refitted in full; the table has one
    row per size: k, terms, log_likelihood, aic, aicc, bic. Set beside the
    best subset of each size (``SubsetSearch.sizes``), the lasso and the
    relaxed lasso, it lets the methods be compared size by size as in
    Hastie, Tibshirani & Tibshirani (2020, Statistical Science 35:579-592).
    ``max_size`` defaults to p (at most n - 2).
    """
    data = prepare(problem, rows)
    limit = _size_limit(data)
    top = limit if max_size is None else min(limit, _check_int(max_size, "the largest size", 0))
    if data.family.least_squares:
        added, _ = search.least_squares_forward(data.gram, top, ALIAS_TOL)
        return _forward_table(data, [added[:s] for s in range(top + 1)], None, count_variance)
    steps = search.forward_steps(data, top, tol=NEWTON_TOL, max_iter=NEWTON_MAX_ITER,
                                 alias_tol=ALIAS_TOL, stored_limit=STORED_VECTORS)
    return _forward_table(data, [steps.added[:s] for s in range(top + 1)], steps.coef,
                          count_variance)


# ---- the choice inside cross-validation folds ------------------------------------

def subset_choice(problem: Problem, rows, method="best", criterion="aicc",
                  max_size=None) -> tuple[float, np.ndarray]:
    """The model a subset method chooses from ``rows`` only: ``(intercept, coef of length p)``.

    ``method`` is ``best`` (best subset; ``max_size`` caps its size) or a
    stepwise direction ``forward``, ``backward`` or ``both`` (``max_size``
    caps the number of terms added). Used inside nested cross-validation,
    where the whole choice is redone on each outer training set.
    """
    method = str(method).lower()
    if method not in METHODS:
        raise InputError(f"unknown subset method {method!r}; use one of {', '.join(METHODS)}")
    if method == "best":
        search = best_subsets(problem, rows=rows, max_size=max_size, keep_per_size=1)
        intercept, coef, _ = search.best(criterion)
        return intercept, coef
    result = stepwise(problem, direction=method, criterion=criterion, rows=rows, max_terms=max_size)
    return result.intercept, result.coef


# ---- Akaike weights ------------------------------------------------------------

def akaike_table(models: pd.DataFrame, criterion="aicc") -> pd.DataFrame:
    """Akaike weights and the 95% confidence set of a table of models.

    Adds, after sorting by ``criterion`` (smallest first; the original index
    is kept and its position is recorded in the column ``model``):
    ``delta`` (criterion minus the smallest), ``akaike_weight``
    ``exp(-delta/2) / sum exp(-delta/2)``, ``cumulative_weight`` and
    ``in_confidence_set``: the models up to a cumulative weight of 0.95 plus
    the model that crosses it (Burnham & Anderson 2002, sections 2.9 and
    4.2). Models whose criterion is infinite (AICc with too few rows) get
    weight 0. With ``criterion="bic"`` the weights approximate posterior
    model probabilities under equal prior odds.
    """
    criterion = str(criterion).lower()
    if criterion not in models.columns:
        present = ", ".join(c for c in CRITERIA if c in models.columns) or "aic, aicc or bic"
        raise InputError(f"the table of models has no column {criterion!r}; give one of {present}")
    values = models[criterion].to_numpy(dtype=float)
    finite = np.isfinite(values)
    if not finite.any():
        raise InputError(f"no model has a finite {criterion}; use another criterion or fewer terms")
    table = models.copy()
    table.insert(0, "model", np.arange(len(models)))
    order = np.argsort(np.where(finite, values, np.inf), kind="stable")
    table = table.iloc[order]
    values = values[order]
    low = values[np.isfinite(values)].min()
    delta = values - low
    raw = np.where(np.isfinite(delta), np.exp(-delta / 2.0), 0.0)
    weight = raw / raw.sum()
    cumulative = np.cumsum(weight)
    before = np.concatenate([[0.0], cumulative[:-1]])
    table["delta"] = delta
    table["akaike_weight"] = weight
    table["cumulative_weight"] = cumulative
    table["in_confidence_set"] = (before < CONFIDENCE) & (weight > 0)
    return table


def variable_importance(table: pd.DataFrame, names) -> pd.Series:
    """Summed Akaike weight of the models holding each term (Burnham & Anderson 2002, 4.4).

    ``table`` is an :func:`akaike_table`. The sum compares terms fairly only
    when each appears in equally many of the models weighed (all subsets do;
    a table cut to the best models of each size does so approximately).
    """
    if "akaike_weight" not in table.columns:
        raise InputError("variable importance needs an Akaike table; pass the result of akaike_table")
    sets = [set(t.split(";")) if t else set() for t in table["terms"].astype(str)]
    weights = table["akaike_weight"].to_numpy(dtype=float)
    summed = [float(sum(wt for wt, s in zip(weights, sets) if name in s)) for name in names]
    return pd.Series(summed, index=list(names), name="summed_weight")


def model_average(table: pd.DataFrame, coefficient_matrix) -> np.ndarray:
    """Model-averaged coefficients: the Akaike-weighted mean, with zero for absent terms.

    This is the "full" average of Burnham & Anderson (2002, section 4.2.4):
    a term missing from a model counts as a coefficient of zero, which
    shrinks terms that few good models hold. Row ``table["model"][i]`` of
    ``coefficient_matrix`` belongs to the i-th row of the table (the row
    order of the models given to :func:`akaike_table`; for a search, its
    ``coefficients``).

    Caution: when predictors are collinear, a coefficient's meaning changes
    from model to model (each is the effect of a term *given the others in
    that model*), so an average over models mixes different quantities and is
    hard to interpret; average predictions instead, or report the terms'
    weights.
    """
    if "akaike_weight" not in table.columns:
        raise InputError("model averaging needs an Akaike table; pass the result of akaike_table")
    B = np.asarray(coefficient_matrix, dtype=float)
    positions = table["model"].to_numpy() if "model" in table.columns else np.arange(len(table))
    if B.ndim != 2 or positions.size and positions.max() >= B.shape[0]:
        needed = positions.max() + 1 if positions.size else 0
        raise InputError(f"the coefficient matrix has shape {B.shape} but the table refers to "
                         f"{needed} models; pass one row of coefficients per model")
    weights = table["akaike_weight"].to_numpy(dtype=float)
    return weights @ B[positions]
