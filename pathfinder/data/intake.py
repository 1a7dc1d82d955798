"""Read a survey table and check it before any model sees it.

Two steps, each a plain function:

* :func:`read_table` reads a CSV or Parquet file into a data frame, exactly as
  written, and records what was read (:class:`TableInfo`, including the
  SHA-256 of the file so a result can be traced back to its input). The file
  is only ever opened for reading.
* :func:`prepare_survey` turns that frame into a :class:`Survey`: the
  response coded for its family, the predictors as numbers or categories,
  effort turned into an offset, and every row or column left out counted and
  explained.

Every problem a user can cause stops with one :class:`InputError` line that
says what is wrong, where, and what to do about it. Rows are data rows counted
from 1 below the header, as in the ``row`` column of the output tables
(folds.csv, sites.csv), and messages say so.
"""

from __future__ import annotations

import csv
import difflib
import hashlib
import io
import re
import warnings
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np
import pandas as pd

from pathfinder.core.families import FAMILIES, family_for_labels, family_for_values, get_family
from pathfinder.data.number_format import (
    MARK_NAMES,
    NumberStyle,
    column_marks,
    float_column_proves_point,
    read_grouped,
    settle_style,
)
from pathfinder.errors import InputError, setting

PARQUET_SUFFIXES = (".parquet", ".pq")
DELIMITERS = (",", ";", "\t", "|")
DELIMITER_NAMES = {",": "comma", ";": "semicolon", "\t": "tab", "|": "pipe"}
MIN_ROWS = 10

# Labels read as "present" (coded 1) or "absent" (coded 0) in a two-level response.
PRESENCE_WORDS = frozenset(
    {"1", "yes", "y", "true", "t", "present", "presence", "p", "detected",
     "found", "occupied", "used", "alive", "positive", "pos"}
)
ABSENCE_WORDS = frozenset(
    {"0", "no", "n", "false", "f", "absent", "absence", "a", "not detected",
     "undetected", "not found", "unoccupied", "unused", "dead", "negative", "neg"}
)

_COMMA_NUMBER = re.compile(r"^[+-]?(\d+,\d*|\d*,\d+)([eE][+-]?\d+)?$")
_WHOLE_NUMBER = re.compile(r"^[+-]?\d+$")


# ---------------------------------------------------------------------------
# Messages
# ---------------------------------------------------------------------------


ROW_CONVENTION = "(counted from 1 below the header)"


def _opt(name: str) -> str:
    """A setting named as the reader writes it: ``exclude`` in Python, ``--exclude`` on the command line."""
    return setting(name, "--" + name.replace("_", "-"))


def describe_rows(positions, limit: int = 5, convention: bool = True) -> str:
    """Name table rows (0-based positions) as data rows counted from 1 below the header.

    Position 0 is data row 1, as in the output tables. At most ``limit`` rows are
    listed; the rest are counted. The numbering convention is stated unless
    ``convention`` is False (when a message states it once for several lists).
    """
    positions = [int(p) for p in positions]
    shown = ", ".join(str(p + 1) for p in positions[:limit])
    more = len(positions) - limit
    if more > 0:
        shown += f" and {more} more"
    word = "data row" if len(positions) == 1 else "data rows"
    return f"{word} {shown} {ROW_CONVENTION}" if convention else f"{word} {shown}"


def describe_values(values, limit: int = 5) -> str:
    """Quote a few cell values for a message."""
    shown = []
    for value in list(values)[:limit]:
        if isinstance(value, (float, np.floating)):
            shown.append(f"{float(value):g}")
        elif isinstance(value, (int, np.integer)):
            shown.append(str(int(value)))
        else:
            shown.append(f"'{value}'")
    return ", ".join(shown)


def closest_name(name, available) -> str | None:
    """The column name most like ``name`` (same letters in another case first)."""
    available = [str(other) for other in available]
    same_letters = [other for other in available if other.lower() == str(name).lower()]
    if same_letters:
        return same_letters[0]
    close = difflib.get_close_matches(str(name), available, n=1, cutoff=0.6)
    return close[0] if close else None


def _unknown_names_error(unknown, available, where: str) -> InputError:
    """An error naming unknown column names, with the closest real names."""
    available = [str(name) for name in available]
    parts = []
    for name in unknown:
        close = closest_name(name, available)
        hint = f" (did you mean '{close}'?)" if close else ""
        parts.append(f"'{name}'{hint}")
    listed = ", ".join(available[:15]) + (", ..." if len(available) > 15 else "")
    word = "column" if len(parts) == 1 else "columns"
    return InputError(
        f"unknown {word} {', '.join(parts)} {where}; the table has: {listed}; "
        "check the spelling"
    )


# ---------------------------------------------------------------------------
# Reading a file
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class TableInfo:
    """What was read: enough to trace a result back to its input file."""

    path: str
    format: str  # "csv" or "parquet"
    sha256: str  # hex digest of the file bytes
    n_rows: int
    n_columns: int
    delimiter: str | None  # None for Parquet
    decimal: str | None  # None for Parquet
    notes: tuple[str, ...] = ()  # plain facts about the reading (detected delimiter, ...)


def read_table(
    path,
    *,
    decimal: str | None = None,
    delimiter: str | None = None,
    columns: list[str] | None = None,
    na_values=None,
) -> tuple[pd.DataFrame, TableInfo]:
    """Read a CSV or Parquet table without changing the file.

    CSV files must be UTF-8 (a byte-order mark is allowed). The delimiter
    (comma, semicolon, tab or pipe) is detected from the first lines unless
    given. ``decimal="."`` or ``decimal=","`` gives the decimal mark; the
    other mark is then read as digit grouping (``1,234.5`` or ``1.234,5``)
    where whole groups of three digits allow it. Without ``decimal`` the mark
    is taken from numbers that read only one way (``12,5``, ``0.35``,
    ``1,234,567``); a file whose only marked numbers read both ways
    (``2,545``: 2.545 or 2545) is refused, naming the two readings (see
    ``data/number_format.py``). The rule used is always in ``info.notes``.

    ``na_values`` lists no-data codes (such as ``-9999`` or ``"n.d."``) to
    read as missing: text equal to a code, and numbers equal to a numeric
    code, in every column; how many were found is in ``info.notes``.

    Parquet files (``.parquet``, ``.pq``) are read column by column: with
    ``columns`` given, the other columns are never loaded.

    Raises :class:`InputError` for a missing file, a folder, an empty file, a
    header without data rows, repeated column names, bytes that are not UTF-8,
    and files that cannot be parsed.
    """
    file = _check_file(path)
    if columns is not None:
        columns = [str(name) for name in columns]
    codes = _missing_codes(na_values)
    if file.suffix.lower() in PARQUET_SUFFIXES:
        frame, info = _read_parquet(file, columns)
        frame, note = _read_missing_codes(frame, codes)
        return frame, replace(info, notes=info.notes + ((note,) if note else ()))
    return _read_csv(file, decimal=decimal, delimiter=delimiter, columns=columns, codes=codes)


