"""Turn survey predictors into the columns of a design matrix.

A design is a list of :class:`Term` records plus the matrix they produce.
The terms remember everything needed to build the same columns for new
sites (reference levels, centres), so :func:`apply_design` on the training
table gives back exactly the training matrix, and on new sites gives
columns that mean the same thing.

* A numeric predictor is one column, as it is.
* A categorical predictor becomes one 0/1 indicator column per level except
  its reference level (the most frequent level; ties go to the first in
  alphabetical order), named ``"factor=level"``. The indicators share the
  factor's name as their ``group`` so a selection can treat them together.
* A square ``"x^2"`` is ``(x - c)^2`` and an interaction ``"a:b"`` is
  ``(a - ca) * (b - cb)``, where the centres are the (weighted) training
  means. Centring first keeps a variable and its square (or product) from
  being nearly collinear when the variable sits far from zero, which
  otherwise makes their coefficients unstable and hard to read. Squares and
  interactions each form their own group.

Standardising is not done here: the fitting core standardises internally and
reports coefficients on these columns' own units.
"""

from __future__ import annotations

from dataclasses import dataclass
from itertools import combinations

import numpy as np
import pandas as pd

from pathfinder.data.intake import as_labels, describe_rows, describe_values, parse_numbers
from pathfinder.errors import InputError


@dataclass(frozen=True)
class Term:
    """One column of a design matrix and how it is built from the table."""

    name: str  # readable: "temp", "substrate=sand", "temp^2", "temp:rain"
    kind: str  # "numeric" | "level" | "square" | "interaction"
    sources: tuple[str, ...]  # input columns it is built from
    level: str | None = None  # the level a "level" term indicates
    group: str = ""  # the predictor it belongs to (factor name for levels)
    centers: tuple[float, ...] = ()  # means subtracted before squaring / multiplying


@dataclass(frozen=True, eq=False)
class Design:
    """A design matrix with the terms that explain its columns."""

    X: np.ndarray  # (n, m) float64, Fortran order
    terms: tuple[Term, ...]
    reference_levels: dict  # factor -> its reference level (no column of its own)

    @property
    def names(self) -> list[str]:
        """Column names, in order."""
        return [term.name for term in self.terms]

    def groups(self) -> dict[str, list[int]]:
        """Group name -> indices of its columns, in order of first appearance."""
        out: dict[str, list[int]] = {}
        for j, term in enumerate(self.terms):
            out.setdefault(term.group, []).append(j)
        return out


def build_design(
    frame: pd.DataFrame,
    predictors,
    categorical=(),
    *,
    squares=False,
    interactions=False,
    weights=None,
) -> Design:
    """Build the design matrix for ``predictors`` of ``frame``.

    ``categorical`` names the predictors to code as indicator columns.
    ``squares`` is True (every numeric predictor) or a list of numeric
    predictors; ``interactions`` is True (every pair of numeric predictors)
    or a list of ``(a, b)`` pairs. ``weights`` (one per row) make the centres
    weighted means. The frame must have no missing values in these columns
    (prepare the table with ``prepare_survey`` first).
    """
    predictors = _as_list(predictors)
    categorical = _as_list(categorical)
    _check_columns(frame, predictors, categorical)
    numeric = [name for name in predictors if name not in categorical]
    w = _check_weights(weights, len(frame))

    numbers = {name: _training_numbers(frame, name) for name in numeric}
    terms, reference_levels = [], {}
    for name in predictors:
        if name in categorical:
            reference, others = _levels(_training_labels(frame, name))
            reference_levels[name] = reference
            terms.extend(
                Term(f"{name}={level}", "level", (name,), level=level, group=name)
                for level in others
            )
        else:
            terms.append(Term(name, "numeric", (name,), group=name))
    for name in _squared(squares, numeric, categorical):
        center = _mean(numbers[name], w)
        terms.append(Term(f"{name}^2", "square", (name,), group=f"{name}^2", centers=(center,)))
    for a, b in _pairs(interactions, numeric, categorical):
        centers = (_mean(numbers[a], w), _mean(numbers[b], w))
        terms.append(Term(f"{a}:{b}", "interaction", (a, b), group=f"{a}:{b}", centers=centers))
    _check_unique_names(terms)

    X = apply_design(terms, reference_levels, frame)
    return Design(X=X, terms=tuple(terms), reference_levels=dict(reference_levels))


