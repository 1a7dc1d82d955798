"""Decimal marks and digit grouping in the numbers of a CSV file.

A number written ``2,545`` reads two ways: 2.545 with a decimal comma, or
2545 with a comma grouping thousands (``2.452`` likewise with the point).
Other forms settle the question: ``12,5`` or ``0,545`` can only be a decimal
comma (a group has exactly three digits and never starts the number with 0);
``1,234,567`` and ``1,234.5`` can only be commas grouping digits, so the point
is the decimal mark.

A file has one decimal mark. It is given by the caller, or taken from the
numbers that can be read only one way, anywhere in the file; the other mark
then groups digits. A file whose only marked numbers all read both ways is
refused, with the two readings and the setting that chooses one, because
guessing would be a silent wrong answer in one case out of two. The rule used
is always stated in a note.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..errors import InputError, setting

MARKS = (".", ",")
MARK_NAMES = {".": "point", ",": "comma"}

_SIGN = r"[+-]?"
_EXP = r"(?:[eE][+-]?\d+)?"
PLAIN = re.compile(rf"{_SIGN}\d+{_EXP}")


def _other(mark: str) -> str:
    return "," if mark == "." else "."


def _forms(mark: str) -> dict:
    """Patterns of numbers written with ``mark``; the other mark is the decimal when grouped."""
    m, o = re.escape(mark), re.escape(_other(mark))
    return {
        "one_group": re.compile(rf"{_SIGN}[1-9]\d{{0,2}}{m}\d{{3}}"),           # reads both ways
        "groups": re.compile(rf"{_SIGN}[1-9]\d{{0,2}}(?:{m}\d{{3}}){{2,}}"),    # grouping only
        "grouped_decimal": re.compile(rf"{_SIGN}[1-9]\d{{0,2}}(?:{m}\d{{3}})+{o}\d*{_EXP}"),
        "decimal": re.compile(rf"{_SIGN}(?:\d+{m}\d*|{m}\d+){_EXP}"),           # incl. one_group
    }


FORMS = {mark: _forms(mark) for mark in MARKS}


@dataclass(frozen=True)
class ColumnMarks:
    """What the marked numbers of one column say about the decimal mark."""

    name: str
    numbers: bool                # every value is a number in some reading
    decimal: frozenset           # decimal marks its values prove
    both_ways: str | None        # a mark whose every use in the column reads both ways
    example: str | None          # a value that proves a mark, or one that reads both ways


def column_marks(name, texts: pd.Series) -> ColumnMarks:
    """Classify the text values (non-missing, stripped) of one column."""
    texts = pd.Series(texts, dtype="str")
    plain = texts.str.fullmatch(PLAIN.pattern).to_numpy(dtype=bool)
    matched = plain.copy()
    proves, example, ambiguous = set(), None, []
    for mark in MARKS:
        forms = FORMS[mark]
        one = texts.str.fullmatch(forms["one_group"].pattern).to_numpy(dtype=bool)
        grouped = (texts.str.fullmatch(forms["groups"].pattern).to_numpy(dtype=bool)
                   | texts.str.fullmatch(forms["grouped_decimal"].pattern).to_numpy(dtype=bool))
        decimal = texts.str.fullmatch(forms["decimal"].pattern).to_numpy(dtype=bool) & ~one
        matched |= one | grouped | decimal
        if grouped.any():
            proves.add(_other(mark))
            example = example or str(texts.iloc[int(np.argmax(grouped))])
        if decimal.any():
            proves.add(mark)
            example = example or str(texts.iloc[int(np.argmax(decimal))])
        if one.any():
            ambiguous.append((mark, str(texts.iloc[int(np.argmax(one))])))
    numbers = bool(matched.all()) and len(texts) > 0
    both_ways = None
    if numbers and not proves and ambiguous:
        both_ways, example = ambiguous[0]
    return ColumnMarks(str(name), numbers, frozenset(proves) if numbers else frozenset(),
                       both_ways, example)


def float_column_proves_point(values: np.ndarray) -> float | None:
    """A value showing that a column read with a decimal point cannot be point-grouped, or None.

    Point grouping writes whole numbers of at least 1,000 (``2.452``): a value
    below 1 in size, or with more than three digits after the point, or of
    1,000 or more with a fraction, proves the point is the decimal mark.
    """
    v = values[np.isfinite(values)]
    fraction = v[v != np.round(v)]
    thousandths = fraction * 1000.0
    beyond_three = (np.abs(thousandths - np.round(thousandths))
                    > 1e-6 * np.maximum(1.0, np.abs(thousandths)))
    proof = (np.abs(fraction) < 1) | (np.abs(fraction) >= 1000) | beyond_three
    return float(fraction[np.argmax(proof)]) if proof.any() else None


@dataclass(frozen=True)
class NumberStyle:
    """The decimal mark of a file and the mark that groups digits, with how they were found."""

    decimal: str
    grouping: str
    how: str                     # "given", "detected" or "default"
    evidence: str = ""           # column and value that showed the decimal mark

    def note(self) -> str:
        d = f"decimal {MARK_NAMES[self.decimal]} ('{self.decimal}')"
        g = f"{MARK_NAMES[self.grouping]}s ('{self.grouping}') read as digit grouping where a number has them"
        if self.how == "given":
            return f"numbers: {d} as given; {g}"
        if self.how == "detected":
            return f"numbers: {d}, detected from {self.evidence}; {g}"
        return f"numbers: {d} (no number in the file shows another); {g}"


def settle_style(columns: list[ColumnMarks], given: str | None,
                 point_proved_by: tuple | None) -> NumberStyle:
    """The file's decimal mark: as given, else proved by its numbers, else refused or the point.

    ``point_proved_by`` is (column, value) for a column read as numbers whose
    values prove the decimal point (see :func:`float_column_proves_point`).
    """
    if given is not None:
        return NumberStyle(given, _other(given), "given")
    proofs = {}
    if point_proved_by is not None:
        name, value = point_proved_by
        proofs["."] = f"column '{name}' (such as {value:g})"
    for column in columns:
        for mark in sorted(column.decimal):
            proofs.setdefault(mark, f"column '{column.name}' (such as '{column.example}')")
    if len(proofs) == 1:
        mark, where = next(iter(proofs.items()))
        return NumberStyle(mark, _other(mark), "detected", where)
    if len(proofs) == 2:
        raise InputError(
            f"the file mixes decimal marks: {proofs[',']} has a decimal comma and "
            f"{proofs['.']} a decimal point; export it again with one decimal mark, or say "
            f"which one the file uses: {setting(_py('.'), _cli('.'))} or "
            f"{setting(_py(','), _cli(','))}")
    both = [column for column in columns if column.both_ways is not None]
    if both:
        raise _both_ways_error(both[0])
    return NumberStyle(".", ",", "default")


def _py(mark: str) -> str:
    return f"decimal='{mark}'"


def _cli(mark: str) -> str:
    return f"--decimal {mark}"


def _both_ways_error(column: ColumnMarks) -> InputError:
    value, mark = column.example, column.both_ways
    as_decimal = value.replace(_other(mark), "").replace(mark, ".")
    as_grouped = value.replace(mark, "")
    return InputError(
        f"column '{column.name}' has numbers that read two ways, such as '{value}': "
        f"{float(as_decimal):g} if the {MARK_NAMES[mark]} is the decimal mark, or "
        f"{int(as_grouped):d} if it groups thousands; nothing else in the file settles it, "
        f"so say which: {setting(_py(mark), _cli(mark))} for {float(as_decimal):g}, "
        f"{setting(_py(_other(mark)), _cli(_other(mark)))} for {int(as_grouped):d}")


def read_grouped(texts: pd.Series, style: NumberStyle) -> pd.Series | None:
    """A text column as numbers under ``style``, or None if some value is not such a number.

    Digit groups must be whole groups of three; the grouping mark is removed
    and the decimal mark becomes a point before the numbers are read.
    """
    d, g = style.decimal, style.grouping
    present = texts.notna()
    values = texts[present].astype("str").str.strip()
    mine, theirs = FORMS[d], FORMS[g]
    ok = (values.str.fullmatch(PLAIN.pattern) | values.str.fullmatch(mine["decimal"].pattern)
          | values.str.fullmatch(theirs["groups"].pattern)
          | values.str.fullmatch(theirs["one_group"].pattern)
          | values.str.fullmatch(theirs["grouped_decimal"].pattern))
    if len(values) == 0 or not bool(ok.all()):
        return None
    cleaned = values.str.replace(g, "", regex=False).str.replace(d, ".", regex=False)
    out = pd.Series(np.nan, index=texts.index, dtype=np.float64)
    out[present] = pd.to_numeric(cleaned, errors="coerce").to_numpy(dtype=np.float64)
    return out