def _missing_codes(na_values) -> tuple:
    """No-data codes as (text, number or None) pairs."""
    if na_values is None:
        return ()
    if isinstance(na_values, (str, int, float)):
        na_values = [na_values]
    codes = []
    for code in na_values:
        text = str(code).strip()
        if not text:
            raise InputError("a no-data code is blank; blank cells are read as missing already")
        number = pd.to_numeric(pd.Series([text]), errors="coerce").iloc[0]
        codes.append((text, None if pd.isna(number) else float(number)))
    return tuple(dict.fromkeys(codes))


def _read_missing_codes(frame: pd.DataFrame, codes: tuple) -> tuple[pd.DataFrame, str | None]:
    """Cells equal to a no-data code become missing; a note counts them per column."""
    if not codes:
        return frame, None
    found = {}
    for name in frame.columns:
        series = frame[name]
        if _is_date_column(series):
            continue
        hit = np.zeros(len(series), dtype=bool)
        if pd.api.types.is_numeric_dtype(series) and not pd.api.types.is_bool_dtype(series):
            values = series.to_numpy(dtype=np.float64, na_value=np.nan)
            for _, number in codes:
                if number is not None:
                    hit |= values == number
        elif _is_text(series):
            text = series.astype("str").str.strip().to_numpy(dtype=object)
            numbers = pd.to_numeric(pd.Series(text), errors="coerce").to_numpy(dtype=np.float64)
            present = ~missing_cells(series)
            for code, number in codes:
                hit |= present & (text == code)
                if number is not None:
                    hit |= present & (numbers == number)
        if hit.any():
            frame[name] = series.mask(hit)
            found[str(name)] = int(hit.sum())
    shown = ", ".join(code for code, _ in codes)
    if not found:
        return frame, f"no-data code(s) {shown}: no cell holds one"
    per_column = ", ".join(f"{name} {count}" for name, count in found.items())
    return frame, (f"no-data code(s) {shown} read as missing in {sum(found.values())} cells "
                   f"({per_column})")


def _check_file(path) -> Path:
    file = Path(path).expanduser()
    if not file.exists():
        raise InputError(f"file not found: {file}; check the name and the folder")
    if file.is_dir():
        raise InputError(
            f"{file} is a folder, not a file; give the path of the CSV or Parquet table"
        )
    if file.stat().st_size == 0:
        raise InputError(f"{file} is empty (0 bytes); export the table again")
    return file


def _read_bytes(file: Path) -> bytes:
    try:
        with open(file, "rb") as handle:
            return handle.read()
    except OSError as exc:
        raise InputError(
            f"cannot read {file} ({exc.strerror or exc}); check that it is not locked "
            "and that you may read it"
        ) from exc


def _sha256_of_file(file: Path) -> str:
    digest = hashlib.sha256()
    try:
        with open(file, "rb") as handle:
            for block in iter(lambda: handle.read(1 << 20), b""):
                digest.update(block)
    except OSError as exc:
        raise InputError(
            f"cannot read {file} ({exc.strerror or exc}); check that it is not locked "
            "and that you may read it"
        ) from exc
    return digest.hexdigest()


def _decode_utf8(data: bytes, file: Path) -> str:
    """UTF-8 text of the file, without a byte-order mark."""
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = data.count(b"\n", 0, exc.start) + 1
        raise InputError(
            f"{file} is not UTF-8 text: byte 0x{data[exc.start]:02x} at byte offset "
            f"{exc.start} (line {line}) cannot be read; re-save the file as UTF-8 "
            "(in a spreadsheet: 'CSV UTF-8') and try again"
        ) from exc


def _check_csv_options(decimal, delimiter) -> None:
    if decimal not in (None, ".", ","):
        raise InputError(f"decimal must be '.' or ',', not '{decimal}'")
    if delimiter is not None and len(delimiter) != 1:
        raise InputError(
            f"delimiter must be one character (for example ',' or ';'), not '{delimiter}'"
        )
    if decimal is not None and decimal == delimiter:
        raise InputError(
            f"decimal and delimiter are both '{decimal}'; a file cannot use one "
            "character for both, so check how it was exported"
        )


def detect_delimiter(text: str) -> str:
    """The delimiter (comma, semicolon, tab or pipe) that splits the first lines evenly.

    A candidate scores by whether every sampled line has the same number of
    fields as the header, then by how many fields that is. A file with a
    single column gets a comma.
    """
    sample = text[: 1 << 16]
    lines = [line for line in sample.splitlines() if line.strip()]
    if len(sample) < len(text) and len(lines) > 1:
        lines = lines[:-1]  # the last sampled line may be cut short
    lines = lines[:50]
    best, best_score = ",", (False, 1)
    for candidate in DELIMITERS:
        counts = [len(row) for row in csv.reader(lines, delimiter=candidate)]
        if not counts or counts[0] < 2:
            continue
        score = (all(count == counts[0] for count in counts), counts[0])
        if score > best_score:
            best, best_score = candidate, score
    return best


def _header_names(text: str, delimiter: str) -> list[str]:
    first = next(csv.reader(io.StringIO(text[: 1 << 20]), delimiter=delimiter), [])
    return [name.strip() for name in first]


def _check_header(names: list[str], file: Path) -> None:
    seen, repeated = set(), []
    for name in names:
        if name and name in seen and name not in repeated:
            repeated.append(name)
        seen.add(name)
    if repeated:
        listed = ", ".join(f"'{name}'" for name in repeated)
        raise InputError(
            f"{file} has more than one column named {listed}; give every column "
            "its own name in the header row"
        )