def apply_design(terms, reference_levels, frame: pd.DataFrame, *, allow_unknown: bool = False):
    """Build the design matrix of recorded ``terms`` for the rows of ``frame``.

    A factor level not seen in training, or a missing value in a used column,
    raises :class:`InputError` naming the column and rows; with
    ``allow_unknown=True`` those rows come back as rows of NaN instead, so the
    other rows can still be predicted. On the training table this reproduces
    the training matrix exactly.
    """
    terms = tuple(terms)
    needed = list(dict.fromkeys(source for term in terms for source in term.sources))
    absent = [name for name in needed if name not in frame.columns]
    if absent:
        listed = ", ".join(f"'{name}'" for name in absent)
        raise InputError(f"the table lacks the column(s) {listed} that the model uses; add them")

    n = len(frame)
    unusable = np.zeros(n, dtype=bool)
    numbers, labels = {}, {}
    factors = {term.sources[0] for term in terms if term.kind == "level"}
    factors |= {name for name in reference_levels if name in needed}
    for name in needed:
        if name in factors:
            labels[name], bad = _new_labels(frame, name, terms, reference_levels, allow_unknown)
        else:
            numbers[name], bad = _new_numbers(frame, name)
            if bad.any() and not allow_unknown:
                raise InputError(
                    f"column '{name}' is missing in {describe_rows(np.flatnonzero(bad))}; "
                    "fill them in or leave those rows out"
                )
        unusable |= bad

    X = np.empty((n, len(terms)), dtype=np.float64, order="F")
    for j, term in enumerate(terms):
        X[:, j] = _term_column(term, numbers, labels)
    X[unusable, :] = np.nan
    return X


def _term_column(term: Term, numbers: dict, labels: dict) -> np.ndarray:
    if term.kind == "numeric":
        return numbers[term.sources[0]]
    if term.kind == "level":
        values = labels[term.sources[0]]
        return np.array([value == term.level for value in values], dtype=np.float64)
    if term.kind == "square":
        return (numbers[term.sources[0]] - term.centers[0]) ** 2
    if term.kind == "interaction":
        a, b = term.sources
        return (numbers[a] - term.centers[0]) * (numbers[b] - term.centers[1])
    raise InputError(
        f"term '{term.name}' has unknown kind '{term.kind}'; the model record is damaged"
    )


# ---------------------------------------------------------------------------
# Checks and small pieces
# ---------------------------------------------------------------------------


def _as_list(names) -> list[str]:
    if names is None:
        return []
    if isinstance(names, str):
        return [names]
    return list(names)


def _check_columns(frame, predictors, categorical) -> None:
    if not predictors:
        raise InputError("no predictors given for the design; list at least one column")
    if len(set(predictors)) != len(predictors):
        raise InputError("a predictor is listed twice for the design; list each once")
    absent = [name for name in predictors if name not in frame.columns]
    if absent:
        listed = ", ".join(f"'{name}'" for name in absent)
        raise InputError(f"predictor(s) {listed} are not columns of the table; check the names")
    stray = [name for name in categorical if name not in predictors]
    if stray:
        raise InputError(
            f"'{stray[0]}' is listed as categorical but is not a predictor; add it to "
            "the predictors"
        )


def _check_weights(weights, n: int) -> np.ndarray | None:
    if weights is None:
        return None
    w = np.asarray(weights, dtype=np.float64)
    if w.shape != (n,):
        raise InputError(f"weights have {w.size} values for {n} rows; give one weight per row")
    if not np.all(np.isfinite(w)) or np.any(w < 0) or not np.any(w > 0):
        raise InputError("weights must be finite, non-negative and not all zero; check them")
    return w


def _mean(values: np.ndarray, w: np.ndarray | None) -> float:
    return float(np.average(values, weights=w))


def _training_numbers(frame, name) -> np.ndarray:
    values, gaps = _new_numbers(frame, name)
    if gaps.any():
        raise InputError(
            f"predictor '{name}' is missing in {describe_rows(np.flatnonzero(gaps))}; fill "
            "them in or prepare the table with prepare_survey, which leaves such rows out"
        )
    return values


