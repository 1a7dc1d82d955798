"""Predictions at new sites, with a warning wherever the model extrapolates.

A :class:`Model` is read from a model file (``outputs/model_file.py``). Its
``predict`` takes a table of new sites and returns one row per input row, in
the same order and with the same index; a row is never dropped:

``prediction``  on the response scale: the probability of the label coded 1
                (binomial), the expected count (Poisson) or the expected value
                (Gaussian); empty when the row cannot be predicted.
``link``        the linear predictor (with ``kind="link"`` or ``"both"``).
``n_outside_range``  how many of the model's numeric covariates lie outside
                the range of the training sites.
``most_extreme_predictor``  the one farthest outside (empty when none is),
``distance_outside``  and how far, in units of its training range (0.5 =
                half the range beyond the nearest end).
``mess``        the multivariate environmental similarity (Elith, Kearney &
                Phillips 2010): 100 at the training medians, 0 at the edge of
                the sampled conditions, negative beyond them.
``most_dissimilar_predictor``  the covariate that sets the MESS.
``novel``       true where MESS < 0: the site lies outside the sampled
                conditions and its prediction is an extrapolation.
``reason``      empty, or why the prediction is missing ("missing value in
                soil_ph", "unknown level 'peat' of bedrock", ...).

Only the columns of terms in the model are needed. Range, MESS and novelty
are computed from the numeric covariates that could be read; MESS and
``novel`` are empty when one of them is missing.

Survey effort: with an effort rule, ``log(effort)`` is added to the link,
so a count prediction is for that row's effort; a missing, zero or negative
effort is a reason. When the table has no effort column at all, predictions
are per unit of effort (offset 0) and ``result.attrs["notes"]`` says so. A
plain offset column is required and added as it is.
"""

from __future__ import annotations

import os
from collections.abc import Sequence
from pathlib import Path

import numpy as np
import pandas as pd
from scipy.special import expit

from .data.design import Term, apply_design
from .data.intake import PARQUET_SUFFIXES, as_labels, describe_values, parse_numbers, read_table
from .diagnostics.extrapolation import mess, outside_range
from .errors import InputError, setting
from .outputs.folder import os_error_line
from .outputs.model_file import check_document, load_model_document, write_atomically

KINDS = ("response", "link", "both")
# The inverse of each link a model file may record, exactly as written: no cap, so a
# linear predictor too large for a number is found and said, never clipped.
INVERSE_LINKS = {"identity": lambda eta: eta, "logit": expit, "log": np.exp}
FLAG_COLUMNS = ("n_outside_range", "most_extreme_predictor", "distance_outside", "mess",
                "most_dissimilar_predictor", "novel", "reason")