def _check_requested(columns, names, file: Path) -> None:
    unknown = [name for name in columns if name not in names]
    if unknown:
        raise _unknown_names_error(
            unknown, [n for n in names if n], f"in the columns to read from {file}"
        )
    if len(set(columns)) != len(columns):
        raise InputError(f"columns lists a name twice for {file}; list each column once")


def _parse_csv(data: bytes, file, delimiter, decimal, positions) -> pd.DataFrame:
    """Parse CSV bytes (known to be UTF-8) with pandas; ragged lines become an InputError."""
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error", pd.errors.ParserWarning)
            return pd.read_csv(
                io.BytesIO(data),
                encoding="utf-8-sig",
                sep=delimiter,
                decimal=decimal,
                header=0,
                index_col=False,
                usecols=positions,
                skipinitialspace=True,
                low_memory=False,
            )
    except pd.errors.ParserWarning as exc:
        raise InputError(
            f"cannot read {file}: the data rows have more fields than the header "
            f"({DELIMITER_NAMES.get(delimiter, repr(delimiter))}-separated); check the "
            "delimiter, or quote text that contains it"
        ) from exc
    except (pd.errors.ParserError, ValueError) as exc:
        detail = str(exc).replace("Error tokenizing data. C error: ", "").strip()
        detail = " ".join(detail.split())
        raise InputError(
            f"cannot read {file} as a "
            f"{DELIMITER_NAMES.get(delimiter, repr(delimiter))}-separated table: "
            f"{detail}; check that line, or give the delimiter"
        ) from exc


def _parse_text(data: bytes, delimiter: str, names: list, wanted: list) -> pd.DataFrame:
    """The named columns exactly as written (text), for a second look at their numbers."""
    positions = [names.index(name) for name in wanted]
    frame = pd.read_csv(io.BytesIO(data), encoding="utf-8-sig", sep=delimiter, header=0,
                        index_col=False, usecols=positions, dtype=str, skipinitialspace=True,
                        low_memory=False)
    frame.columns = [names[i] for i in sorted(positions)]
    return frame


def _text_values(series: pd.Series) -> pd.Series:
    """The non-missing values of a column as stripped text."""
    values = series[~missing_cells(series)].astype("str").str.strip()
    return values[values != ""]


def _is_text(series: pd.Series) -> bool:
    return not (pd.api.types.is_numeric_dtype(series) or pd.api.types.is_bool_dtype(series)
                or _is_date_column(series))


def _number_style(frame: pd.DataFrame, decimal, raw_text) -> NumberStyle:
    """The decimal mark and digit grouping of the file (see data/number_format.py).

    Text columns are looked at as written. Columns already read as numbers
    with a decimal point prove the point unless every fraction could be a
    group of three digits; only then, or when a decimal comma is seen
    elsewhere, are those columns read again as text and looked at as written.
    """
    if decimal is not None:
        return settle_style([], decimal, None)
    text = [column_marks(name, _text_values(frame[name])) for name in frame.columns
            if _is_text(frame[name])]
    floats = [name for name in frame.columns if pd.api.types.is_float_dtype(frame[name])]
    point = None
    for name in floats:
        value = float_column_proves_point(frame[name].to_numpy(dtype=np.float64))
        if value is not None:
            point = (name, value)
            break
    comma_seen = any("," in column.decimal for column in text)
    settled = point is not None or any(column.decimal for column in text)
    if floats and (not settled or comma_seen):
        raw = raw_text(floats)
        text += [column_marks(name, _text_values(raw[name])) for name in floats]
        point = None
    return settle_style(text, None, point)


def _read_grouped_columns(frame: pd.DataFrame, style: NumberStyle, notes: list) -> pd.DataFrame:
    """Text columns whose every value is a number in the file's style, read as numbers."""
    grouped = []
    for name in frame.columns:
        if not _is_text(frame[name]):
            continue
        values = _text_values(frame[name])
        if values.empty or not values.str.contains(re.escape(style.grouping) + "|" + re.escape(style.decimal)).any():
            continue
        numbers = read_grouped(frame[name], style)
        if numbers is not None:
            frame[name] = numbers
            if values.str.contains(re.escape(style.grouping)).any():
                grouped.append(str(name))
    if grouped:
        listed = ", ".join(f"'{name}'" for name in grouped)
        notes.append(f"digit grouping read in column(s) {listed}: the "
                     f"{MARK_NAMES[style.grouping]}s between groups of three digits were removed")
    return frame


def _name_columns(frame, names, positions, file: Path, notes: list) -> pd.DataFrame:
    """Give the parsed columns their header names; drop unnamed empty columns."""
    kept = list(range(len(names))) if positions is None else list(positions)
    frame.columns = [names[i] if names[i] else f"(column {i + 1})" for i in kept]
    for i in kept:
        if names[i]:
            continue
        label = f"(column {i + 1})"
        if frame[label].isna().all():
            frame = frame.drop(columns=label)
            notes.append(f"column {i + 1} has no name and no values; it was left out")
        else:
            raise InputError(
                f"column {i + 1} of {file} has values but no name in the header row; "
                "give it a name"
            )
    return frame


def _read_csv(file: Path, *, decimal, delimiter, columns, codes=()) -> tuple[pd.DataFrame, TableInfo]:
    _check_csv_options(decimal, delimiter)
    data = _read_bytes(file)
    sha256 = hashlib.sha256(data).hexdigest()
    text = _decode_utf8(data, file)
    if not text.strip():
        raise InputError(f"{file} holds no text, only blank space; export the table again")

    notes = []
    if delimiter is None:
        delimiter = detect_delimiter(text)
        notes.append(f"columns are {DELIMITER_NAMES[delimiter]}-separated (detected)")
    names = _header_names(text, delimiter)
    _check_header(names, file)
    positions = None
    if columns is not None:
        _check_requested(columns, names, file)
        positions = sorted(names.index(name) for name in columns)

    parsed_with = decimal or "."
    frame = _name_columns(_parse_csv(data, file, delimiter, parsed_with, positions),
                          names, positions, file, notes)
    frame, code_note = _read_missing_codes(frame, codes)
    style = _number_style(frame, decimal, lambda wanted: _read_missing_codes(
        _parse_text(data, delimiter, names, wanted), codes)[0])
    if style.decimal != parsed_with:
        frame = _name_columns(_parse_csv(data, file, delimiter, style.decimal, positions),
                              names, positions, file, [])
        frame, code_note = _read_missing_codes(frame, codes)
    frame = _read_grouped_columns(frame, style, notes)
    notes.append(style.note())
    if code_note:
        notes.append(code_note)
    decimal = style.decimal
    if columns is not None:
        frame = frame[columns]
    if len(frame) == 0:
        raise InputError(
            f"{file} has a header row but no data rows; add the survey rows below the header"
        )
    return frame, _table_info(file, "csv", sha256, frame, delimiter, decimal, notes)


