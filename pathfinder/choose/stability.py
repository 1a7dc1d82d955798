"""Stability selection: how often each term is chosen when the sites are halved.

A single penalised path picks one set of terms from one sample of sites. Had
the survey visited a different half of the same landscape, some of those terms
would not have been picked. Stability selection (Meinshausen & Buhlmann 2010,
JRSS-B 72:417-473) measures this directly: split the sites into two random
halves many times, fit the same path on every half, and record for each term
and each penalty the share of halves in which the term was selected. A term
that is selected in most halves is *stable*; noise terms are selected only now
and then.

Here the halves come in complementary pairs (Shah & Samworth 2013, JRSS-B
75:55-80): each draw splits the sites into two disjoint halves and both are
fitted. Halves can keep the share of presences (``strata``) and can keep
whole groups or spatial blocks together (``units``), so that neighbouring
sites never sit on both sides of a split.

The steps, and the choices made at each:

1. One penalty grid from the full-data path at ``mix``, shared by every half
   (or the grid given). An automatic grid is cut a few steps after the
   full-data path first holds more than ``2 q`` terms: the region used below
   never reaches that far in practice, and cutting it can only shrink the
   region, which keeps the error bound valid.
2. Each half is fitted on that grid (rows of the one design matrix, no copies)
   and a term counts as selected at a penalty when its coefficient is not
   zero. ``frequencies[k, j]`` is the share of the ``2 B`` halves that select
   term j at penalty k.
3. The *region* is the run of penalties, from the largest down, over which the
   mean number of terms selected so far (the union of the selections along the
   path in each half, averaged over halves) stays at or below ``q``. This is
   Meinshausen & Buhlmann's ``q_Lambda``, the expected size of the union of
   the selected sets over the region. The default ``q`` is
   ``ceil(sqrt(0.8 p))``: a moderate number of terms, enough to let the
   strong ones in, few enough to keep the bound small.
4. A term's selection frequency is its largest frequency over the region; it
   is stable when that reaches ``threshold`` (default 0.75), or the threshold
   that meets a target per-family error rate ``pfer`` through the bound.

The error bound (the expected number of terms wrongly called stable) is::

    pfer_bound = q^2 / ((2 * threshold - 1) * p),      threshold > 1/2

Meinshausen & Buhlmann (2010, Theorem 1) prove it for the noise terms when
their selection is exchangeable and the method does no worse than random
guessing. Shah & Samworth (2013, Theorem 1, with theta = q/p) prove the same
bound for complementary pairs with any number of pairs B and no such
assumptions, for the terms whose selection probability on a half is at most
q/p. This module reports that worst-case form; Shah & Samworth's tighter
bounds under their r-concavity assumptions are not used. p counts the
penalised terms; terms with a penalty weight of 0 are always kept and take
no part in the count. The bound is for single terms: the frequencies of
factors (any level selected) and of correlated clusters (any member
selected) are reported beside it to help reading, without a bound of their
own.

Each complementary pair is one task run through ``run(fn, tasks, problem)``
(see :mod:`pathfinder.parallel`). The pairs are drawn in this process from
the seed and the tasks carry their index arrays, so the result is the same
for a seed on every backend.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ..diagnostics.collinearity import correlation_clusters, correlation_matrix
from ..errors import InputError
from ..defaults import CORRELATION_THRESHOLD, FOLD_TOL, STABILITY_PAIRS, STABILITY_THRESHOLD
from .problem import Problem, run_here

SAMPLINGS = ("halves", "bootstrap")
# The automatic grid is cut this many steps after the full-data path first
# holds more than CUT_FACTOR * q terms.
CUT_FACTOR = 2
CUT_MARGIN = 5
# Largest number of (unit in one half, unit in the other) swaps examined when
# balancing halves made of whole groups or blocks.
MAX_SWAPS = 250_000


# --------------------------------------------------------------------------
# The error bound
# --------------------------------------------------------------------------


def pmb_bound(q: float, threshold: float, p: int) -> float:
    """Upper bound on the expected number of terms wrongly called stable.

    ``q^2 / ((2 * threshold - 1) * p)`` (Meinshausen & Buhlmann 2010,
    Theorem 1; for complementary pairs, Shah & Samworth 2013, Theorem 1),
    where q is the expected number of terms selected on a half over the
    region, ``threshold`` the frequency a term needs to be stable (above 1/2)
    and p the number of penalised terms.
    """
    q, threshold, p = float(q), float(threshold), _count(p, "the number of terms", 1)
    if not 0.5 < threshold <= 1.0:
        raise InputError(
            f"the stability threshold must lie above 0.5 and at most 1, got {threshold:g}; "
            f"the error bound needs a term to be selected in more than half of the halves")
    if not (np.isfinite(q) and q >= 0):
        raise InputError(f"the number of terms selected (q) must be 0 or more, got {q:g}")
    return q * q / ((2.0 * threshold - 1.0) * p)


def threshold_for_pfer(q: float, pfer: float, p: int) -> float:
    """The stability threshold at which the bound equals ``pfer``.

    Inverts :func:`pmb_bound`: ``threshold = (1 + q^2 / (p * pfer)) / 2``,
    kept within (1/2, 1]. When the result would exceed 1 the target cannot
    be met with this q; 1 is returned and the bound at 1 (``q^2 / p``) is
    larger than ``pfer``: choose a smaller q to meet the target.
    """
    q, pfer, p = float(q), float(pfer), _count(p, "the number of terms", 1)
    if not (np.isfinite(pfer) and pfer > 0):
        raise InputError(
            f"the target number of false selections (pfer) must be a positive number, got {pfer:g}")
    if not (np.isfinite(q) and q >= 0):
        raise InputError(f"the number of terms selected (q) must be 0 or more, got {q:g}")
    threshold = 0.5 * (1.0 + q * q / (p * pfer))
    return float(min(max(threshold, np.nextafter(0.5, 1.0)), 1.0))


def default_q(p: int) -> int:
    """``ceil(sqrt(0.8 p))``, at least 1 and at most p: a moderate number of terms."""
    p = _count(p, "the number of terms", 1)
    return int(min(p, max(1, math.ceil(math.sqrt(0.8 * p) - 1e-12))))


# --------------------------------------------------------------------------
# Subsamples
# --------------------------------------------------------------------------


def complementary_pairs(n, n_pairs, *, seed, strata=None, units=None) -> list[tuple[np.ndarray, np.ndarray]]:
    """``n_pairs`` random splits of the sites into two disjoint halves.

    Each half is a sorted array of row positions. Without ``units`` each half
    holds ``floor(n / 2)`` sites (with n odd one site sits out of that pair).
    ``strata`` (a class per site, such as presence 1 / absence 0) spreads
    every class evenly: each half holds half of each class to within one
    site. ``units`` (a group or spatial-block label per site) keeps each unit
    whole in one half; units are dealt in random order to the half that stays
    closest to an even split (of sites, or of every class when ``strata`` is
    given), then single moves and swaps of units that even it further are
    made, so the halves are as balanced as whole units allow in practice.
    """
    n = _count(n, "the number of sites", 2)
    n_pairs = _count(n_pairs, "the number of pairs", 1)
    rng = _generator(seed)
    classes = None if strata is None else _labels(strata, n, "the strata (classes of sites)")
    if units is None:
        return [_split_sites(n, rng, classes) for _ in range(n_pairs)]
    codes = _labels(units, n, "the groups or blocks")
    n_units = int(codes.max()) + 1
    if n_units < 2:
        raise InputError(
            "all sites fall in one group or block, so they cannot be split into halves; "
            "give smaller blocks or a group column with two or more groups")
    profile = (np.bincount(codes, minlength=n_units)[:, None].astype(float) if classes is None
               else _counts_by_class(codes, classes, n_units))
    order = np.argsort(codes, kind="stable")
    members = np.split(order, np.cumsum(np.bincount(codes, minlength=n_units))[:-1])
    pairs = []
    for _ in range(n_pairs):
        side = _split_units(profile, rng)
        first = np.sort(np.concatenate([members[u] for u in np.flatnonzero(side == 0)]))
        second = np.sort(np.concatenate([members[u] for u in np.flatnonzero(side == 1)]))
        pairs.append((first, second))
    return pairs


def bootstrap_samples(n, n_samples, *, seed, units=None) -> list[np.ndarray]:
    """``n_samples`` bootstrap samples of the sites (row positions, with repeats, sorted).

    Without ``units`` each sample draws n sites with replacement. With
    ``units`` whole units are drawn with replacement, as many as there are
    units, and all their sites enter the sample (a cluster bootstrap), so the
    sample size varies.
    """
    n = _count(n, "the number of sites", 2)
    n_samples = _count(n_samples, "the number of bootstrap samples", 1)
    rng = _generator(seed)
    if units is None:
        return [np.sort(rng.integers(0, n, size=n)) for _ in range(n_samples)]
    codes = _labels(units, n, "the groups or blocks")
    n_units = int(codes.max()) + 1
    order = np.argsort(codes, kind="stable")
    members = np.split(order, np.cumsum(np.bincount(codes, minlength=n_units))[:-1])
    return [np.sort(np.concatenate([members[u] for u in rng.integers(0, n_units, size=n_units)]))
            for _ in range(n_samples)]


def _split_sites(n, rng, classes):
    """Two halves of floor(n/2) sites; classes dealt alternately when given."""
    if classes is None:
        order = rng.permutation(n)
    else:
        # Sites in class order (the classes themselves in random order),
        # shuffled within each class; dealing alternately then halves each class.
        class_rank = rng.permutation(int(classes.max()) + 1)
        order = np.lexsort((rng.permutation(n), class_rank[classes]))
    half = n // 2
    first, second = order[0:2 * half:2], order[1:2 * half:2]
    if rng.random() < 0.5:
        first, second = second, first
    return np.sort(first), np.sort(second)


def _counts_by_class(codes, classes, n_units):
    n_classes = int(classes.max()) + 1
    table = np.zeros((n_units, n_classes))
    np.add.at(table, (codes, classes), 1.0)
    return table


def _split_units(profile, rng) -> np.ndarray:
    """Half (0 or 1) of each unit; ``profile[u, c]`` = sites of class c in unit u.

    Imbalance is ``sum_c (d_c / total_c)^2`` with ``d`` = first half minus
    second half, column by column.
    """
    n_units = profile.shape[0]
    total = profile.sum(axis=0)
    scale = 1.0 / np.where(total > 0, total, 1.0)

    def cost(d):
        return ((d * scale) ** 2).sum(axis=-1)

    side = np.empty(n_units, dtype=np.int64)
    d = np.zeros(profile.shape[1])
    for u in rng.permutation(n_units):
        to_first, to_second = cost(d + profile[u]), cost(d - profile[u])
        s = (0 if to_first < to_second else 1) if to_first != to_second else int(rng.integers(2))
        side[u] = s
        d += profile[u] if s == 0 else -profile[u]
    # Even out what dealing left: single moves, then swaps, while they help.
    for _ in range(4 * n_units):
        now = cost(d)
        if now == 0:
            break
        sign = np.where(side == 0, -2.0, 2.0)[:, None]        # moving u flips its side
        moved = cost(d + sign * profile)
        best_move = int(np.argmin(moved))
        best, change = moved[best_move], ("move", best_move)
        a, b = np.flatnonzero(side == 0), np.flatnonzero(side == 1)
        if 0 < a.size * b.size <= MAX_SWAPS:      # a swap needs a unit on each side
            swapped = cost(d - 2 * profile[a][:, None, :] + 2 * profile[b][None, :, :])
            i, j = np.unravel_index(int(np.argmin(swapped)), swapped.shape)
            if swapped[i, j] < best:
                best, change = swapped[i, j], ("swap", (a[i], b[j]))
        if best >= now - 1e-15:
            break
        units = [change[1]] if change[0] == "move" else list(change[1])
        for u in units:
            d += (-2.0 if side[u] == 0 else 2.0) * profile[u]
            side[u] = 1 - side[u]
    # Both halves must hold sites.
    if not (side == 0).any() or not (side == 1).any():
        side[int(rng.integers(n_units))] ^= 1
    if rng.random() < 0.5:
        side = 1 - side
    return side


# --------------------------------------------------------------------------
# One task: both halves of one pair
# --------------------------------------------------------------------------


@dataclass(frozen=True)
class PackedRows:
    """Distinct row positions held as a bit mask: a task for a half of a
    million sites travels as 125 kB instead of 4 MB of indices."""

    bits: np.ndarray
    n: int

    @classmethod
    def of(cls, rows, n: int) -> "PackedRows":
        mask = np.zeros(n, dtype=bool)
        mask[rows] = True
        return cls(np.packbits(mask), n)

    def positions(self) -> np.ndarray:
        """The rows, in increasing order."""
        return np.flatnonzero(np.unpackbits(self.bits, count=self.n))


@dataclass(frozen=True)
class PairTask:
    """Both subsamples of one pair, fitted on the shared grid."""

    pair: int
    samples: tuple          # two PackedRows (halves) or two arrays of row positions (bootstrap)
    penalties: np.ndarray
    mix: float
    tol: float = FOLD_TOL


@dataclass(frozen=True, eq=False)
class PairSelection:
    """Which terms each subsample selected at each penalty: (2, K, p) booleans."""

    pair: int
    selected: np.ndarray
    n_fitted: tuple         # penalties each fit reached before stopping
    warnings: tuple = ()    # messages of fit warnings (as text, so they survive any backend)


def run_pair(problem: Problem, task: PairTask) -> PairSelection:
    """Fit the two subsamples of one pair and record the selected terms.

    A path that stops early (deviance explained above 0.999) repeats its last
    selection for the remaining penalties.
    """
    K, p = len(task.penalties), problem.X.shape[1]
    selected = np.zeros((len(task.samples), K, p), dtype=bool)
    fitted, messages = [], []
    for h, sample in enumerate(task.samples):
        rows = sample.positions() if isinstance(sample, PackedRows) else sample
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            try:
                fit = problem.fit(rows=rows, mix=task.mix, penalties=task.penalties, tol=task.tol)
            except InputError:
                raise
            except ValueError as error:
                raise InputError(
                    f"subsample {2 * task.pair + h + 1} ({len(rows)} sites) could not be fitted: "
                    f"{error}; with a rare presence or absence, keep the classes balanced "
                    f"in every half (strata)") from None
        messages.extend(str(w.message) for w in caught)
        chosen = fit.coef != 0
        reached = chosen.shape[0]
        selected[h, :reached] = chosen
        selected[h, reached:] = chosen[-1]
        fitted.append(reached)
    return PairSelection(task.pair, selected, tuple(fitted), tuple(dict.fromkeys(messages)))


# --------------------------------------------------------------------------
# The result
# --------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class StabilityResult:
    """Selection frequencies along the path, the stable terms and the error bound.

    ``frequencies[k, j]`` is the share of subsamples selecting term j at
    ``penalties[k]``; ``max_frequency[j]`` its largest value over the region
    (the first ``region_steps`` penalties). ``clusters`` numbers the families
    of correlated terms (1, 2, ...) and ``cluster_frequency[j]`` is the
    largest share over the region of subsamples selecting any member of term
    j's family; ``group_frequency`` does the same for each group of terms
    (a factor's levels). ``selected_so_far`` is the mean over subsamples of
    the number of penalised terms selected anywhere from the first penalty
    to step k. ``pfer_bound`` is the bound with the ``q`` and ``threshold``
    used; ``error_control`` says in words what it promises.
    """

    penalties: np.ndarray
    names: tuple
    frequencies: np.ndarray
    max_frequency: np.ndarray
    stable: np.ndarray
    q: int
    threshold: float
    pfer_bound: float
    clusters: np.ndarray
    cluster_frequency: np.ndarray
    group_frequency: dict
    n_pairs: int
    groups: tuple = ()
    region_steps: int = 0
    selected_so_far: np.ndarray = field(default_factory=lambda: np.empty(0))
    p_counted: int = 0
    mix: float = 1.0
    sampling: str = "halves"
    correlation_threshold: float = CORRELATION_THRESHOLD
    error_control: str = ""
    notes: tuple = ()

    @property
    def stable_terms(self) -> tuple:
        """Names of the stable terms, most often selected first."""
        table = self.table()
        return tuple(table.term[table.stable])

    def table(self) -> pd.DataFrame:
        """One row per term, most often selected first (ties in design order)."""
        frame = pd.DataFrame({
            "term": list(self.names),
            "selection_frequency": self.max_frequency,
            "stable": self.stable.astype(bool),
            "cluster": self.clusters.astype(np.int64),
            "cluster_frequency": self.cluster_frequency,
            "group": list(self.groups),
            "group_frequency": [self.group_frequency[g] for g in self.groups],
        })
        return frame.sort_values("selection_frequency", ascending=False,
                                 kind="stable").reset_index(drop=True)

    def path_table(self) -> pd.DataFrame:
        """Long table: one row per (penalty, term) with its selection frequency."""
        K, p = self.frequencies.shape
        return pd.DataFrame({
            "step": np.repeat(np.arange(K), p),
            "penalty": np.repeat(self.penalties, p),
            "term": np.tile(np.asarray(self.names, dtype=object), K),
            "frequency": self.frequencies.ravel(),
            "in_region": np.repeat(np.arange(K) < self.region_steps, p),
        })


# --------------------------------------------------------------------------
# The procedure
# --------------------------------------------------------------------------


def stability_selection(problem: Problem, *, mix=1.0, n_pairs=STABILITY_PAIRS, threshold=None, pfer=None,
                        q=None, strata=None, units=None, penalties=None, term_groups=None,
                        correlation_threshold=CORRELATION_THRESHOLD, sampling="halves",
                        decades=None, per_decade=None, n_penalties=None, seed, run=None,
                        tol=FOLD_TOL) -> StabilityResult:
    """Stability selection with complementary pairs of halves.

    Parameters
    ----------
    problem : the data of the run (:class:`pathfinder.choose.problem.Problem`).
    mix : 1 the lasso, below 1 the elastic net.
    n_pairs : B, the number of complementary pairs (2 B fits).
    threshold : selection frequency a term needs to be stable, above 0.5
        (default ``STABILITY_THRESHOLD``, 0.75); or give ``pfer`` instead.
    pfer : target expected number of terms wrongly called stable; the
        threshold is then derived from the bound (:func:`threshold_for_pfer`).
    q : the number of terms a half may select on average over the region
        (default ``ceil(sqrt(0.8 p))``).
    strata : a class per site to keep balanced in every half (presence 0/1).
    units : a group or spatial-block label per site; units are never split.
    penalties : the grid (default: from the full-data path at ``mix``).
    decades, per_decade : depth and density of that automatic grid (see ``fit_path``).
    term_groups : a group name per term (a factor's levels share one);
        a group counts as selected when any of its terms is.
    correlation_threshold : |r| at or above which terms join one cluster.
    sampling : "halves" (complementary pairs) or "bootstrap" (two bootstrap
        samples per task; the bound is then only a guide, as it is proved
        for halves).
    seed : whole number or numpy Generator; the same seed gives the same result.
    run : ``run(fn, tasks, shared)`` that executes the tasks (default: here).
    tol : convergence of the subsample fits.
    """
    names = tuple(problem.names)
    p = problem.X.shape[1]
    n = problem.n
    mix = _mix(mix)
    n_pairs = _count(n_pairs, "the number of pairs", 1)
    if sampling not in SAMPLINGS:
        raise InputError(f"sampling must be one of {', '.join(SAMPLINGS)}, not {sampling!r}")
    counted = _penalised(problem, p)
    p_counted = int(counted.sum())
    if p_counted == 0:
        raise InputError("every term has a penalty weight of 0, so there is nothing to select")
    q = default_q(p_counted) if q is None else _count(q, "q (the number of terms a half may select)", 1)
    if q > p_counted:
        raise InputError(f"q = {q} is more than the {p_counted} terms that can be selected; "
                         f"give q of at most {p_counted}")
    notes = []
    if pfer is not None:
        if threshold is not None:
            raise InputError("both a stability threshold and a target pfer were given; "
                             "give one of the two (the threshold follows from the pfer)")
        threshold = threshold_for_pfer(q, pfer, p_counted)
        if pmb_bound(q, threshold, p_counted) > float(pfer) * (1 + 1e-9):
            notes.append(
                f"a target of {float(pfer):g} false selections cannot be met with q = {q} and "
                f"{p_counted} terms (even a threshold of 1 allows {q * q / p_counted:.3g}); "
                f"give a smaller q")
    threshold = STABILITY_THRESHOLD if threshold is None else float(threshold)
    pmb_bound(q, threshold, p_counted)  # checks the threshold with one clear line
    groups = _term_groups(term_groups, names)

    # 1. The shared grid.
    full = problem.fit(mix=mix, penalties=penalties, decades=decades, per_decade=per_decade,
                       n_penalties=n_penalties)
    grid = np.asarray(full.penalties, dtype=float)
    if penalties is None:
        grid, cut = _cut_grid(grid, full.coef[:, counted] != 0, q)
    else:
        cut = False

    # 2. The subsamples, drawn here from the seed; one task per pair.
    if sampling == "halves":
        drawn = [tuple(PackedRows.of(half, n) for half in pair)
                 for pair in complementary_pairs(n, n_pairs, seed=seed, strata=strata, units=units)]
    else:
        single = bootstrap_samples(n, 2 * n_pairs, seed=seed, units=units)
        drawn = [(single[2 * b], single[2 * b + 1]) for b in range(n_pairs)]
    tasks = [PairTask(b, pair, grid, mix, tol) for b, pair in enumerate(drawn)]
    problem.cross_products  # computed once here, shipped with the problem to workers
    results = (run or run_here)(run_pair, tasks, problem)
    selected = np.concatenate([r.selected for r in results], axis=0)   # (2B, K, p)

    # 3. Frequencies, the region and the stable set.
    frequencies = selected.mean(axis=0)
    so_far = np.logical_or.accumulate(selected[:, :, counted], axis=1).sum(axis=2).mean(axis=0)
    within = np.flatnonzero(so_far <= q + 1e-12)
    region_steps = int(within[-1]) + 1 if within.size else 1
    q_used = float(max(q, so_far[region_steps - 1]))
    if not within.size:
        notes.append(
            f"the halves already select {so_far[0]:.3g} terms on average at the largest penalty, "
            f"more than q = {q}; only that penalty is used and the bound is computed with "
            f"{q_used:.3g}")
    if cut and region_steps == len(grid):
        notes.append("the region reached the end of the shortened penalty grid; a longer grid "
                     "could let more terms reach the threshold")
    region = slice(0, region_steps)
    max_frequency = frequencies[region].max(axis=0)
    stable = (max_frequency >= threshold - 1e-12) & counted
    bound = pmb_bound(q_used, threshold, p_counted)

    # Families: correlated clusters and groups of terms (any member selected).
    clusters = correlation_clusters(correlation_matrix(problem.X, problem.weights),
                                    correlation_threshold)
    cluster_frequency = _any_member_frequency(selected, clusters, region)
    group_codes, group_names = pd.factorize(pd.Series(groups, dtype=object))
    by_group = _any_member_frequency(selected, group_codes, region)
    group_frequency = {str(g): float(by_group[np.flatnonzero(group_codes == i)[0]])
                       for i, g in enumerate(group_names)}

    if not counted.all():
        notes.append(f"{p - p_counted} term(s) with a penalty weight of 0 are always kept; "
                     "they are not counted in the error bound and are not called stable")
    notes.extend(_fit_notes(results, len(grid), 2 * n_pairs))
    if sampling == "bootstrap":
        notes.append("bootstrap samples were used; the error bound is proved for halves and "
                     "is only a guide here")
    return StabilityResult(
        penalties=grid, names=names, frequencies=frequencies, max_frequency=max_frequency,
        stable=stable, q=int(q), threshold=float(threshold), pfer_bound=float(bound),
        clusters=clusters, cluster_frequency=cluster_frequency, group_frequency=group_frequency,
        n_pairs=n_pairs, groups=tuple(groups), region_steps=region_steps, selected_so_far=so_far,
        p_counted=p_counted, mix=mix, sampling=sampling,
        correlation_threshold=float(correlation_threshold),
        error_control=_error_control(bound, q_used, threshold, p_counted, n_pairs, sampling),
        notes=tuple(dict.fromkeys(notes)),
    )


def _cut_grid(grid, selected_full, q):
    """The grid up to CUT_MARGIN steps after the full path first holds > CUT_FACTOR * q terms."""
    over = np.flatnonzero(selected_full.sum(axis=1) > CUT_FACTOR * q)
    if not over.size or over[0] + CUT_MARGIN + 1 >= len(grid):
        return grid, False
    return grid[:over[0] + CUT_MARGIN + 1], True


def _any_member_frequency(selected, codes, region) -> np.ndarray:
    """Per term: the largest share over the region of subsamples selecting any term of its family."""
    out = np.empty(selected.shape[2])
    for code in np.unique(codes):
        members = np.flatnonzero(codes == code)
        any_selected = selected[:, region][:, :, members].any(axis=2).mean(axis=0)
        out[members] = any_selected.max()
    return out


def _error_control(bound, q, threshold, p, n_pairs, sampling) -> str:
    text = (f"at most {bound:.3g} terms are expected to be called stable wrongly "
            f"(q = {q:.3g} of {p} terms selected per half, threshold {threshold:.3g}, "
            f"{n_pairs} pairs of halves): the bound q^2 / ((2 threshold - 1) p) of Meinshausen & "
            f"Buhlmann (2010, Theorem 1), which Shah & Samworth (2013, Theorem 1) prove for "
            f"complementary pairs without further assumptions, counting the terms selected on "
            f"a half with probability at most q/p")
    if sampling == "bootstrap":
        text += "; with bootstrap samples it is a guide, not a guarantee"
    return text


def _fit_notes(results, K, n_fits) -> list:
    short = sum(1 for r in results for reached in r.n_fitted if reached < K)
    notes = []
    if short:
        notes.append(f"{short} of {n_fits} subsample paths stopped before the end of the grid "
                     "(deviance explained above 0.999); their last selection stands for the rest")
    messages = dict.fromkeys(m for r in results for m in r.warnings)
    if messages:
        notes.append(f"subsample fits warned: {'; '.join(list(messages)[:3])}"
                     + (" (and more)" if len(messages) > 3 else ""))
    return notes


# --------------------------------------------------------------------------
# Checking input (one clear line per problem)
# --------------------------------------------------------------------------


def _generator(seed) -> np.random.Generator:
    if seed is None or isinstance(seed, bool):
        raise InputError("stability selection needs a seed so that the same halves can be drawn "
                         "again; pass seed= a whole number (for example seed=1)")
    if isinstance(seed, np.random.Generator):
        return seed
    if isinstance(seed, (np.random.SeedSequence, int, np.integer)):
        return np.random.default_rng(seed)
    raise InputError(f"seed must be a whole number or a numpy Generator, not {type(seed).__name__}")


def _count(value, what: str, least: int) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < least:
        raise InputError(f"{what} must be a whole number of {least} or more, not {value!r}")
    return int(value)


def _mix(mix) -> float:
    try:
        value = float(mix)
    except (TypeError, ValueError):
        value = np.nan
    if not 0.0 <= value <= 1.0:
        raise InputError(f"mix must lie between 0 (ridge) and 1 (lasso), got {mix!r}")
    if value == 0.0:
        raise InputError("stability selection needs a penalty that sets terms to zero; "
                         "ridge (mix 0) keeps every term, so give a mix above 0")
    return value


def _labels(values, n: int, what: str) -> np.ndarray:
    """Integer codes 0..m-1 of one label per site."""
    array = np.asarray(values)
    if array.ndim != 1 or array.shape[0] != n:
        raise InputError(f"{what} must be one value per site ({n} values), not shape {array.shape}")
    codes, _ = pd.factorize(pd.Series(array), sort=True)
    missing = np.flatnonzero(codes < 0)
    if missing.size:
        raise InputError(f"{what} have {missing.size} missing value(s) (first at row {missing[0]}); "
                         "fill them in or drop those sites")
    return codes.astype(np.int64)


def _penalised(problem: Problem, p: int) -> np.ndarray:
    if problem.term_weights is None:
        return np.ones(p, dtype=bool)
    return np.asarray(problem.term_weights, dtype=float) > 0


def _term_groups(term_groups, names) -> list:
    """A group name per term; a term without one is its own group."""
    if term_groups is None:
        return list(names)
    given = list(term_groups)
    if len(given) != len(names):
        raise InputError(f"there are {len(given)} group names for {len(names)} terms; "
                         "give one group name per term")
    return [name if g is None or str(g) == "" else str(g) for g, name in zip(given, names)]