class Model:
    """A chosen model read from a checked model document."""

    def __init__(self, document: dict, *, source: str = "the model document"):
        check_document(document, source)
        self.document = document
        self.source = source
        self.family = document["family"]
        self.inverse_link = INVERSE_LINKS[document["link"]]
        self.response_name = document["response"]["name"]
        self.intercept = float(document["intercept"])
        self.offset_rule = document["offset"]
        self.reference_levels = dict(document["reference_levels"])
        self.terms = tuple(
            Term(name=t["name"], kind=t["kind"], sources=tuple(t["sources"]), level=t["level"],
                 group=t["group"], centers=tuple(float(c) for c in t["centers"]))
            for t in document["terms"])
        self.coef = np.array([float(t["coefficient"]) for t in document["terms"]])
        training = document["training"]
        self.factors = {source: set(summary["levels"])
                        for source, summary in training["categorical"].items()
                        if source in self._used_sources()}
        self.numeric = [source for source in self._used_sources() if source not in self.factors]
        self.ranges = np.array([[training["numeric"][s]["min"], training["numeric"][s]["max"]]
                                for s in self.numeric], dtype=np.float64).reshape(-1, 2)
        self.percentiles = np.array([training["numeric"][s]["percentiles"] for s in self.numeric],
                                    dtype=np.float64).reshape(len(self.numeric), -1)

    def _used_sources(self) -> list[str]:
        active = [term for term, b in zip(self.terms, self.coef) if b != 0]
        return list(dict.fromkeys(source for term in active for source in term.sources))

    @property
    def active_terms(self) -> tuple[Term, ...]:
        """The terms with a non-zero coefficient."""
        return tuple(term for term, b in zip(self.terms, self.coef) if b != 0)

    @property
    def required_columns(self) -> list[str]:
        """Columns a table of new sites must have (effort is optional)."""
        needed = self._used_sources()
        if self.offset_rule is not None and self.offset_rule["kind"] == "offset":
            needed.append(self.offset_rule["column"])
        return needed

    def _repr_html_(self) -> str:
        """A compact summary in notebooks: family, response, terms, offset, source."""
        from .report.notebook import model_html
        return model_html(self)

    def predict(self, frame: pd.DataFrame, *, kind: str = "response") -> pd.DataFrame:
        """Predictions and extrapolation flags for every row of ``frame`` (see module notes)."""
        if kind not in KINDS:
            raise InputError(f"kind must be one of {', '.join(KINDS)}, not '{kind}'")
        if not isinstance(frame, pd.DataFrame):
            raise InputError(f"expected a table (pandas DataFrame) of new sites, got "
                             f"{type(frame).__name__}; read the file with read_table first")
        self._check_columns(frame)
        n = len(frame)
        reasons = [[] for _ in range(n)]
        clean = {}
        for name in self._used_sources():
            if name in self.factors:
                clean[name] = _read_factor(frame[name], name, self.factors[name], reasons)
            else:
                clean[name] = _read_covariate(frame[name], name, reasons)
        offset, notes = self._offset(frame, reasons)

        terms, coef = self._terms_to_build()
        levels = {k: v for k, v in self.reference_levels.items() if k in self.factors}
        X = apply_design(terms, levels, pd.DataFrame(clean, index=frame.index), allow_unknown=True)
        with np.errstate(over="ignore", invalid="ignore"):
            eta = self.intercept + X @ coef + offset
        unusable = np.array([bool(r) for r in reasons], dtype=bool)
        eta[unusable] = np.nan
        with np.errstate(over="ignore", invalid="ignore"):
            mean = self.inverse_link(eta)
        _explain_overflow(eta, mean, X, coef, terms, clean, reasons)
        eta[~np.isfinite(mean)] = np.nan
        mean = np.where(np.isfinite(mean), mean, np.nan)

        out = pd.DataFrame(index=frame.index)
        if kind in ("response", "both"):
            out["prediction"] = mean
        if kind in ("link", "both"):
            out["link"] = eta
        for column, values in self._flags(clean, n).items():
            out[column] = values
        out["reason"] = ["; ".join(r) for r in reasons]
        out.attrs["notes"] = tuple(notes)
        return out

    def _terms_to_build(self) -> tuple[tuple[Term, ...], np.ndarray]:
        """The terms with a non-zero coefficient, and every level of a factor in use.

        A level whose indicator the fit set to zero is still a level seen in
        training: its sites are predicted as the reference level is. Its
        indicator is built (with coefficient 0) so that it is known.
        """
        keep = [b != 0 or (term.kind == "level" and term.sources[0] in self.factors)
                for term, b in zip(self.terms, self.coef)]
        terms = tuple(term for term, k in zip(self.terms, keep) if k)
        return terms, self.coef[np.array(keep, dtype=bool)]

    def _check_columns(self, frame: pd.DataFrame) -> None:
        absent = [name for name in self.required_columns if name not in frame.columns]
        if absent:
            listed = ", ".join(f"'{name}'" for name in absent)
            word = "column" if len(absent) == 1 else "columns"
            raise InputError(
                f"the table of new sites lacks the {word} {listed} that the model uses; add "
                f"{'it' if len(absent) == 1 else 'them'} with the same name and units as in "
                "the survey the model was fitted to")

    def _offset(self, frame: pd.DataFrame, reasons: list) -> tuple[np.ndarray, list[str]]:
        n = len(frame)
        rule = self.offset_rule
        if rule is None:
            return np.zeros(n), []
        column = rule["column"]
        if rule["kind"] == "effort" and column not in frame.columns:
            return np.zeros(n), [
                f"the table has no effort column '{column}': predictions are per unit of "
                f"effort (as if '{column}' were 1 at every site)"]
        values, not_numbers = parse_numbers(frame[column])
        cells = frame[column].to_numpy(dtype=object)
        role = "effort" if rule["kind"] == "effort" else "offset"
        for i in range(n):
            if not_numbers[i]:
                shown = describe_values([cells[i]])
                reasons[i].append(f"{role} '{column}' is not a number ({shown})")
            elif np.isnan(values[i]):
                reasons[i].append(f"missing {role} '{column}'")
            elif np.isinf(values[i]):
                reasons[i].append(f"{role} '{column}' is infinite")
            elif role == "effort" and values[i] <= 0:
                reasons[i].append(f"effort '{column}' is {values[i]:g}; it must be positive")
        if role == "offset":
            return np.where(np.isfinite(values), values, 0.0), []
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(np.isfinite(values) & (values > 0), np.log(values), 0.0), []

    def _flags(self, clean: dict, n: int) -> dict:
        names = np.array(self.numeric + [""], dtype=object)  # index -1 -> ""
        values = np.column_stack([clean[s] for s in self.numeric]) if self.numeric \
            else np.empty((n, 0))
        count, extreme, distance = outside_range(values, self.ranges)
        scores, dissimilar = mess(values, self.percentiles, self.ranges)
        novel = pd.array(np.where(np.isnan(scores), None, scores < 0), dtype="boolean")
        return {"n_outside_range": count, "most_extreme_predictor": names[extreme],
                "distance_outside": distance, "mess": scores,
                "most_dissimilar_predictor": names[dissimilar], "novel": novel}