def _table_info(file, fmt, sha256, frame, delimiter=None, decimal=None, notes=()) -> TableInfo:
    return TableInfo(path=str(file), format=fmt, sha256=sha256, n_rows=len(frame),
                     n_columns=frame.shape[1], delimiter=delimiter, decimal=decimal,
                     notes=tuple(notes))


def _read_parquet(file: Path, columns) -> tuple[pd.DataFrame, TableInfo]:
    import pyarrow as pa
    import pyarrow.parquet as pq

    sha256 = _sha256_of_file(file)
    try:
        schema = pq.read_schema(file)
    except (pa.ArrowException, OSError) as exc:
        detail = " ".join(str(exc).split())
        raise InputError(
            f"{file} could not be read as Parquet ({detail}); check that the file is "
            "complete, or export it again"
        ) from exc
    names = [name for name in schema.names if not name.startswith("__index_level_")]
    _check_header(names, file)
    if columns is not None:
        _check_requested(columns, names, file)
    try:
        frame = pd.read_parquet(file, columns=columns)
    except (pa.ArrowException, OSError, ValueError) as exc:
        detail = " ".join(str(exc).split())
        raise InputError(
            f"{file} could not be read as Parquet ({detail}); export it again"
        ) from exc
    if columns is None and not isinstance(frame.index, pd.RangeIndex):
        frame = frame.reset_index()  # a named index saved with the table is a column too
    frame = frame.reset_index(drop=True)
    if len(frame) == 0:
        raise InputError(f"{file} has columns but no data rows; add the survey rows")
    return frame, _table_info(file, "parquet", sha256, frame)


# ---------------------------------------------------------------------------
# Reading columns into numbers or labels
# ---------------------------------------------------------------------------


def missing_cells(series: pd.Series) -> np.ndarray:
    """True where a cell is missing: NA/NaN/None, or text that is blank or 'nan'."""
    if pd.api.types.is_bool_dtype(series) or pd.api.types.is_numeric_dtype(series):
        return series.isna().to_numpy(dtype=bool)
    if isinstance(series.dtype, pd.StringDtype):   # text columns as read: one vectorised pass
        blank = series.str.strip().str.lower().isin(["", "nan"]).to_numpy(dtype=bool)
        return series.isna().to_numpy(dtype=bool) | blank
    values = series.to_numpy(dtype=object)
    missing = np.asarray(pd.isna(values), dtype=bool)
    for i in np.flatnonzero(~missing):
        value = values[i]
        if isinstance(value, str) and value.strip().lower() in ("", "nan"):
            missing[i] = True
    return missing


def parse_numbers(series: pd.Series) -> tuple[np.ndarray, np.ndarray]:
    """Read a column as float64 numbers.

    Returns ``(values, not_numbers)``: values has NaN where the cell is missing
    or holds something that is not a number; ``not_numbers`` marks the cells
    that hold such text. True/False count as 1/0.
    """
    n = len(series)
    if pd.api.types.is_bool_dtype(series) or pd.api.types.is_numeric_dtype(series):
        values = series.to_numpy(dtype=np.float64, na_value=np.nan)
        return values, np.zeros(n, dtype=bool)
    missing = missing_cells(series)
    cells = series.to_numpy(dtype=object)
    text = []
    for value, gone in zip(cells, missing):
        if gone:
            text.append("nan")
        elif isinstance(value, (bool, np.bool_)):
            text.append("1" if value else "0")
        else:
            text.append(str(value).strip())
    values = pd.to_numeric(pd.Series(text, dtype=object), errors="coerce").to_numpy(
        dtype=np.float64, na_value=np.nan
    )
    not_numbers = np.isnan(values) & ~missing
    return values, not_numbers


def as_labels(series: pd.Series) -> np.ndarray:
    """Read a column as text labels (object array, None where missing).

    Whole numbers stored as floats are written without ``.0`` so that a
    category coded 1, 2, 3 reads the same whether or not the column had gaps.
    """
    missing = missing_cells(series)
    cells = series.to_numpy(dtype=object)
    labels = np.empty(len(cells), dtype=object)
    for i, (value, gone) in enumerate(zip(cells, missing)):
        if gone:
            labels[i] = None
        elif isinstance(value, (float, np.floating)) and float(value).is_integer():
            labels[i] = str(int(value))
        else:
            labels[i] = str(value).strip()
    return labels


def _is_date_column(series: pd.Series) -> bool:
    return pd.api.types.is_datetime64_any_dtype(series) or pd.api.types.is_timedelta64_dtype(
        series
    )


def _not_numbers_error(name, role, series, not_numbers) -> InputError:
    rows = np.flatnonzero(not_numbers)
    bad = [str(v).strip() for v in series.to_numpy(dtype=object)[rows]]
    hint = ""
    if any(_COMMA_NUMBER.match(value) for value in bad):
        hint = (" (they look like decimal commas: if the file uses them, "
                + setting("read it with decimal=','", "add --decimal ,") + ")")
    n_numbers = int((~missing_cells(series) & ~not_numbers).sum())
    what = "numbers but also text" if n_numbers else "text, not numbers,"
    return InputError(
        f"{role} '{name}' holds {what} in {describe_rows(rows)}: "
        f"{describe_values(bad)}{hint}; correct or blank those cells, or leave the "
        "column out"
    )


def _read_number_column(frame, name, role) -> np.ndarray:
    """A column that must hold numbers (effort, offset, weights, coordinates)."""
    series = frame[name]
    if _is_date_column(series):
        raise InputError(f"{role} '{name}' holds dates, not numbers; give a numeric column")
    values, not_numbers = parse_numbers(series)
    if not_numbers.any():
        raise _not_numbers_error(name, role, series, not_numbers)
    _check_finite(values, name, role)
    return values


