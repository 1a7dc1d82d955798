"""Which sites test a model in each round of cross-validation.

Survey sites are clustered in space and are often visited region by region or
year by year. When neighbouring sites land in both the training and the test
part of a fold, a model can score well by remembering the neighbourhood rather
than the habitat, and cross-validation overstates its skill (Roberts et al.
2017, Ecography 40:913-929). This module makes the fold assignment that every
method of one run reuses, so that all of them are judged on the same sites:

* ``random``          sites dealt to folds at random, fold sizes within one site;
* ``stratified``      as random, but each class of the response (presence and
                      absence) is spread evenly over the folds;
* ``grouped``         whole groups (region, survey year, observer) go to one fold;
* ``spatial blocks``  sites are binned into square blocks of a given size and
                      whole blocks go to one fold;
* ``given``           a fold column supplied by the user.

Grouped and spatial-block folds share one balancing rule: groups are taken
largest first and each goes to the fold that is currently smallest (when the
response is given, the fold whose share of sites and of presences stays
closest to an even split). Ties are broken by the seeded generator.

A small correlogram (Moran's I by distance class) estimates how far apart two
sites must be before their responses stop looking alike, which tells whether
a block size is large enough.

Every function takes its random state as an explicit seed or numpy Generator;
the same seed always gives the same folds.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Callable

import numpy as np
import pandas as pd

from ..core.families import get_family
from ..errors import InputError

SCHEMES = ("random", "stratified", "grouped", "spatial blocks", "given")

# A fold with fewer sites than this gets a note: its error estimate is noisy.
SMALL_FOLD = 5
# Moran's I below this counts as "no longer alike" in the correlogram.
ALIKE_THRESHOLD = 0.1
# Distance classes holding fewer pairs than this are left out of the range.
MIN_PAIRS_PER_CLASS = 10


# --------------------------------------------------------------------------
# The result
# --------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class Folds:
    """One fold assignment (or several, for repeated cross-validation).

    ``fold[i]`` is the fold (0 .. n_folds - 1) in which site ``i`` is a test
    site. For repeated cross-validation ``repeats[r]`` is the assignment of
    repeat ``r`` and ``fold`` equals ``repeats[0]``. ``blocks`` holds the block
    number of each site (spatial blocks) or the group code (grouped).
    ``notes`` are plain sentences a user should read before trusting the
    cross-validated skill.
    """

    fold: np.ndarray
    n_folds: int
    scheme: str
    repeats: np.ndarray | None = None
    blocks: np.ndarray | None = None
    notes: tuple[str, ...] = ()

    def __post_init__(self):
        fold = _frozen_ints(self.fold)
        if fold.ndim != 1:
            raise ValueError("fold must be one-dimensional")
        if self.scheme not in SCHEMES:
            raise ValueError(f"scheme must be one of {SCHEMES}, not {self.scheme!r}")
        k = int(self.n_folds)
        _check_assignment(fold, k)
        repeats = None
        if self.repeats is not None:
            repeats = _frozen_ints(self.repeats)
            if repeats.ndim != 2 or repeats.shape[1] != fold.size or repeats.shape[0] < 1:
                raise ValueError("repeats must have shape (number of repeats, number of sites)")
            for row in repeats:
                _check_assignment(row, k)
            if not np.array_equal(repeats[0], fold):
                raise ValueError("fold must equal the first repeat")
        blocks = None
        if self.blocks is not None:
            blocks = _frozen_ints(self.blocks)
            if blocks.shape != fold.shape:
                raise ValueError("blocks must have one entry per site")
        object.__setattr__(self, "fold", fold)
        object.__setattr__(self, "n_folds", k)
        object.__setattr__(self, "repeats", repeats)
        object.__setattr__(self, "blocks", blocks)
        object.__setattr__(self, "notes", tuple(self.notes))

    @property
    def n_sites(self) -> int:
        return int(self.fold.size)

    @property
    def n_repeats(self) -> int:
        return 1 if self.repeats is None else int(self.repeats.shape[0])

    def assignment(self, repeat: int = 0) -> np.ndarray:
        """The fold of every site in one repeat (0 when not repeated)."""
        if not 0 <= repeat < self.n_repeats:
            raise InputError(
                f"repeat {repeat} does not exist; these folds have {self.n_repeats} "
                f"repeat(s), numbered 0 to {self.n_repeats - 1}"
            )
        return self.fold if self.repeats is None else self.repeats[repeat]

    def splits(self, repeat: int = 0) -> list[tuple[np.ndarray, np.ndarray]]:
        """``(train_rows, test_rows)`` for each fold in turn, as row positions."""
        fold = self.assignment(repeat)
        return [
            (np.flatnonzero(fold != j), np.flatnonzero(fold == j)) for j in range(self.n_folds)
        ]

    def to_frame(self) -> pd.DataFrame:
        """The table saved as folds.csv: ``row`` (0-based position) and ``fold``.

        Repeated folds are stacked repeat after repeat, with a ``repeat``
        column (0-based) beside them.
        """
        n = self.n_sites
        if self.repeats is None:
            return pd.DataFrame({"row": np.arange(n), "fold": self.fold.astype(np.int64)})
        r = self.n_repeats
        return pd.DataFrame(
            {
                "row": np.tile(np.arange(n), r),
                "fold": self.repeats.reshape(-1).astype(np.int64),
                "repeat": np.repeat(np.arange(r), n),
            }
        )


def _frozen_ints(values) -> np.ndarray:
    array = np.array(values, dtype=np.int64, copy=True)
    array.flags.writeable = False
    return array


def _check_assignment(fold: np.ndarray, k: int) -> None:
    if k < 2:
        raise ValueError("a fold assignment needs at least two folds")
    if fold.size and (fold.min() < 0 or fold.max() >= k):
        raise ValueError(f"fold numbers must lie in 0..{k - 1}")
    if np.any(np.bincount(fold, minlength=k) == 0):
        raise ValueError("every fold must hold at least one site")


# --------------------------------------------------------------------------
# Checking input (one clear line per problem)
# --------------------------------------------------------------------------


def _generator(seed) -> np.random.Generator:
    """The explicit random state: a numpy Generator, a SeedSequence or a whole number."""
    if seed is None or isinstance(seed, bool):
        raise InputError(
            "folds need a seed so that the same folds can be made again; "
            "pass seed= a whole number (for example seed=1)"
        )
    if isinstance(seed, np.random.Generator):
        return seed
    if isinstance(seed, (np.random.SeedSequence, int, np.integer)):
        return np.random.default_rng(seed)
    raise InputError(
        f"seed must be a whole number or a numpy Generator, not {type(seed).__name__}"
    )


def _whole(value, what: str, least: int) -> int:
    """A whole number of at least ``least``, or one clear line saying what is wrong."""
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < least:
        raise InputError(f"{what} must be a whole number of {least} or more, not {value!r}")
    return int(value)


def _check_k(k, n: int | None) -> int:
    """A fold count of at least 2 and (when ``n`` is given) at most ``n``."""
    if isinstance(k, bool) or not isinstance(k, (int, np.integer)):
        raise InputError(f"the number of folds must be a whole number, not {k!r}")
    k = int(k)
    if k < 2:
        raise InputError(f"cross-validation needs at least 2 folds, not {k}; use 2 or more")
    if n is not None and k > n:
        raise InputError(
            f"{k} folds need at least {k} sites but there are {n}; use at most {n} folds"
        )
    return k


def _one_column(values, what: str) -> np.ndarray:
    array = np.asarray(values)
    if array.ndim != 1:
        raise InputError(
            f"{what} must be one column (one value per site), not shape {array.shape}"
        )
    return array


def _check_length(array: np.ndarray, n: int, what: str) -> None:
    if array.shape[0] != n:
        raise InputError(
            f"{what} has {array.shape[0]} values but there are {n} sites; give one value per site"
        )


def _numbers(values, what: str) -> np.ndarray:
    array = _one_column(values, what)
    try:
        array = array.astype(float)
    except (TypeError, ValueError):
        raise InputError(f"{what} must be numbers; check that column for text") from None
    bad = np.flatnonzero(~np.isfinite(array))
    if bad.size:
        raise InputError(
            f"{what} has {bad.size} missing or infinite value(s) (first at row {bad[0]}); "
            "fill them in or drop those sites"
        )
    return array


def _codes(labels, what: str) -> tuple[np.ndarray, np.ndarray]:
    """Integer codes 0..m-1 for labels, in sorted label order, and the labels."""
    array = _one_column(labels, what)
    try:
        codes, uniques = pd.factorize(array, sort=True)
    except TypeError:  # labels of mixed kinds (numbers and text) cannot be sorted
        codes, uniques = pd.factorize(array.astype(str), sort=True)
    missing = np.flatnonzero(codes < 0)
    if missing.size:
        raise InputError(
            f"{what} has {missing.size} missing value(s) (first at row {missing[0]}); "
            "fill them in or drop those sites"
        )
    return codes.astype(np.int64), np.asarray(uniques)


def _coordinates(coords, what: str = "the coordinates") -> np.ndarray:
    array = np.asarray(coords)
    if array.ndim != 2 or array.shape[1] != 2:
        raise InputError(
            f"{what} must be two columns (x and y, one row per site), not shape {array.shape}"
        )
    try:
        array = array.astype(float)
    except (TypeError, ValueError):
        raise InputError(f"{what} must be numbers; check the x and y columns for text") from None
    bad = np.flatnonzero(~np.isfinite(array).all(axis=1))
    if bad.size:
        raise InputError(
            f"{what} have {bad.size} missing or infinite value(s) (first at row {bad[0]}); "
            "fill them in or drop those sites"
        )
    return array


def _positive(value, what: str) -> float:
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{what} must be a positive number, not {value!r}") from None
    if not np.isfinite(number) or number <= 0:
        raise InputError(f"{what} must be a positive number, not {value!r}")
    return number


def _presence(y, n: int) -> np.ndarray:
    """Presence (y > 0) of each site from a presence/absence or proportion response."""
    y = _numbers(y, "the response")
    _check_length(y, n, "the response")
    if y.min() < 0:
        raise InputError(
            "the response has negative values, but presences are counted as values above 0; "
            "give presence as 1 and absence as 0"
        )
    return y > 0


# --------------------------------------------------------------------------
# Notes in plain words
# --------------------------------------------------------------------------


def _listing(numbers) -> str:
    words = [str(int(x)) for x in numbers]
    if len(words) == 1:
        return words[0]
    return ", ".join(words[:-1]) + " and " + words[-1]


def _folds_word(folds) -> str:
    return ("fold " if len(folds) == 1 else "folds ") + _listing(folds)


def fold_notes(fold, n_folds: int, y=None) -> tuple[str, ...]:
    """Plain sentences about folds whose skill figure cannot be trusted.

    A fold with fewer than five sites gives a noisy error; with a
    presence/absence response (``y``, presence = value above 0), a fold
    without presences or without absences cannot show how well that class is
    predicted.
    """
    fold = np.asarray(fold, dtype=np.int64)
    sizes = np.bincount(fold, minlength=n_folds)
    notes = []
    small = np.flatnonzero(sizes < SMALL_FOLD)
    if small.size:
        held = _listing(sizes[small])
        notes.append(
            f"{_folds_word(small)} {'holds' if small.size == 1 else 'hold'} only {held} "
            f"site{'s' if small.size > 1 or sizes[small[0]] != 1 else ''}; skill measured on "
            f"fewer than {SMALL_FOLD} sites is unreliable, so use fewer folds"
        )
    if y is not None:
        present = _presence(y, fold.size)
        n_present = np.bincount(fold, weights=present, minlength=n_folds)
        n_absent = sizes - n_present
        if present.any() and not present.all():
            for count, word in ((n_present, "presences"), (n_absent, "absences")):
                empty = np.flatnonzero(count == 0)
                if empty.size:
                    notes.append(
                        f"{_folds_word(empty)} {'has' if empty.size == 1 else 'have'} no "
                        f"{word}, so skill at predicting {word} cannot be measured there; "
                        "use fewer folds, or larger groups or blocks"
                    )
    return tuple(notes)


def _merge_notes(*groups) -> tuple[str, ...]:
    merged: list[str] = []
    for group in groups:
        for note in group:
            if note not in merged:
                merged.append(note)
    return tuple(merged)


# --------------------------------------------------------------------------
# The schemes
# --------------------------------------------------------------------------


def random_folds(n, k=10, *, seed) -> Folds:
    """Sites dealt to ``k`` folds at random; fold sizes differ by at most one site.

    Fine for sites that are far apart and independent; for clustered surveys
    prefer grouped or spatial-block folds.
    """
    n = _whole(n, "the number of sites", 0)
    k = _check_k(k, n)
    rng = _generator(seed)
    fold = np.empty(n, dtype=np.int64)
    fold[rng.permutation(n)] = np.arange(n) % k
    return Folds(fold=fold, n_folds=k, scheme="random", notes=fold_notes(fold, k))


def stratified_folds(y, k=10, *, seed) -> Folds:
    """Random folds that keep the class balance of ``y`` in every fold.

    Each distinct value of ``y`` is a class (presence/absence: 1 and 0). The
    sites of each class are shuffled and dealt round the folds in turn, one
    class after the other, so every fold holds the same number of sites of
    each class to within one site, and fold sizes also differ by at most one.
    """
    classes, _ = _codes(y, "the response")
    n = classes.size
    k = _check_k(k, n)
    rng = _generator(seed)
    # Sites in class order, shuffled within each class.
    order = np.lexsort((rng.permutation(n), classes))
    dealt = np.empty(n, dtype=np.int64)
    dealt[order] = np.arange(n) % k
    # Which fold receives the extra sites is itself random.
    fold = rng.permutation(k)[dealt]
    y_numbers = np.asarray(y)
    notes = fold_notes(fold, k)
    if y_numbers.dtype.kind in "biuf" and y_numbers.min() >= 0:
        notes = fold_notes(fold, k, y_numbers)
    return Folds(fold=fold, n_folds=k, scheme="stratified", notes=notes)


def _balance(codes: np.ndarray, n_groups: int, k: int, rng, present=None) -> np.ndarray:
    """Whole groups to folds: largest first, each into the fold that stays most even.

    Without presences the chosen fold is simply the one with fewest sites.
    With presences it is the fold for which the squared distance from an even
    share (1/k) of the sites, plus the same for the presences, grows least;
    an empty fold is always preferred, so all ``k`` folds get sites when there
    are at least ``k`` groups. Ties go to the seeded generator. Counts are
    kept as whole numbers so that folds holding the same counts tie exactly.
    """
    sites = np.bincount(codes, minlength=n_groups).astype(float)
    n = sites.sum()
    presences = np.zeros(n_groups)
    if present is not None:
        presences = np.bincount(codes, weights=np.asarray(present, float), minlength=n_groups)
    n_present = presences.sum()
    size = sites / n + (presences / n_present if n_present > 0 else 0.0)
    # Largest first; groups of equal size in a random order.
    order = np.lexsort((rng.permutation(n_groups), -size))
    fold_sites = np.zeros(k)
    fold_presences = np.zeros(k)
    group_fold = np.empty(n_groups, dtype=np.int64)
    for g in order:
        s, p = sites[g], presences[g]
        # Growth of ((count + s) / total - 1/k)^2 - (count / total - 1/k)^2.
        growth = (2 * fold_sites * s + s * s - 2 * s * n / k) / n**2
        if n_present > 0:
            growth = growth + (
                2 * fold_presences * p + p * p - 2 * p * n_present / k
            ) / n_present**2
        best = np.flatnonzero(growth == growth.min())
        j = best[0] if best.size == 1 else best[rng.integers(best.size)]
        group_fold[g] = j
        fold_sites[j] += s
        fold_presences[j] += p
    return group_fold[codes]


def _fewer_folds(k: int, n_units: int, unit: str, hint: str) -> tuple[int, tuple[str, ...]]:
    """Reduce k to the number of groups or blocks, with a note; fail below two."""
    if n_units < 2:
        raise InputError(
            f"all sites fall in one {unit}, so no {unit} is left to test on; {hint}"
        )
    if n_units >= k:
        return k, ()
    return n_units, (
        f"there are only {n_units} {unit}s for {k} folds, so {n_units} folds are used, "
        f"one {unit} each; more {unit}s give a steadier skill estimate",
    )


def _lopsided_note(fold: np.ndarray, k: int, unit: str) -> tuple[str, ...]:
    sizes = np.bincount(fold, minlength=k)
    if sizes.max() > 2 * sizes.min():
        big = int(np.argmax(sizes))
        return (
            f"fold sizes are uneven ({sizes.min()} to {sizes.max()} sites) because some "
            f"{unit}s are large; fold {big + 1} holds {sizes.max()} sites. Every fold counts "
            "equally in the cross-validated error (its mean over folds), so a small fold's "
            "few sites count as much as a large fold's many",
        )
    return ()


def grouped_folds(groups, k=10, *, seed, y=None) -> Folds:
    """Whole groups (region, survey year, observer) to folds, none split.

    Fold sizes are balanced by placing the largest group first into the
    currently smallest fold; with a presence/absence ``y`` the presences are
    balanced too. When there are fewer groups than ``k``, each group becomes
    its own fold and a note says so.
    """
    codes, uniques = _codes(groups, "the group column")
    n = codes.size
    k = _check_k(k, None)  # more folds than groups is handled below
    rng = _generator(seed)
    present = None if y is None else _presence(y, n)
    k, reduce_note = _fewer_folds(
        k, uniques.size, "group",
        "give a group column with two or more groups, or leave groups out",
    )
    fold = _balance(codes, uniques.size, k, rng, present)
    notes = _merge_notes(reduce_note, _lopsided_note(fold, k, "group"), fold_notes(fold, k, y))
    return Folds(fold=fold, n_folds=k, scheme="grouped", blocks=codes, notes=notes)


def block_of(coords, block_size) -> np.ndarray:
    """Block number of every site on a square grid of ``block_size`` coordinate units.

    The grid starts at the coordinate origin: a site at (x, y) lies in the
    cell (floor(x / size), floor(y / size)); cells are numbered 0, 1, ... in
    sorted cell order, and only cells that hold sites get a number.
    """
    xy = _coordinates(coords)
    size = _positive(block_size, "the block size")
    cells = np.floor(xy / size).astype(np.int64)
    _, block = np.unique(cells, axis=0, return_inverse=True)
    return block.reshape(-1).astype(np.int64)


def spatial_block_folds(coords, block_size, k=10, *, seed, y=None) -> Folds:
    """Sites binned into square blocks; whole blocks to folds, none split.

    Test sites then lie at least partly away from training sites; choose a
    block at least as wide as the distance over which the response stays
    alike (see :func:`autocorrelation_range`). Blocks are balanced over folds
    as in :func:`grouped_folds`.
    """
    xy = _coordinates(coords)
    n = xy.shape[0]
    k = _check_k(k, None)  # more folds than blocks is handled below
    rng = _generator(seed)
    present = None if y is None else _presence(y, n)
    block = block_of(xy, block_size)
    n_blocks = int(block.max()) + 1 if n else 0
    span = np.ptp(xy, axis=0) if n else np.zeros(2)
    k, reduce_note = _fewer_folds(
        k, n_blocks, "block",
        f"the sites span {_number(span[0])} by {_number(span[1])} coordinate units, "
        f"so use a block size smaller than {_number(float(block_size))}",
    )
    fold = _balance(block, n_blocks, k, rng, present)
    notes = _merge_notes(reduce_note, _lopsided_note(fold, k, "block"), fold_notes(fold, k, y))
    return Folds(fold=fold, n_folds=k, scheme="spatial blocks", blocks=block, notes=notes)


def given_folds(fold_labels) -> Folds:
    """A fold column supplied by the user; its labels become folds 0..k-1 in sorted order."""
    fold, labels = _codes(fold_labels, "the fold column")
    if labels.size < 2:
        raise InputError(
            "the fold column holds a single fold, so no site is left to train on; "
            "give it two or more different values"
        )
    k = int(labels.size)
    return Folds(fold=fold, n_folds=k, scheme="given", notes=fold_notes(fold, k))


def repeated(make: Callable[..., Folds], repeats: int, *, seed) -> Folds:
    """Repeated cross-validation: ``repeats`` independent assignments.

    ``make`` is called as ``make(seed=child)`` once per repeat, where each
    child generator comes from its own spawned seed
    (``np.random.SeedSequence(seed).spawn``), so repeats are independent and
    the whole set is fixed by ``seed``. Notes shared by every repeat are kept
    as they are; the others are prefixed with their repeat (0-based).
    """
    children = _children(seed, _whole(repeats, "the number of repeats", 1))
    made = [make(seed=child) for child in children]
    first = made[0]
    for other in made[1:]:
        if other.n_sites != first.n_sites or other.n_folds != first.n_folds:
            raise ValueError("every repeat must cover the same sites with the same fold count")
    shared = [note for note in first.notes if all(note in other.notes for other in made)]
    own = [
        f"repeat {r}: {note}"
        for r, one in enumerate(made)
        for note in one.notes
        if note not in shared
    ]
    stack = np.stack([one.fold for one in made])
    return Folds(
        fold=stack[0], n_folds=first.n_folds, scheme=first.scheme, repeats=stack,
        blocks=first.blocks, notes=_merge_notes(shared, own),
    )


def _children(seed, count: int) -> list[np.random.Generator]:
    if isinstance(seed, np.random.Generator):
        return list(seed.spawn(count))
    if seed is None or isinstance(seed, bool):
        _generator(seed)  # raises the one-line message
    if isinstance(seed, np.random.SeedSequence):
        sequence = seed
    elif isinstance(seed, (int, np.integer)):
        sequence = np.random.SeedSequence(int(seed))
    else:
        raise InputError(
            f"seed must be a whole number or a numpy Generator, not {type(seed).__name__}"
        )
    return [np.random.default_rng(child) for child in sequence.spawn(count)]


# --------------------------------------------------------------------------
# Choosing a scheme
# --------------------------------------------------------------------------


def _is_presence_absence(y, family) -> bool:
    if family is not None and not (isinstance(family, str) and family == "auto"):
        return get_family(family).binary
    values = np.asarray(y)
    if not np.issubdtype(values.dtype, np.number):
        return False
    values = values[np.isfinite(values)]
    return values.size > 0 and bool(np.isin(values, (0, 1)).all())


def make_folds(
    n,
    *,
    k=10,
    y=None,
    family=None,
    groups=None,
    coords=None,
    block_size=None,
    fold_labels=None,
    repeats=1,
    seed,
) -> Folds:
    """The fold assignment of one run, chosen from what the user gave.

    In order of preference: a fold column (``fold_labels``); spatial blocks
    (``coords`` and ``block_size``); groups; stratified by presence when the
    response is presence/absence (a binary family such as ``"binomial"``, or a 0/1 response
    when the family is not given); otherwise random. With fewer groups or
    blocks than ``k`` the number of folds drops to match, with a note.
    ``repeats`` above 1 gives repeated cross-validation (see :func:`repeated`).
    """
    n = _whole(n, "the number of sites", 0)
    binary, present = False, None
    if y is not None:
        y = _numbers(y, "the response")
        _check_length(y, n, "the response")
        binary = _is_presence_absence(y, family)
        if binary:
            present = _presence(y, n).astype(float)
    for values, what in ((groups, "the group column"), (fold_labels, "the fold column")):
        if values is not None:
            _check_length(_one_column(values, what), n, what)
    if coords is not None:
        _check_length(_coordinates(coords), n, "the coordinates")
    if block_size is not None and coords is None:
        raise InputError(
            "a block size was given without coordinates; give the x and y columns of the "
            "sites, or leave out the block size"
        )

    extra: tuple[str, ...] = ()
    if fold_labels is not None:
        unused = [w for w, v in (("groups", groups), ("coordinates", coords)) if v is not None]
        if unused:
            extra += (
                f"a fold column was given, so the {' and '.join(unused)} did not shape the folds",
            )
        if repeats != 1:
            extra += ("a fold column was given, so the folds are used once and not repeated",)
        folds = given_folds(fold_labels)
        return _with_notes(folds, extra, present)

    if coords is not None and block_size is not None:
        def make(seed):
            return spatial_block_folds(coords, block_size, k, seed=seed, y=present)
        if y is not None:
            advice = block_size_advice(coords, y, block_size, seed=_side_generator(seed))
            extra += (advice,) if advice else ()
        if groups is not None:
            extra += ("spatial blocks were used, so the group column did not shape the folds",)
    elif groups is not None:
        def make(seed):
            return grouped_folds(groups, k, seed=seed, y=present)
    elif binary:
        rarest = int(min(np.count_nonzero(present > 0), np.count_nonzero(present == 0)))
        if 2 <= rarest < k:
            scarce = "presences" if np.count_nonzero(present > 0) == rarest else "absences"
            extra += (f"there are only {rarest} {scarce} for {k} folds, so {rarest} folds are "
                      f"used and every fold holds at least one; more {scarce} give a steadier "
                      "skill estimate",)
            k = rarest

        def make(seed):
            return stratified_folds(present.astype(np.int64), k, seed=seed)
    else:
        def make(seed):
            return _with_notes(random_folds(n, k, seed=seed), (), present)
    if coords is not None and block_size is None:
        extra += (_no_block_note(coords, y, seed),)

    if repeats == 1:
        folds = make(seed=_generator(seed))
    else:
        folds = repeated(make, repeats, seed=seed)
    return replace(folds, notes=_merge_notes(extra, folds.notes))


def _with_notes(folds: Folds, extra, present) -> Folds:
    """Folds with extra notes and the presence notes of a response they were not made from."""
    notes = fold_notes(folds.fold, folds.n_folds, present)
    return replace(folds, notes=_merge_notes(folds.notes, extra, notes))


def _side_generator(seed) -> np.random.Generator:
    """A generator for a side check that leaves the caller's random stream untouched.

    Spawning does not move the state of a Generator, so the folds drawn from
    ``seed`` afterwards are the same with or without the check.
    """
    if isinstance(seed, np.random.Generator):
        return seed.spawn(1)[0]
    return _children(seed, 1)[0]


def _no_block_note(coords, y, seed) -> str:
    note = (
        "coordinates were given without a block size, so the folds ignore where sites lie; "
        "give a block size to keep test sites away from training sites"
    )
    if y is not None:
        distance = autocorrelation_range(coords, y, seed=_side_generator(seed))
        if distance is not None:
            note += (
                f" (the response stays alike up to about {_number(distance)} coordinate units, "
                f"so a block size of at least {_number(_round_up(distance))} suits these data)"
            )
    return note


# --------------------------------------------------------------------------
# How far apart sites must be: a correlogram of Moran's I
# --------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class Correlogram:
    """Moran's I of a variable for pairs of sites in successive distance classes.

    ``distance`` is the centre of each class (classes of equal ``width`` from
    0 to half the largest distance between the sampled pairs), ``moran_i`` its
    Moran's I (NaN for an empty class), ``n_pairs`` the pairs it is based on.
    """

    distance: np.ndarray
    moran_i: np.ndarray
    n_pairs: np.ndarray
    width: float


def correlogram(coords, values, *, n_bins=15, max_pairs=200_000, seed) -> Correlogram:
    """Moran's I by distance class, from all pairs of sites or a random sample of them.

    With values standardised to mean 0 and (population) SD 1, Moran's I for a
    distance class with 0/1 weights is the mean of ``z_i * z_j`` over the
    pairs in that class. When there are more than ``max_pairs`` pairs a
    random sample of that many pairs of distinct sites is used. Sites whose
    value is missing are left out.
    """
    xy = _coordinates(coords)
    v = _one_column(values, "the values for the correlogram")
    _check_length(v, xy.shape[0], "the values for the correlogram")
    try:
        v = v.astype(float)
    except (TypeError, ValueError):
        raise InputError("the values for the correlogram must be numbers") from None
    n_bins = _whole(n_bins, "the number of distance classes", 1)
    max_pairs = _whole(max_pairs, "the number of site pairs", 1)
    rng = _generator(seed)
    keep = np.isfinite(v)
    xy, v = xy[keep], v[keep]
    n = v.size
    empty = Correlogram(np.empty(0), np.empty(0), np.empty(0, dtype=np.int64), 0.0)
    if n < 3 or np.ptp(v) == 0:
        return empty
    z = (v - v.mean()) / v.std()

    if n * (n - 1) // 2 <= max_pairs:
        i, j = np.triu_indices(n, k=1)
    else:
        i = rng.integers(0, n, size=max_pairs)
        j = rng.integers(0, n - 1, size=max_pairs)
        j = j + (j >= i)  # a distinct partner for every site
    d = np.hypot(xy[i, 0] - xy[j, 0], xy[i, 1] - xy[j, 1])
    reach = d.max() / 2.0
    if reach == 0:
        return empty
    width = reach / n_bins
    within = d <= reach
    cls = np.minimum((d[within] / width).astype(np.int64), n_bins - 1)
    products = z[i[within]] * z[j[within]]
    n_pairs = np.bincount(cls, minlength=n_bins)
    sums = np.bincount(cls, weights=products, minlength=n_bins)
    with np.errstate(invalid="ignore", divide="ignore"):
        moran_i = np.where(n_pairs > 0, sums / np.maximum(n_pairs, 1), np.nan)
    centres = (np.arange(n_bins) + 0.5) * width
    return Correlogram(centres, moran_i, n_pairs, float(width))


def autocorrelation_range(coords, values, *, n_bins=15, max_pairs=200_000, seed) -> float | None:
    """The distance at which nearby sites stop being alike, from Moran's I.

    Reads the correlogram of ``values`` (the response, or a model's
    residuals) from the shortest distance class outward and returns the
    distance, interpolated between class centres, at which Moran's I first
    drops below 0.1. Returns None when the closest class is not alike to
    begin with (Moran's I below 0.1, or within two rough standard errors,
    2 / sqrt(pairs), of zero). When Moran's I never drops below 0.1 within
    half the extent of the sites, that half-extent is returned: sites stay
    alike at least that far.
    """
    gram = correlogram(coords, values, n_bins=n_bins, max_pairs=max_pairs, seed=seed)
    usable = gram.n_pairs >= MIN_PAIRS_PER_CLASS
    distance, moran_i, n_pairs = gram.distance[usable], gram.moran_i[usable], gram.n_pairs[usable]
    if distance.size == 0:
        return None
    if moran_i[0] < max(ALIKE_THRESHOLD, 2.0 / np.sqrt(n_pairs[0])):
        return None
    below = np.flatnonzero(moran_i < ALIKE_THRESHOLD)
    if below.size == 0:
        return float(gram.width * len(gram.distance))
    b = below[0]
    a = b - 1
    step = (moran_i[a] - ALIKE_THRESHOLD) / (moran_i[a] - moran_i[b])
    return float(distance[a] + step * (distance[b] - distance[a]))


def block_size_advice(coords, values, block_size, *, seed) -> str | None:
    """A plain sentence when ``block_size`` is shorter than the autocorrelation range.

    Blocks narrower than the distance over which values stay alike leave test
    sites next to similar training sites, so skill is still overstated
    (Roberts et al. 2017). Returns None when the block size is large enough
    or no spatial autocorrelation is found.
    """
    size = _positive(block_size, "the block size")
    distance = autocorrelation_range(coords, values, seed=seed)
    if distance is None or size >= distance:
        return None
    return (
        f"blocks of {_number(size)} coordinate units are smaller than the distance over which "
        f"values stay alike (about {_number(distance)} units, from Moran's I by distance), so "
        f"test sites still sit beside similar training sites; a block size of at least "
        f"{_number(_round_up(distance))} gives a more honest skill estimate"
    )


def _number(x: float) -> str:
    """A distance written for people: three significant digits, no exponent."""
    x = float(x)
    if abs(x) >= 100:
        return f"{x:.0f}"
    return f"{x:.3g}"


def _round_up(x: float) -> float:
    """x rounded up to two significant digits (61.3 -> 62, 1234 -> 1300)."""
    if x <= 0:
        return x
    step = 10.0 ** (np.floor(np.log10(x)) - 1)
    return float(np.ceil(x / step - 1e-9) * step)