def _explain_overflow(eta, mean, X, coef, terms, clean, reasons) -> None:
    """A reason for each row whose prediction is not a finite number though its values were read.

    That happens only when a covariate is so far outside the training range
    that the linear predictor or its inverse overflows; the term that
    contributes most is named, with the value that drives it.
    """
    rows = np.flatnonzero(~np.isfinite(mean) & np.array([not r for r in reasons], dtype=bool))
    for i in rows:
        with np.errstate(over="ignore", invalid="ignore"):
            size = np.abs(X[i] * coef)
        size = np.where(np.isnan(size), np.inf, size)
        term = terms[int(np.argmax(size))] if size.size else None
        if term is None:
            reasons[i].append("the prediction is not a finite number")
            continue
        shown = ", ".join(f"{source} = {clean[source][i]:g}" for source in term.sources
                          if source in clean and np.ndim(clean[source][i]) == 0
                          and isinstance(clean[source][i], (float, np.floating)))
        reasons[i].append(
            f"the prediction overflows: {shown or term.name} is far outside the training "
            "range (check its units or a no-data code)")


def _read_covariate(series: pd.Series, name: str, reasons: list) -> np.ndarray:
    """A numeric covariate with NaN where it cannot be used; the reasons per row."""
    values, not_numbers = parse_numbers(series)
    cells = series.to_numpy(dtype=object)
    for i in np.flatnonzero(not_numbers | np.isnan(values) | np.isinf(values)):
        if not_numbers[i]:
            reasons[i].append(f"{name} is not a number ({describe_values([cells[i]])})")
        elif np.isinf(values[i]):
            reasons[i].append(f"infinite value in {name}")
        else:
            reasons[i].append(f"missing value in {name}")
    return np.where(np.isfinite(values), values, np.nan)


def _read_factor(series: pd.Series, name: str, known: set, reasons: list) -> np.ndarray:
    """A factor's labels (object array); missing and unseen levels get a reason."""
    labels = as_labels(series)
    for i, label in enumerate(labels):
        if label is None:
            reasons[i].append(f"missing value in {name}")
        elif label not in known:
            reasons[i].append(f"unknown level '{label}' of {name}")
    return labels