LARGEST_USABLE = 1e150   # squares and sums of squares of larger numbers overflow


def _check_finite(values: np.ndarray, name, role) -> None:
    infinite = np.isinf(values)
    if infinite.any():
        rows = np.flatnonzero(infinite)
        raise InputError(
            f"{role} '{name}' has infinite values in {describe_rows(rows)}; replace "
            "them with real numbers or blank them"
        )
    with np.errstate(invalid="ignore"):
        huge = np.abs(values) > LARGEST_USABLE
    if huge.any():
        rows = np.flatnonzero(huge)
        raise InputError(
            f"{role} '{name}' has numbers too large to compute with "
            f"({describe_values(values[rows])} in {describe_rows(rows)}; the limit is "
            f"{LARGEST_USABLE:g} in size); check the units, or a no-data code such values stand for"
        )


SUSPECT_MIN_REPEATS = 3


def suspected_code(name, values: np.ndarray) -> str | None:
    """A warning when a column's lowest or highest value looks like a no-data code.

    Such a value (-9999, 9999, -999) is repeated (at least three times) and
    lies farther from the column's other values than those values spread:
    the gap to the nearest other value exceeds their whole range. Real values
    at an extreme rarely sit that far out, so the column is named and the
    reading as missing is offered; nothing is changed.
    """
    v = values[np.isfinite(values)]
    if v.size < 2 * SUSPECT_MIN_REPEATS:
        return None
    for code, side in ((v.min(), "below"), (v.max(), "above")):
        count = int((v == code).sum())
        rest = v[v != code]
        if count < SUSPECT_MIN_REPEATS or np.unique(rest).size < 2:
            continue
        low, high = float(rest.min()), float(rest.max())
        gap = low - code if side == "below" else code - high
        if gap > high - low:
            return (
                f"column '{name}' holds {code:g} in {count} rows, far {side} its other values "
                f"({low:g} to {high:g}): if it marks missing data, read it as missing with "
                + setting(f"na_values=['{code:g}']", f"--na-values {code:g}")
                + "; as it stands it is used as a real value"
            )
    return None


@dataclass(frozen=True)
class _Column:
    """One column read for modelling: numbers (float64) or labels (object)."""

    name: str
    kind: str  # "numeric" or "categorical"
    values: np.ndarray
    missing: np.ndarray


def _read_predictor(frame, name, force_categorical: bool, max_levels: int) -> _Column:
    series = frame[name]
    if _is_date_column(series):
        raise InputError(
            f"predictor '{name}' holds dates; leave it out with {_opt('exclude')} or turn it "
            "into a number (such as day of year) first"
        )
    missing = missing_cells(series)
    if not force_categorical:
        values, not_numbers = parse_numbers(series)
        n_numbers = int((~missing & ~not_numbers).sum())
        if not not_numbers.any():
            _check_finite(values, name, "predictor")
            return _Column(name, "numeric", values, np.isnan(values))
        if n_numbers > not_numbers.sum():
            raise _not_numbers_error(name, "predictor", series, not_numbers)
        comma_like = [
            str(v).strip() for v in series.to_numpy(dtype=object)[not_numbers]
        ]
        if all(_COMMA_NUMBER.match(v) or _WHOLE_NUMBER.match(v) for v in comma_like):
            raise InputError(
                f"predictor '{name}' holds numbers written with decimal commas "
                f"(such as '{comma_like[0]}') in a file whose other numbers use a decimal "
                "point; write them with points, or if the whole file uses decimal commas, "
                + setting("read it with decimal=','", "add --decimal ,")
            )
    labels = as_labels(series)
    levels = sorted({label for label in labels if label is not None})
    if len(levels) > max_levels:
        if force_categorical:
            raise InputError(
                f"predictor '{name}' is listed as categorical but has {len(levels)} different "
                f"values (more than {max_levels}); a category has a few classes, so take it "
                f"out of {setting('categorical', '--categorical')} to use it as a number"
                + setting(f", or raise max_levels (now {max_levels})", "")
            )
        raise InputError(
            f"predictor '{name}' is text with {len(levels)} different values (more than "
            f"{max_levels}); it looks like a name or code, not a category: leave it out with "
            + setting("exclude", "--exclude")
            + setting(f", or raise max_levels (now {max_levels})", "")
        )
    return _Column(name, "categorical", labels, np.array([v is None for v in labels]))


# ---------------------------------------------------------------------------
# The survey
# ---------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class Survey:
    """A checked survey table, ready for a design matrix and a model.

    ``frame`` holds the kept rows and kept predictors only (numeric columns as
    float64, categorical ones as text); ``rows`` gives their 0-based positions
    in the input table. Everything left out is counted in ``dropped_missing``
    and ``dropped_predictors`` and explained in ``warnings``; ``notes`` are
    plain facts to show the user (family choice, label coding, log of effort).
    """

    frame: pd.DataFrame
    response: np.ndarray
    response_name: str
    family: str
    family_reason: str
    response_labels: tuple | None
    predictors: tuple[str, ...]
    categorical: tuple[str, ...]
    offset: np.ndarray | None
    offset_rule: dict | None
    weights: np.ndarray | None
    coords: np.ndarray | None
    coord_names: tuple[str, str] | None
    groups: np.ndarray | None
    group_name: str | None
    rows: np.ndarray
    n_read: int
    dropped_missing: dict
    dropped_predictors: tuple
    warnings: tuple[str, ...]
    notes: tuple[str, ...]
    fold_labels: np.ndarray | None = None   # each kept row's fold, from a fold column

    @property
    def n(self) -> int:
        """Number of rows kept."""
        return len(self.response)