def _training_labels(frame, name) -> np.ndarray:
    labels = as_labels(frame[name])
    gaps = np.flatnonzero([label is None for label in labels])
    if gaps.size:
        raise InputError(
            f"categorical predictor '{name}' is missing in {describe_rows(gaps)}; fill "
            "them in or prepare the table with prepare_survey, which leaves such rows out"
        )
    return labels


def _new_numbers(frame, name) -> tuple[np.ndarray, np.ndarray]:
    """A numeric column for the design, and a mask of its missing cells."""
    series = frame[name]
    values, not_numbers = parse_numbers(series)
    if not_numbers.any():
        rows = np.flatnonzero(not_numbers)
        shown = describe_values(series.to_numpy(dtype=object)[rows])
        raise InputError(
            f"column '{name}' must hold numbers but has {shown} in {describe_rows(rows)}; "
            "correct those cells"
        )
    infinite = np.isinf(values)
    if infinite.any():
        raise InputError(
            f"column '{name}' has infinite values in "
            f"{describe_rows(np.flatnonzero(infinite))}; replace them with real numbers"
        )
    return values, np.isnan(values)


def _new_labels(frame, name, terms, reference_levels, allow_unknown: bool):
    """A factor's labels; rows with a missing or unseen level are flagged."""
    labels = as_labels(frame[name])
    known = {term.level for term in terms if term.kind == "level" and term.sources[0] == name}
    if name in reference_levels:
        known.add(reference_levels[name])
    unknown = np.array([label not in known for label in labels], dtype=bool)
    if unknown.any() and not allow_unknown:
        rows = np.flatnonzero(unknown)
        seen = list(dict.fromkeys(labels[rows]))
        shown = describe_values(["(missing)" if label is None else label for label in seen])
        raise InputError(
            f"column '{name}' has level(s) {shown} in {describe_rows(rows)} that the model "
            f"was not trained on (it knows {describe_values(sorted(known))}); correct those "
            "rows or leave them out"
        )
    return labels, unknown


def _levels(labels: np.ndarray) -> tuple[str, list[str]]:
    """The reference level (most frequent; ties by sort order) and the other levels, sorted."""
    counts = pd.Series(labels, dtype=object).value_counts()
    levels = sorted(counts.index, key=lambda level: (-counts[level], level))
    reference = levels[0]
    return reference, sorted(level for level in levels if level != reference)


def _squared(squares, numeric, categorical) -> list[str]:
    if squares is True:
        return list(numeric)
    if squares is False or squares is None:
        return []
    chosen = _as_list(squares)
    for name in chosen:
        if name in categorical:
            raise InputError(
                f"'{name}' is categorical and cannot be squared; take it out of squares"
            )
        if name not in numeric:
            raise InputError(
                f"squares names '{name}', which is not a numeric predictor; check the name"
            )
    return list(dict.fromkeys(chosen))


def _pairs(interactions, numeric, categorical) -> list[tuple[str, str]]:
    if interactions is True:
        return list(combinations(numeric, 2))
    if interactions is False or interactions is None:
        return []
    pairs, seen = [], set()
    for pair in interactions:
        if isinstance(pair, str) or len(pair) != 2 or pair[0] == pair[1]:
            raise InputError(
                f"interactions must be pairs of two different columns, such as "
                f"('temp', 'rain'); got {pair!r}"
            )
        for name in pair:
            if name in categorical:
                raise InputError(
                    f"'{name}' is categorical; interactions are built between numeric "
                    "predictors only"
                )
            if name not in numeric:
                raise InputError(
                    f"interactions name '{name}', which is not a numeric predictor; check the name"
                )
        key = frozenset(pair)
        if key not in seen:
            seen.add(key)
            pairs.append((pair[0], pair[1]))
    return pairs


def _check_unique_names(terms) -> None:
    seen = set()
    for term in terms:
        if term.name in seen:
            raise InputError(
                f"two design columns would both be named '{term.name}'; rename the column "
                "that already uses that name"
            )
        seen.add(term.name)
