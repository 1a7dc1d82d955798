"""How each subset size is searched: proved by branch and bound, enumerated, or searched.

:func:`pathfinder.choose.subsets.best_subsets` asks this module for the best
models of each size and records, per size, how they were found:

* ``exhaustive``: every subset of that size was compared;
* ``proved``: branch and bound showed that no subset left unvisited can beat
  the models kept;
* ``searched``: the best a local search found, not proved best.

Gaussian responses (:func:`least_squares_sizes`)
    Leaps and bounds (Furnival & Wilson 1974, Technometrics 16:499-511) on
    the centred weighted cross-products, every size 0..p, in
    :mod:`pathfinder.core.kernels_leaps`. The search runs first in this
    process up to ``FIRST_PASS_MODELS`` models; most searches end there. A
    longer one is cut into ``N_PARTS`` tasks that share the top of the tree
    and split its branches, each started with the limits of the first pass
    (the RSS of the ``keep``-th best model of each size found), so every task
    cuts as well as one long search would. The kept models are the same,
    bit for bit, whichever way the tree is cut and wherever the tasks run.
    A budget of models (``max_fits``) stops the search; the sizes whose
    branches were not all settled are then searched by splicing instead.

Binomial, Poisson and negative binomial responses (:func:`likelihood_sizes`)
    Every subset of the smallest sizes is fitted (the exhaustive kernel of
    :mod:`pathfinder.core.kernels_subsets`) while that stays affordable:
    fits times rows at most ``EXHAUSTIVE_ROW_FITS``, about a few seconds on
    one core. Larger sizes are searched: forward stepwise at every size
    gives one start, the best model of the size below plus its strongest
    missing term and the best of the size above less its weakest term give
    others, and splicing (Zhu, Wen, Zhang, Wang & Wang 2020, PNAS
    117:33117-33123) improves each start while it gains. A searched size is
    therefore never worse than forward stepwise at that size. The negative
    binomial's theta is held at the family's value (``row_shape``) in every
    fit.

Sizes covered
    Gaussian: every size up to p (and n - 2). The other families: from 0
    until AIC, AICc and BIC have all stayed above their lowest value for
    ``RISING_SIZES`` sizes running (a real effect rarely hides behind five
    sizes of worsening criteria, and each size further costs as much as the
    last), or p; ``max_size`` asks for a fixed range instead.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..core import kernels_leaps, kernels_search
from ..defaults import SUBSET_EXACT_ROW_FITS, SUBSET_PROOF_MODELS, SUBSET_RISING_SIZES
from ..core import kernels_subsets as kernels

FIRST_PASS_MODELS = 1 << 18      # models the first Gaussian pass may visit (under a second)
N_PARTS = 16                     # tasks of a longer Gaussian search (a fixed rule)
TOP_DEPTH = 10                   # the shared top of the tree: nodes with more than p - 10 free terms
DEFAULT_GAUSSIAN_MODELS = SUBSET_PROOF_MODELS   # about ten minutes on one core for the hardest
REL_MARGIN = 1e-9                # a branch is cut only when worse by more than rounding
ABS_MARGIN = 1e-12               # ... relative to the total sum of squares
EXHAUSTIVE_ROW_FITS = SUBSET_EXACT_ROW_FITS  # binomial / Poisson: fits x rows on exhaustive sizes
RISING_SIZES = SUBSET_RISING_SIZES  # criteria above their lowest for this many sizes: stop
MAX_SWAP = 4                     # splicing exchanges up to this many terms at once
SPLICE_ROUNDS = 50
SPLICE_GAIN = 1e-9               # relative gain in log-likelihood an exchange must bring
FOUND_BY = ("exhaustive", "proved", "searched")
ALIAS_TOL = 1e-10            # residual variance share below which a term is aliased
NEWTON_TOL = 1e-8            # Newton decrement relative to |log-likelihood| + 1 (then one more step)
NEWTON_MAX_ITER = 50
SEARCHABLE = (kernels.GAUSSIAN, kernels.BINOMIAL, kernels.POISSON,
              kernels.NEGATIVE_BINOMIAL)   # family codes the kernels know


@dataclass(frozen=True, eq=False)
class SizeSearch:
    """The kept models of every size covered and how each size was found."""

    sizes: np.ndarray         # (m,) size of each kept model
    scores: np.ndarray        # (m,) ranking score (larger is better)
    members: np.ndarray       # (m, width) member indices, -1 padded
    coef: np.ndarray          # (m, width + 1) standardised coefficients (GLMs), else (m, 0)
    max_size: int             # sizes 0..max_size are covered
    found_by: tuple           # per size covered
    visited: np.ndarray       # (max_size + 1,) models fitted or evaluated per size
    not_converged: int
    notes: tuple


def slots(p, max_size, keep):
    """Start and capacity of the kept slots of each size."""
    cap = np.array([min(keep, math.comb(p, s)) for s in range(max_size + 1)], dtype=np.int64)
    start = np.concatenate([[0], np.cumsum(cap)[:-1]]).astype(np.int64)
    return start, cap


# ---- Gaussian: leaps and bounds ------------------------------------------------

@dataclass(frozen=True)
class LeapsTask:
    """One part of a Gaussian branch and bound."""

    max_size: int
    keep: int
    seed_limit: tuple         # RSS limits per size from real models already found
    split_free: int
    part: int
    n_parts: int
    budget: int


@dataclass(frozen=True, eq=False)
class LeapsResult:
    sizes: np.ndarray
    scores: np.ndarray
    members: np.ndarray
    visited: np.ndarray
    cut: np.ndarray
    open: np.ndarray
    done: int


def run_leaps(data, task: LeapsTask) -> LeapsResult:
    """Run one part of the branch and bound (module level, for workers)."""
    p = data.p
    start, cap = slots(p, task.max_size, task.keep)
    total = int(cap.sum())
    scores = np.full(total, np.nan)
    members = np.full((total, max(task.max_size, 1)), -1, dtype=np.int64)
    visited = np.zeros(task.max_size + 1, dtype=np.int64)
    cut = np.zeros(task.max_size + 1, dtype=np.bool_)
    still_open = np.zeros(task.max_size + 1, dtype=np.bool_)
    gram = data.gram
    done = kernels_leaps.leaps_search(
        gram, task.max_size, task.keep, ALIAS_TOL,
        REL_MARGIN, ABS_MARGIN * float(gram[-1, -1]), np.asarray(task.seed_limit, dtype=float),
        task.split_free, task.part, task.n_parts, task.budget, start, cap, scores, members,
        visited, cut, still_open)
    sizes = np.repeat(np.arange(task.max_size + 1), cap)
    used = ~np.isnan(scores)
    return LeapsResult(sizes[used], scores[used], members[used][:, :task.max_size], visited, cut,
                       still_open, int(done))


def _limits(result: LeapsResult, max_size, cap):
    """RSS of the keep-th best model of each size whose slots are full (else infinite)."""
    limit = np.full(max_size + 1, np.inf)
    for s in range(max_size + 1):
        mine = result.scores[result.sizes == s]
        if len(mine) and len(mine) == cap[s]:
            limit[s] = -mine.min()
    return limit


def least_squares_sizes(data, max_size, keep, budget, run=None):
    """Leaps and bounds over every size 0..max_size; see the module notes.

    Returns ``(sizes, scores, members, found_by, visited per size, models visited)``.
    """
    p = data.p
    first_pass = FIRST_PASS_MODELS
    _, cap = slots(p, max_size, keep)
    no_limit = tuple([np.inf] * (max_size + 1))
    first = run_leaps(data, LeapsTask(max_size, keep, no_limit, p, 0, 1, min(budget, first_pass)))
    results, done, visited = [first], first.done, first.visited.copy()
    if first.open.any() and budget > first.done:
        # a longer search: every part starts from the limits of the first pass
        seed = tuple(float(v) for v in _limits(first, max_size, cap))
        split = max(0, p - TOP_DEPTH)
        share = max(1, (budget - first.done) // N_PARTS)
        tasks = [LeapsTask(max_size, keep, seed, split, part, N_PARTS, share)
                 for part in range(N_PARTS)]
        results = (run or _here)(run_leaps, tasks, data)
        done += sum(r.done for r in results)
        visited += sum(r.visited for r in results)
    cut = np.logical_or.reduce([r.cut for r in results])
    still_open = np.logical_or.reduce([r.open for r in results])
    sizes = np.concatenate([r.sizes for r in results])
    scores = np.concatenate([r.scores for r in results])
    members = np.concatenate([r.members for r in results])
    found_by = tuple("searched" if still_open[s] else "proved" if cut[s] else "exhaustive"
                     for s in range(max_size + 1))
    return sizes, scores, members, found_by, visited, done


def _here(fn, tasks, shared):
    return [fn(shared, t) for t in tasks]


# ---- forward stepwise at every size ----------------------------------------------

def extra_parameters(family, count_variance) -> float:
    """Parameters every model of a search carries besides its terms and intercept.

    The Gaussian error variance when ``count_variance`` (Hurvich & Tsai 1989),
    and theta when the family holds one estimated from these data
    (``theta_estimated``: a run estimates it once from the model of every term
    and holds it for every subset, so each model's likelihood rests on one
    more fitted parameter; a theta the user gave costs nothing).
    """
    extra = 1.0 if count_variance and family.has_scale else 0.0
    return extra + (1.0 if getattr(family, "theta_estimated", False) else 0.0)


def criterion_penalties(data, max_size, count_variance):
    """(3, max_size + 1): the charge of AIC, AICc and BIC for models of 0..max_size terms."""
    k = np.arange(max_size + 1, dtype=float) + 1.0 + extra_parameters(data.family, count_variance)
    room = data.n - k - 1.0
    with np.errstate(divide="ignore", invalid="ignore"):
        aicc = np.where(room > 0, 2.0 * k + 2.0 * k * (k + 1.0) / room, np.inf)
    return np.vstack([2.0 * k, aicc, k * np.log(data.n)])


def least_squares_forward(gram, max_size, alias_tol):
    """Forward stepwise on the cross-products: (terms added in order, RSS of sizes 0..max_size).

    Each step adds the term that lowers the RSS most (ties: the term listed
    first); an aliased term lowers nothing.
    """
    M = np.array(gram, dtype=float)
    p = M.shape[0] - 1
    diag0 = np.diag(M)[:p].copy()
    inside = np.zeros(p, dtype=bool)
    added, rss = [], [float(M[p, p])]
    for _ in range(max_size):
        piv = np.diag(M)[:p]
        usable = (~inside) & (piv > alias_tol * diag0)
        gain = np.where(usable, M[:p, p] ** 2 / np.where(usable, piv, 1.0), 0.0)
        gain[inside] = -1.0
        j = int(np.argmax(gain))
        inside[j] = True
        added.append(j)
        if usable[j]:
            f = M[j] / M[j, j]
            M = M - np.outer(f, M[j])
        rss.append(max(float(M[p, p]), 0.0))
    return np.array(added, dtype=np.int64), np.array(rss)


@dataclass(frozen=True, eq=False)
class ForwardSteps:
    """Forward stepwise at every size 0..max_size reached."""

    added: np.ndarray         # (K,) the term added at each step
    objective: np.ndarray     # (K + 1,) kernel objective of each size (see kernels_subsets._rows)
    coef: np.ndarray          # (K + 1, K + 1) standardised coefficients in the order added (GLMs)
    fits: int
    not_converged: int

    @property
    def max_size(self) -> int:
        return len(self.added)


def forward_steps(data, max_size, *, window=0, count_variance=False, constant=0.0,
                  tol=NEWTON_TOL, max_iter=NEWTON_MAX_ITER, alias_tol=ALIAS_TOL,
                  stored_limit=1 << 22):
    """Forward stepwise to ``max_size`` terms (GLMs; Gaussian by Newton's method too).

    With ``window > 0`` the path stops once AIC, AICc and BIC have stayed
    above their lowest value for ``window`` sizes running.
    """
    penalty = criterion_penalties(data, max_size, count_variance)
    added = np.zeros(max(max_size, 1), dtype=np.int64)
    objective = np.zeros(max_size + 1)
    coef = np.zeros((max_size + 1, max_size + 1))
    reached, fits, bad = kernels_search.forward_path(
        data.Xt, data.y, data.w, data.offset, data.family.code, data.family.row_shape,
        data.intercept_start, max_size, tol, max_iter, alias_tol,
        (max_size + 2) * data.y.shape[0] <= stored_limit, constant, penalty, int(window), added,
        objective, coef)
    return ForwardSteps(added[:reached].copy(), objective[:reached + 1].copy(),
                        coef[:reached + 1, :reached + 1].copy(), int(fits), int(bad))


def rising(objective, constant, penalty, window) -> bool:
    """Have AIC, AICc and BIC all stayed above their lowest for ``window`` sizes at the end?"""
    last = len(objective) - 1
    return bool(kernels_search._rising(np.asarray(objective, dtype=float), float(constant),
                                       penalty[:, :last + 1], last, int(window)))


# ---- splicing from several starts -----------------------------------------------

class SpliceSlots:
    """The kept models of the searched sizes, filled by the splicing kernel."""

    def __init__(self, p, max_size, keep):
        self.start, self.cap = slots(p, max_size, keep)
        total = int(self.cap.sum())
        self.filled = np.zeros(max_size + 1, dtype=np.int64)
        self.worst = np.zeros(max_size + 1, dtype=np.int64)
        self.score = np.full(total, np.nan)
        self.members = np.full((total, max(max_size, 1)), -1, dtype=np.int64)
        self.coef = np.zeros((total, max_size + 1))
        self.max_size = max_size

    def kept(self, sizes):
        """(sizes, scores, members, coef) of the kept models of the given sizes."""
        size_of = np.repeat(np.arange(self.max_size + 1), self.cap)
        used = ~np.isnan(self.score) & np.isin(size_of, list(sizes))
        return size_of[used], self.score[used], self.members[used], self.coef[used]


def splice_sizes(data, sizes, starts, slots_, below=None, *, tol=NEWTON_TOL,
                 max_iter=NEWTON_MAX_ITER, alias_tol=ALIAS_TOL):
    """Splicing search of each size in ``sizes`` (increasing), then back down.

    ``starts[s]`` is a list of ``(members, beta)`` starting models of size s
    (standardised coefficients, intercept first, aligned with members; zeros
    are fine). Going up, each size also starts from the best of the size
    below plus its strongest missing term (``below`` gives ``(members, beta,
    objective)`` of the best model just under the first size); coming down,
    from the best of the size above less its weakest term. Returns ``(best
    per size as (members, beta, objective), fits, fits that did not
    converge, fits per size)``.
    """
    fam, shape = data.family.code, data.family.row_shape
    d = data
    best, per_size = {}, {}
    bad = 0

    def one(s, members, beta):
        nonlocal bad
        m, b, f, nf, nb = kernels_search.splice(
            d.Xt, d.y, d.w, d.offset, fam, shape, np.asarray(members, dtype=np.int64),
            np.asarray(beta, dtype=float), MAX_SWAP, SPLICE_GAIN, SPLICE_ROUNDS, tol, max_iter,
            alias_tol, slots_.start, slots_.cap, slots_.filled, slots_.worst, slots_.score,
            slots_.members, slots_.coef)
        per_size[s] = per_size.get(s, 0) + int(nf)
        bad += int(nb)
        if s not in best or f > best[s][2]:
            best[s] = (m.copy(), b.copy(), float(f))

    def grown(model, grow):
        return kernels_search.neighbour_start(d.Xt, d.y, d.w, d.offset, fam, shape,
                                              np.asarray(model[0], dtype=np.int64),
                                              np.asarray(model[1], dtype=float), grow)

    sizes = sorted(sizes)
    for s in sizes:
        for members, beta in starts.get(s, []):
            one(s, members, beta)
        under = best.get(s - 1, below if s - 1 >= 0 else None)
        if under is not None and len(under[0]) == s - 1:
            one(s, *grown(under, True))
    for s in reversed(sizes[:-1]):
        if s + 1 in best and s + 1 > 0:
            one(s, *grown(best[s + 1], False))
    return best, sum(per_size.values()), bad, per_size