def prepare_survey(
    frame: pd.DataFrame,
    *,
    response: str,
    family: str = "auto",
    predictors=None,
    exclude=(),
    effort: str | None = None,
    offset: str | None = None,
    weights: str | None = None,
    coords=None,
    groups: str | None = None,
    missing: str = "drop",
    max_levels: int = 50,
    categorical=(),
    fold_column: str | None = None,
) -> Survey:
    """Check a survey table and code it for modelling.

    ``predictors`` is a list of columns, or None for every column that has no
    other role (response, effort, offset, weights, coordinates, groups) and is
    not in ``exclude``. Columns of numbers (or text that reads as numbers) are
    numeric predictors; text columns with at most ``max_levels`` different
    values are categorical. ``categorical`` names numeric columns to treat as
    categories anyway (such as a habitat class coded 1, 2, 3).

    ``family="auto"`` chooses binomial for 0/1 or two labels, Poisson for
    non-negative whole numbers with more than two values, and Gaussian
    otherwise; the reason is kept in ``family_reason``. ``effort`` (positive
    numbers) becomes the offset log(effort); ``offset`` is used as given.
    ``fold_column`` gives each site's cross-validation fold; it is never a
    predictor, and its labels on the kept rows are ``fold_labels``.

    Rows missing a value in any used column are left out and counted per
    column (``missing="drop"``), or refused (``missing="refuse"``). Constant
    predictors and exact copies of an earlier predictor are dropped with a
    warning.
    """
    _check_options(frame, family, missing, max_levels)
    categorical = [categorical] if isinstance(categorical, str) else list(categorical)
    roles = _resolve_roles(frame, response, effort, offset, weights, coords, groups, fold_column)
    chosen = _resolve_predictors(frame, predictors, exclude, categorical, roles)

    # Read every used column over the whole table.
    columns = [_read_predictor(frame, name, name in categorical, max_levels) for name in chosen]
    y_values, y_is_label = _read_response(frame, response)
    offset_values, offset_rule = _read_offset(frame, effort, offset)
    weight_values = _read_weights(frame, weights)
    coord_values = _read_coords(frame, roles["coords"])
    group_values = frame[groups].to_numpy() if groups is not None else None

    # Leave out rows with missing values, counted per column.
    missing_by_column = {response: _missing_of(y_values, y_is_label)}
    missing_by_column.update({column.name: column.missing for column in columns})
    for name in roles["effort"] + roles["offset"]:
        missing_by_column[name] = np.isnan(offset_values)
    if weights is not None:
        missing_by_column[weights] = np.isnan(weight_values)
    for k, name in enumerate(roles["coords"]):
        missing_by_column[name] = np.isnan(coord_values[:, k])
    if groups is not None:
        missing_by_column[groups] = missing_cells(frame[groups])
    if fold_column is not None:
        missing_by_column[fold_column] = missing_cells(frame[fold_column])
    keep, dropped_missing, messages = _rows_to_keep(missing_by_column, len(frame), missing)
    rows = np.flatnonzero(keep)

    # Numbers that look like no-data codes (such as -9999): said, never changed.
    numeric_used = ([c.name for c in columns if c.kind == "numeric"]
                    + ([] if y_is_label else [response])
                    + roles["effort"] + roles["offset"] + roles["weights"] + roles["coords"])
    messages = [warning for name in numeric_used
                if (warning := suspected_code(name, parse_numbers(frame[name])[0]))] + messages

    # Response and family on the kept rows.
    coded = _code_response(y_values[keep], y_is_label, family, response, rows)
    notes = [coded.reason]
    if coded.labels is not None:
        notes.append(coded.label_note)
    if offset_rule is not None and offset_rule["kind"] == "effort":
        notes.append(
            f"offset = log({effort}): the expected response is taken as proportional "
            f"to survey effort '{effort}'"
        )

    # Predictors that carry no information.
    kept_columns, dropped, drop_messages = _drop_uninformative(columns, keep)
    messages.extend(drop_messages)
    if not kept_columns:
        raise InputError(
            "no predictor is left after dropping constant and repeated columns; "
            "check the table or the predictors you listed"
        )

    weight_kept = None
    if weight_values is not None:
        weight_kept = weight_values[keep]
        if not np.any(weight_kept > 0):
            raise InputError(
                f"weights '{weights}' are zero in every usable row; give some rows "
                "a positive weight"
            )

    out = pd.DataFrame(
        {
            column.name: (
                column.values[keep].astype(np.float64)
                if column.kind == "numeric"
                else pd.Series(column.values[keep], dtype=object).astype(str)
            )
            for column in kept_columns
        }
    )
    return Survey(
        frame=out,
        response=coded.y,
        response_name=response,
        family=coded.family,
        family_reason=coded.reason,
        response_labels=coded.labels,
        predictors=tuple(column.name for column in kept_columns),
        categorical=tuple(c.name for c in kept_columns if c.kind == "categorical"),
        offset=None if offset_values is None else offset_values[keep],
        offset_rule=offset_rule,
        weights=weight_kept,
        coords=None if coord_values is None else np.ascontiguousarray(coord_values[keep]),
        coord_names=None if coords is None else tuple(roles["coords"]),
        groups=None if group_values is None else group_values[keep],
        group_name=groups,
        rows=rows,
        n_read=len(frame),
        dropped_missing=dropped_missing,
        dropped_predictors=tuple(dropped),
        warnings=tuple(messages),
        notes=tuple(notes),
        fold_labels=None if fold_column is None else frame[fold_column].to_numpy()[keep],
    )


def _check_options(frame, family, missing, max_levels) -> None:
    if not isinstance(frame, pd.DataFrame):
        raise InputError(
            f"expected a table (pandas DataFrame), got {type(frame).__name__}; read "
            "the file with read_table first"
        )
    if family not in ("auto", *FAMILIES):
        raise InputError(
            f"family '{family}' is not known; use auto or {', '.join(FAMILIES)}"
        )
    if missing not in ("drop", "refuse"):
        raise InputError(f"missing must be 'drop' or 'refuse', not '{missing}'")
    if not isinstance(max_levels, int) or max_levels < 2:
        raise InputError(f"max_levels must be a whole number of at least 2, not {max_levels}")
    if len(set(map(str, frame.columns))) != frame.shape[1]:
        counts = pd.Series([str(c) for c in frame.columns]).value_counts()
        repeated = ", ".join(f"'{name}'" for name in counts[counts > 1].index)
        raise InputError(
            f"the table has more than one column named {repeated}; give every column "
            "its own name"
        )