def load_model(path: str | os.PathLike[str]) -> Model:
    """Read and check a model file."""
    return Model(load_model_document(path), source=f"model file {Path(path).expanduser()}")


def _check_out_path(out_path, data_path, model_path, overwrite=False) -> Path:
    out = Path(out_path).expanduser()
    if out.is_dir():
        raise InputError(f"{out} is a folder; give --out a file name such as predictions.csv")
    for given, what in ((data_path, "the table of new sites"), (model_path, "the model file")):
        source = Path(given).expanduser()
        if out.resolve() == source.resolve() or (out.exists() and source.exists()
                                                 and out.samefile(source)):
            raise InputError(f"the output file {out} is {what}, which is never overwritten; "
                             "give --out another name such as predictions.csv")
    if out.suffix.lower() in PARQUET_SUFFIXES:
        raise InputError(f"the output file {out} is named as Parquet, but predictions are "
                         "written as CSV; give a name ending in .csv")
    if not out.parent.is_dir():
        raise InputError(f"the folder of the output file {out} does not exist; create it first")
    if out.exists() and not overwrite:
        raise InputError(f"the output file {out} already exists; choose another name, or "
                         + setting("give overwrite=True", "add --overwrite") + " to replace it")
    return out


def predict_table(model_path: str | os.PathLike[str], data_path: str | os.PathLike[str],
                  out_path: str | os.PathLike[str] | None = None, *, decimal: str | None = None,
                  na_values: Sequence[str | float] | None = None, kind: str = "response",
                  overwrite: bool = False) -> pd.DataFrame:
    """Predict at the sites of a table file; optionally write them as CSV.

    The model file is read and checked first, then the table (CSV or Parquet,
    read by ``read_table``; the file is never changed). Returns every input
    column followed by the prediction columns, one row per input row; with
    ``out_path`` the same table is written as CSV (complete or not at all;
    never over the input or the model file), with the delimiter and decimal
    mark of an input CSV; an existing file is replaced only with
    ``overwrite=True``. ``na_values`` are no-data codes read as missing (see
    ``read_table``). ``result.attrs["notes"]`` lists plain facts about the
    run (delimiter, decimal mark, predictions per unit effort).
    """
    model = load_model(model_path)
    out = None if out_path is None else _check_out_path(out_path, data_path, model_path, overwrite)
    frame, info = read_table(data_path, decimal=decimal, na_values=na_values)
    predicted = model.predict(frame, kind=kind)
    clash = [name for name in predicted.columns if name in frame.columns]
    if clash:
        listed = ", ".join(f"'{name}'" for name in clash)
        raise InputError(f"the table already has column(s) {listed}, which the predictions "
                         "would repeat; rename them, or predict from the original table")
    result = pd.concat([frame, predicted], axis=1)
    result.attrs["notes"] = tuple(info.notes) + tuple(predicted.attrs.get("notes", ()))
    if out is not None:
        sep = info.delimiter or ","
        text = result.to_csv(index=False, sep=sep, decimal=info.decimal or ".",
                             lineterminator="\n")
        try:
            write_atomically(out, text)
        except OSError as error:
            raise InputError(os_error_line(error, out, "write")) from None
    return result


def prediction_summary(result: pd.DataFrame) -> str:
    """One plain line about a prediction table, for the terminal."""
    n = len(result)
    made = result["prediction"] if "prediction" in result.columns else result["link"]
    missing = n - int(made.notna().sum())
    outside = int((result["n_outside_range"] > 0).sum())
    novel = int(result["novel"].fillna(False).sum())
    parts = [f"{n - missing} of {n} sites predicted"]
    if missing:
        parts.append(f"{missing} could not be (see the reason column)")
    parts.append(f"{outside} lie outside the training range of at least one covariate")
    parts.append(f"{novel} are novel (MESS < 0): treat those predictions as extrapolation")
    return "; ".join(parts)