def _resolve_roles(frame, response, effort, offset, weights, coords, groups, fold_column=None) -> dict:
    """Check the role columns exist and do not overlap; role -> list of names."""
    if effort is not None and offset is not None:
        raise InputError(
            f"give either {_opt('effort')} ('{effort}') or {_opt('offset')} ('{offset}'), not both: effort "
            "becomes the offset log(effort)"
        )
    if coords is not None:
        if isinstance(coords, str) or len(coords) != 2:
            raise InputError(
                f"{_opt('coords')} needs two column names (x, y), got {coords!r}; for example "
                + setting("coords=('easting', 'northing')", "--coords easting,northing")
            )
        coords = [str(c) for c in coords]
    roles = {
        "response": [response],
        "effort": [effort] if effort is not None else [],
        "offset": [offset] if offset is not None else [],
        "weights": [weights] if weights is not None else [],
        "coords": coords or [],
        "groups": [groups] if groups is not None else [],
        "fold column": [fold_column] if fold_column is not None else [],
    }
    for role, names in roles.items():
        unknown = [name for name in names if name not in frame.columns]
        if unknown:
            raise _unknown_names_error(unknown, frame.columns, f"given as {role}")
    seen = {}
    for role, names in roles.items():
        for name in names:
            if name in seen and seen[name] != role:
                raise InputError(
                    f"column '{name}' is given as both {seen[name]} and {role}; give "
                    "each role its own column"
                )
            seen[name] = role
    if roles["coords"] and roles["coords"][0] == roles["coords"][1]:
        raise InputError(f"{_opt('coords')} names '{roles['coords'][0]}' twice; give the x and "
                         "the y column")
    return roles


def _resolve_predictors(frame, predictors, exclude, categorical, roles) -> list[str]:
    """The predictor columns, in table order."""
    exclude = [exclude] if isinstance(exclude, str) else list(exclude)
    if isinstance(predictors, str):
        predictors = [predictors]
    lists = {"predictors": predictors or [], "exclude": exclude, "categorical": categorical}
    for where, names in lists.items():
        unknown = [name for name in dict.fromkeys(names) if name not in frame.columns]
        if unknown:
            raise _unknown_names_error(unknown, frame.columns, f"in {_opt(where)}")
    modelled = {
        name for role in ("response", "effort", "offset", "weights") for name in roles[role]
    }
    if predictors is None:
        taken = {name for names in roles.values() for name in names}
        chosen = [name for name in frame.columns if name not in taken]
    else:
        clash = [name for name in predictors if name in modelled]
        if clash:
            raise InputError(
                f"'{clash[0]}' is the response, effort, offset or weights column and "
                f"cannot also be a predictor; take it out of {_opt('predictors')}"
            )
        wanted = set(predictors)
        chosen = [name for name in frame.columns if name in wanted]
    chosen = [name for name in chosen if name not in set(exclude)]
    forced = [name for name in categorical if name not in chosen]
    if forced:
        raise InputError(
            f"'{forced[0]}' is listed as categorical but is not a predictor; add it to "
            f"{_opt('predictors')} or take it out of {_opt('categorical')}"
        )
    if not chosen:
        raise InputError(
            f"no predictor columns are left; list them with {_opt('predictors')}, or "
            f"{_opt('exclude')} fewer"
        )
    return chosen


def _read_response(frame, name) -> tuple[np.ndarray, bool]:
    """The response as float numbers, or as labels when it is text."""
    series = frame[name]
    if _is_date_column(series):
        raise InputError(
            f"response '{name}' holds dates; choose a column of counts, 0/1 or measures"
        )
    values, not_numbers = parse_numbers(series)
    missing = missing_cells(series)
    n_numbers = int((~missing & ~not_numbers).sum())
    if not not_numbers.any():
        _check_finite(values, name, "response")
        return values, False
    if n_numbers > not_numbers.sum():
        raise _not_numbers_error(name, "response", series, not_numbers)
    return as_labels(series), True


def _missing_of(values: np.ndarray, is_label: bool) -> np.ndarray:
    if is_label:
        return np.array([value is None for value in values], dtype=bool)
    return np.isnan(values)


def _read_offset(frame, effort, offset) -> tuple[np.ndarray | None, dict | None]:
    if effort is not None:
        values = _read_number_column(frame, effort, "effort")
        bad = ~np.isnan(values) & (values <= 0)
        if bad.any():
            rows = np.flatnonzero(bad)
            raise InputError(
                f"effort '{effort}' must be positive (its logarithm is the offset) but is "
                f"{describe_values(values[rows])} in {describe_rows(rows)}; correct the "
                "effort or remove those surveys"
            )
        with np.errstate(invalid="ignore"):
            return np.log(values), {"kind": "effort", "column": effort, "transform": "log"}
    if offset is not None:
        values = _read_number_column(frame, offset, "offset")
        return values, {"kind": "offset", "column": offset}
    return None, None


def _read_weights(frame, weights) -> np.ndarray | None:
    if weights is None:
        return None
    values = _read_number_column(frame, weights, "weights")
    negative = values < 0
    if negative.any():
        rows = np.flatnonzero(negative)
        raise InputError(
            f"weights '{weights}' must not be negative but are "
            f"{describe_values(values[rows])} in {describe_rows(rows)}; correct them"
        )
    return values


def _read_coords(frame, names) -> np.ndarray | None:
    if not names:
        return None
    return np.column_stack([_read_number_column(frame, name, "coordinate") for name in names])


def _rows_to_keep(missing_by_column: dict, n: int, policy: str):
    """Rows with no missing used value; the count per column; the warning."""
    missing_any = np.zeros(n, dtype=bool)
    for mask in missing_by_column.values():
        missing_any |= mask
    counts = {name: int(mask.sum()) for name, mask in missing_by_column.items() if mask.any()}
    messages = []
    if counts and policy == "refuse":
        parts = [
            f"'{name}' "
            f"{describe_rows(np.flatnonzero(missing_by_column[name]), 3, convention=False)}"
            for name in counts
        ]
        raise InputError(
            f"missing values in {'; '.join(parts)} {ROW_CONVENTION}; fill them in, or use "
            + setting("missing='drop'", "--missing drop") + " to leave those rows out"
        )
    if counts:
        per_column = ", ".join(f"{name} {count}" for name, count in counts.items())
        messages.append(
            f"{int(missing_any.sum())} of {n} rows left out for missing values "
            f"(rows missing each column: {per_column})"
        )
    keep = ~missing_any
    if keep.sum() < MIN_ROWS:
        detail = ""
        if counts:
            worst = sorted(counts.items(), key=lambda item: -item[1])[:3]
            listed = ", ".join(f"'{name}' in {count}" for name, count in worst)
            detail = f" ({n - int(keep.sum())} have missing values; most often {listed})"
        raise InputError(
            f"only {int(keep.sum())} of {n} rows are usable{detail}; at least {MIN_ROWS} "
            "are needed: fill in missing values or leave out the columns that lack them"
        )
    return keep, counts, messages


@dataclass(frozen=True)
class _CodedResponse:
    y: np.ndarray
    family: str
    reason: str
    labels: tuple | None = None
    label_note: str = ""


def _code_response(values, is_label, family, name, rows) -> _CodedResponse:
    """Code the kept response values for their family, checking they fit it."""
    if is_label:
        return _code_labels(values, family, name)
    distinct = np.unique(values)
    chosen = None if family == "auto" else get_family(family)
    if len(distinct) == 1 and not (chosen is not None and chosen.binary):
        meaning = {0.0: " (no presences)", 1.0: " (no absences)"}.get(float(distinct[0]), "")
        raise InputError(
            f"response '{name}' is {distinct[0]:g} in every usable row{meaning}; a model "
            "needs a response that varies, so check the column"
        )
    reason = f"{family}: chosen by you"
    if chosen is None:
        chosen, reason = family_for_values(distinct)
    if chosen.binary:
        _check_binary(values, name, rows)
    elif chosen.counts:
        _check_counts(values, name, rows)
    return _CodedResponse(values.astype(np.float64), chosen.name, reason)


def _check_binary(values, name, rows) -> None:
    other = (values != 0) & (values != 1)
    if other.any():
        where = np.flatnonzero(other)
        raise InputError(
            f"response '{name}' must be 0 or 1 (or two labels) for a binomial model but is "
            f"{describe_values(values[where])} in {describe_rows(rows[where])}; recode it "
            "or choose another family"
        )
    if not np.any(values == 1):
        raise InputError(
            f"response '{name}' has no presences (no 1 in any usable row); a binomial "
            "model needs both presences and absences"
        )
    if not np.any(values == 0):
        raise InputError(
            f"response '{name}' has no absences (no 0 in any usable row); a binomial "
            "model needs both presences and absences"
        )


def _check_counts(values, name, rows) -> None:
    negative = values < 0
    if negative.any():
        where = np.flatnonzero(negative)
        raise InputError(
            f"response '{name}' must be a count (0, 1, 2, ...) for a poisson model but is "
            f"negative ({describe_values(values[where])}) in {describe_rows(rows[where])}; "
            "correct the counts or choose " + setting("family='gaussian'", "--family gaussian")
        )
    fractional = values != np.round(values)
    if fractional.any():
        where = np.flatnonzero(fractional)
        raise InputError(
            f"response '{name}' must be a whole-number count for a poisson model but is "
            f"{describe_values(values[where])} in {describe_rows(rows[where])}; correct "
            "the counts or choose " + setting("family='gaussian'", "--family gaussian")
        )


def label_order(levels) -> tuple[str, str, str]:
    """Which of two labels is coded 0 and which 1, and why.

    A label that reads as presence (present, yes, detected, 1, ...) is 1; else
    a label that reads as absence is 0; else the labels are taken in
    alphabetical order and the later one is 1.
    """
    first, second = sorted(levels)
    is_presence = [label.lower() in PRESENCE_WORDS for label in (first, second)]
    is_absence = [label.lower() in ABSENCE_WORDS for label in (first, second)]
    if is_presence == [True, False] or is_absence == [False, True]:
        zero, one = second, first
    elif is_presence == [False, True] or is_absence == [True, False]:
        zero, one = first, second
    else:
        return first, second, (
            f"'{second}' comes later in alphabetical order; recode the column as 0/1 "
            "to choose otherwise"
        )
    if one.lower() in PRESENCE_WORDS:
        return zero, one, f"'{one}' reads as presence"
    return zero, one, f"'{zero}' reads as absence"


def _code_labels(values, family, name) -> _CodedResponse:
    levels = sorted(set(values.tolist()))
    if len(levels) == 1:
        only = levels[0].lower()
        meaning = (
            " (no presences)" if only in ABSENCE_WORDS
            else " (no absences)" if only in PRESENCE_WORDS
            else ""
        )
        raise InputError(
            f"response '{name}' is '{levels[0]}' in every usable row{meaning}; a model "
            "needs a response that varies, so check the column"
        )
    if len(levels) > 2:
        raise InputError(
            f"response '{name}' has {len(levels)} different labels "
            f"({describe_values(levels)}); a binomial response needs exactly two (such as "
            "present/absent), so merge or recode the labels"
        )
    if family != "auto" and not get_family(family).binary:
        raise InputError(
            f"response '{name}' is text ({describe_values(levels)}), but family "
            f"'{family}' needs numbers; use " + setting("family='binomial'", "--family binomial")
            + " or a numeric column"
        )
    zero, one, why = label_order(levels)
    y = np.array([value == one for value in values], dtype=np.float64)
    if family == "auto":
        reason = f"binomial: the response holds two labels, '{zero}' and '{one}'"
    else:
        reason = "binomial: chosen by you"
    note = f"response '{name}': '{one}' is coded 1 and '{zero}' is coded 0 ({why})"
    return _CodedResponse(y, family_for_labels().name, reason, (zero, one), note)


def _drop_uninformative(columns, keep):
    """Drop predictors that are constant, or copies of an earlier one, on the kept rows."""
    kept, dropped, messages = [], [], []
    for column in columns:
        values = column.values[keep]
        distinct = pd.unique(values)
        if len(distinct) <= 1:
            shown = describe_values(distinct[:1])
            dropped.append((column.name, f"constant: {shown} in every usable row"))
            messages.append(
                f"predictor '{column.name}' dropped: it is {shown} in every usable row"
            )
            continue
        twin = next(
            (
                other
                for other in kept
                if other.kind == column.kind and np.array_equal(other.values[keep], values)
            ),
            None,
        )
        if twin is not None:
            dropped.append((column.name, f"same values as '{twin.name}'"))
            messages.append(
                f"predictor '{column.name}' dropped: it has the same values as '{twin.name}'"
            )
            continue
        kept.append(column)
    return kept, dropped, messages
