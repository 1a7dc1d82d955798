"""The model file: one chosen model, written as plain JSON that anyone can read.

The file holds everything needed to predict at new sites and to warn when
they lie outside the sampled conditions, and nothing else: no survey rows.
Any language can use it: build each term from the input columns as its
record says, form ``link = intercept + sum(coefficient * term) + offset`` and
take the inverse link.

Schema "pathfinder-model", version 1.0
--------------------------------------
A JSON object with these keys (readers ignore keys they do not know, so a
minor version may add keys; a new major version changes their meaning and
older readers refuse it):

``schema``          "pathfinder-model".
``schema_version``  "MAJOR.MINOR", here "1.0".
``written_by``      ``{"package": "pathfinder", "version": "0.1.0"}``.
``family``          "gaussian", "binomial" or "poisson".
``link``            the link of that family: "identity", "logit" or "log".
``response``        ``{"name": column, "labels": null | {"0": label, "1": label},
                    "prediction": plain words for what a prediction is}``.
                    ``labels`` gives the text coded 0 and 1 when a
                    presence/absence response was written as labels; a
                    binomial prediction is the probability of the label coded 1.
``intercept``       the intercept (a number).
``terms``           a list, one object per column of the design, in order:
                    ``name`` ("temp", "bedrock=chalk", "temp^2", "temp:rain");
                    ``kind``: "numeric" (the column as it is), "level" (1 where
                    the factor ``sources[0]`` equals ``level``, else 0),
                    "square" (``(x - centers[0])^2``) or "interaction"
                    (``(a - centers[0]) * (b - centers[1])``);
                    ``sources``: the input columns (one, or two for an
                    interaction); ``level``: the indicated level (null unless
                    kind is "level"); ``centers``: the training means subtracted
                    first (empty unless square or interaction); ``group``: the
                    predictor the term belongs to; ``coefficient``: in the
                    original units of the term; ``in_model``: true when the
                    coefficient is not zero; ``range``: [min, max] of the term
                    over the training rows.
``reference_levels`` factor -> its reference level (the level with no term).
``offset``          null, ``{"kind": "effort", "column": c, "transform": "log"}``
                    (log of survey effort is added to the link) or
                    ``{"kind": "offset", "column": c}`` (added as it is).
``training``        what the sites the model learned from looked like, for
                    every input column used by a term in the model:
                    ``rows`` (number of training rows); ``weighted`` (whether
                    observation weights shaped the percentiles; rows of zero
                    weight are left out of the summaries);
                    ``numeric``: column -> ``{"min", "max", "percentiles"}``
                    with the 101 percentiles 0, 1, ..., 100 (for MESS and the
                    range check, see ``diagnostics/extrapolation.py``);
                    ``categorical``: column -> ``{"levels": [...]}`` (every
                    level seen, reference level included).
``pick``            the choice the model came from: ``method`` (lasso,
                    elastic net, ridge, relaxed lasso), ``rule`` (such as
                    "min" or "one_se"), ``mix``, ``penalty``, ``relaxation``
                    (null unless relaxed lasso), and any further plain fields
                    the writer adds (such as the cross-validated score).

:func:`model_document` builds the object, :func:`save_model` writes it
(complete or not at all) and :func:`load_model_document` reads one back and
checks it, stopping at the first problem with one line naming the file and
the key.
"""

from __future__ import annotations

import json
import math
import os
import tempfile
from pathlib import Path

import numpy as np

from ..core.families import FAMILIES, get_family
from ..data.design import Term, apply_design
from ..data.intake import parse_numbers
from ..diagnostics.extrapolation import N_PERCENTILES, training_percentiles
from ..errors import InputError

SCHEMA = "pathfinder-model"
SCHEMA_VERSION = "1.0"
READS_MAJOR = 1
KINDS = ("numeric", "level", "square", "interaction")
N_SOURCES = {"numeric": 1, "level": 1, "square": 1, "interaction": 2}
N_CENTERS = {"numeric": 0, "level": 0, "square": 1, "interaction": 2}
LINKS = {name: family.link_name for name, family in FAMILIES.items()}
REQUIRED_PICK = ("method", "rule", "mix", "penalty")


# ---------------------------------------------------------------------------
# Building the document
# ---------------------------------------------------------------------------


def model_document(*, family, response_name, response_labels, terms, reference_levels, intercept,
                   coef, offset_rule, training_frame, training_X, weights=None, pick: dict,
                   package_version: str, theta=None) -> dict:
    """The JSON-ready model file of one chosen model (see the module notes).

    ``terms`` and ``reference_levels`` come from the design, ``training_X``
    is its matrix on ``training_frame`` (the kept rows and predictors of the
    survey), ``intercept`` and ``coef`` are the chosen model in original
    units, ``weights`` the observation weights (or None), ``pick`` at least
    method, rule, mix and penalty. Raises ValueError when the pieces do not
    fit together (a wiring fault, not a user's).
    """
    terms = tuple(terms)
    coef = np.asarray(coef, dtype=np.float64).ravel()
    X = np.asarray(training_X, dtype=np.float64)
    n = len(training_frame)
    if coef.shape != (len(terms),):
        raise ValueError(f"coef has {coef.size} values for {len(terms)} terms")
    if X.shape != (n, len(terms)):
        raise ValueError(f"training_X is {X.shape}; expected ({n}, {len(terms)})")
    if not np.all(np.isfinite(coef)) or not math.isfinite(float(intercept)):
        raise ValueError("the intercept and coefficients must be finite")
    w = None if weights is None else np.asarray(weights, dtype=np.float64).ravel()
    if w is not None and w.shape != (n,):
        raise ValueError(f"weights have {w.size} values for {n} training rows")
    rebuilt = apply_design(terms, reference_levels, training_frame)
    if not np.allclose(rebuilt, X, rtol=1e-12, atol=0.0):
        raise ValueError("training_X is not the design of these terms on training_frame")

    used = w > 0 if w is not None else np.ones(n, dtype=bool)
    factors = _factor_names(terms, reference_levels)
    active = [term for term, b in zip(terms, coef) if b != 0]
    numeric, categorical = {}, {}
    for name in dict.fromkeys(source for term in active for source in term.sources):
        if name in factors:
            levels = {str(reference_levels[name])} if name in reference_levels else set()
            levels |= {t.level for t in terms if t.kind == "level" and t.sources[0] == name}
            categorical[name] = {"levels": sorted(levels)}
        else:
            values, _ = parse_numbers(training_frame[name])
            table = training_percentiles(values[used], None if w is None else w[used])
            numeric[name] = {"min": float(table[0]), "max": float(table[-1]),
                             "percentiles": [float(v) for v in table]}

    labels = None
    if response_labels is not None:
        zero, one = response_labels
        labels = {"0": str(zero), "1": str(one)}
    doc = {
        "schema": SCHEMA,
        "schema_version": SCHEMA_VERSION,
        "written_by": {"package": "pathfinder", "version": str(package_version)},
        "family": str(family),
        **({} if theta is None else {"theta": float(theta)}),
        "link": LINKS.get(str(family), ""),
        "response": {"name": str(response_name), "labels": labels,
                     "prediction": _prediction_meaning(str(family), str(response_name), labels,
                                                       offset_rule)},
        "intercept": float(intercept),
        "terms": [_term_record(term, float(b), X[used, j]) for j, (term, b) in
                  enumerate(zip(terms, coef))],
        "reference_levels": {str(k): str(v) for k, v in reference_levels.items()},
        "offset": None if offset_rule is None else dict(offset_rule),
        "training": {"rows": int(n), "weighted": w is not None,
                     "numeric": numeric, "categorical": categorical},
        "pick": _pick_record(pick),
    }
    check_document(doc, "the model document")
    return doc


def _factor_names(terms, reference_levels) -> set:
    return {term.sources[0] for term in terms if term.kind == "level"} | set(reference_levels)


def _term_record(term: Term, coefficient: float, column: np.ndarray) -> dict:
    return {
        "name": term.name,
        "kind": term.kind,
        "sources": list(term.sources),
        "level": term.level,
        "centers": [float(c) for c in term.centers],
        "group": term.group,
        "coefficient": coefficient,
        "in_model": coefficient != 0,
        "range": [float(column.min()), float(column.max())] if column.size else [0.0, 0.0],
    }


def _pick_record(pick: dict) -> dict:
    missing = [key for key in REQUIRED_PICK if key not in pick]
    if missing:
        raise ValueError(f"pick lacks {', '.join(missing)}")
    out = {"method": str(pick["method"]), "rule": str(pick["rule"]),
           "mix": _number_or_none(pick["mix"]), "penalty": _number_or_none(pick["penalty"]),
           "relaxation": None if pick.get("relaxation") is None else float(pick["relaxation"])}
    for key, value in pick.items():
        if key in out:
            continue
        if isinstance(value, np.generic):
            value = value.item()
        if isinstance(value, float) and not np.isfinite(value):
            value = None
        if not (value is None or isinstance(value, (str, bool, int, float))):
            raise ValueError(f"pick field {key!r} must be a plain value, "
                             f"not {type(value).__name__}")
        out[str(key)] = value
    return out


def _number_or_none(value):
    """A finite number, or None for a method without it (subsets have no penalty)."""
    if value is None:
        return None
    value = float(value)
    return value if np.isfinite(value) else None


def _prediction_meaning(family, response, labels, offset_rule) -> str:
    fam = get_family(family)
    if fam.binary:
        what = f"'{labels['1']}'" if labels else "1"
        return f"probability that {response} is {what}"
    if fam.counts:
        per = ""
        if offset_rule and offset_rule.get("kind") == "effort":
            per = f" for the survey effort in '{offset_rule['column']}'"
        return f"expected count of {response}{per}"
    return f"expected value of {response}"


# ---------------------------------------------------------------------------
# Writing and reading
# ---------------------------------------------------------------------------


def write_atomically(path, text: str) -> Path:
    """Write ``text`` to ``path`` through a temporary file renamed into place.

    A reader never sees half a file, and an interrupted write leaves any
    earlier file as it was.
    """
    path = Path(path)
    folder = path.parent if str(path.parent) else Path(".")
    handle, temp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".partial", dir=folder)
    try:
        with os.fdopen(handle, "w", encoding="utf-8", newline="") as out:
            out.write(text)
        os.replace(temp, path)
    except BaseException:
        Path(temp).unlink(missing_ok=True)
        raise
    return path


def save_model(doc: dict, path) -> Path:
    """Check ``doc`` and write it as JSON to ``path`` (complete or not at all)."""
    check_document(doc, "the model document")
    path = Path(path)
    if path.is_dir():
        raise InputError(f"{path} is a folder; give the model file a name such as model.json")
    if not path.parent.is_dir():
        raise InputError(f"the folder of {path} does not exist; create it first")
    text = json.dumps(doc, indent=2, allow_nan=False) + "\n"
    return write_atomically(path, text)


def load_model_document(path) -> dict:
    """Read a model file and check it; any problem is one InputError line."""
    file = Path(path).expanduser()
    if not file.exists():
        raise InputError(f"model file not found: {file}; give the model.json written by "
                         "pathfinder explore")
    if file.is_dir():
        raise InputError(f"{file} is a folder; give the model.json file inside it")
    try:
        text = file.read_text(encoding="utf-8")
    except UnicodeDecodeError as exc:
        raise InputError(f"model file {file} is not UTF-8 text; give the model.json written "
                         "by pathfinder explore") from exc
    except OSError as exc:
        raise InputError(f"cannot read model file {file} ({exc.strerror or exc}); check that "
                         "you may read it") from exc
    try:
        doc = json.loads(text)
    except json.JSONDecodeError as exc:
        raise InputError(f"model file {file} is not valid JSON ({exc.msg} at line {exc.lineno}, "
                         f"column {exc.colno}); write it again with pathfinder explore") from exc
    check_document(doc, f"model file {file}")
    return doc


# ---------------------------------------------------------------------------
# Checking
# ---------------------------------------------------------------------------


class _Checker:
    """Small helpers that raise one InputError line naming the file and key."""

    def __init__(self, where: str):
        self.where = where

    def fail(self, key: str, problem: str, remedy: str = "write it again with pathfinder explore"):
        raise InputError(f"{self.where}: '{key}' {problem}; {remedy}")

    def get(self, obj: dict, key: str, path: str):
        if key not in obj:
            self.fail(path, "is missing")
        return obj[key]

    def text(self, value, path: str) -> str:
        if not isinstance(value, str):
            self.fail(path, f"must be text, not {_shown(value)}")
        return value

    def number(self, value, path: str) -> float:
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            self.fail(path, f"must be a number, not {_shown(value)}")
        if not math.isfinite(value):
            self.fail(path, f"must be a finite number, not {value}")
        return float(value)

    def obj(self, value, path: str) -> dict:
        if not isinstance(value, dict):
            self.fail(path, f"must be an object ({{...}}), not {_shown(value)}")
        return value

    def array(self, value, path: str) -> list:
        if not isinstance(value, list):
            self.fail(path, f"must be a list ([...]), not {_shown(value)}")
        return value


def _shown(value) -> str:
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return f"text '{value[:40]}'"
    if isinstance(value, (int, float)):
        return f"{value!r}"
    return {"list": "a list", "dict": "an object"}.get(type(value).__name__, type(value).__name__)


def check_document(doc, where: str) -> None:
    """Check a model document; the first problem raises one InputError line.

    ``where`` names the file (or the document) in the message.
    """
    c = _Checker(where)
    if not isinstance(doc, dict):
        raise InputError(f"{where} does not hold a JSON object; give the model.json written "
                         "by pathfinder explore")
    _check_schema(doc, c)
    family = c.text(c.get(doc, "family", "family"), "family")
    if family not in FAMILIES:
        c.fail("family", f"is '{family}'; expected one of {', '.join(FAMILIES)}")
    if "theta" in doc:
        c.number(doc["theta"], "theta")
    link = c.text(c.get(doc, "link", "link"), "link")
    if link != LINKS[family]:
        c.fail("link", f"is '{link}' but a {family} model uses '{LINKS[family]}'")
    _check_response(c.obj(c.get(doc, "response", "response"), "response"), c)
    c.number(c.get(doc, "intercept", "intercept"), "intercept")
    reference = c.obj(c.get(doc, "reference_levels", "reference_levels"), "reference_levels")
    for factor, level in reference.items():
        c.text(level, f"reference_levels.{factor}")
    terms = c.array(c.get(doc, "terms", "terms"), "terms")
    names = set()
    for j, term in enumerate(terms):
        name = _check_term(c.obj(term, f"terms[{j}]"), f"terms[{j}]", c)
        if name in names:
            c.fail(f"terms[{j}].name", f"repeats the term name '{name}'")
        names.add(name)
    _check_offset(c.get(doc, "offset", "offset"), c)
    _check_training(c.obj(c.get(doc, "training", "training"), "training"), terms, reference, c)
    _check_pick(c.obj(c.get(doc, "pick", "pick"), "pick"), c)


def _check_schema(doc: dict, c: _Checker) -> None:
    schema = doc.get("schema")
    if schema != SCHEMA:
        c.fail("schema", f"is {_shown(schema)}, so this is not a pathfinder model file "
               f"(expected '{SCHEMA}')", "give the model.json written by pathfinder explore")
    version = c.text(c.get(doc, "schema_version", "schema_version"), "schema_version")
    parts = version.split(".")
    if len(parts) != 2 or not all(part.isdigit() for part in parts):
        c.fail("schema_version", f"is '{version}'; expected MAJOR.MINOR such as '{SCHEMA_VERSION}'")
    major = int(parts[0])
    if major > READS_MAJOR:
        c.fail("schema_version", f"is {version}, newer than this pathfinder reads (model files "
               f"of version {READS_MAJOR}.x)", "update pathfinder to read it")
    if major < READS_MAJOR:
        c.fail("schema_version", f"is {version}, older than this pathfinder reads (model files "
               f"of version {READS_MAJOR}.x)")


def _check_response(response: dict, c: _Checker) -> None:
    c.text(c.get(response, "name", "response.name"), "response.name")
    labels = c.get(response, "labels", "response.labels")
    if labels is not None:
        labels = c.obj(labels, "response.labels")
        for code in ("0", "1"):
            c.text(c.get(labels, code, f"response.labels.{code}"), f"response.labels.{code}")


def _sized(term: dict, key: str, size: int, what: str, kind: str, path: str, c: "_Checker") -> list:
    """The list ``term[key]``, refused unless it holds the ``size`` items a ``kind`` term has."""
    items = c.array(c.get(term, key, f"{path}.{key}"), f"{path}.{key}")
    if len(items) != size:
        c.fail(f"{path}.{key}", f"holds {len(items)} {what}; a {kind} term has {size}")
    return items


def _check_term(term: dict, path: str, c: _Checker) -> str:
    name = c.text(c.get(term, "name", f"{path}.name"), f"{path}.name")
    kind = c.text(c.get(term, "kind", f"{path}.kind"), f"{path}.kind")
    if kind not in KINDS:
        c.fail(f"{path}.kind", f"is '{kind}'; expected one of {', '.join(KINDS)}")
    for k, source in enumerate(_sized(term, "sources", N_SOURCES[kind], "column(s)", kind, path, c)):
        c.text(source, f"{path}.sources[{k}]")
    level = c.get(term, "level", f"{path}.level")
    if kind == "level":
        c.text(level, f"{path}.level")
    elif level is not None:
        c.fail(f"{path}.level", f"must be null for a {kind} term")
    for k, center in enumerate(_sized(term, "centers", N_CENTERS[kind], "value(s)", kind, path, c)):
        c.number(center, f"{path}.centers[{k}]")
    c.text(c.get(term, "group", f"{path}.group"), f"{path}.group")
    coefficient = c.number(c.get(term, "coefficient", f"{path}.coefficient"), f"{path}.coefficient")
    in_model = c.get(term, "in_model", f"{path}.in_model")
    if not isinstance(in_model, bool):
        c.fail(f"{path}.in_model", f"must be true or false, not {_shown(in_model)}")
    if in_model != (coefficient != 0):
        c.fail(f"{path}.in_model", f"is {_shown(in_model)} but the coefficient is {coefficient!r}")
    return name


def _check_offset(offset, c: _Checker) -> None:
    if offset is None:
        return
    offset = c.obj(offset, "offset")
    kind = c.text(c.get(offset, "kind", "offset.kind"), "offset.kind")
    c.text(c.get(offset, "column", "offset.column"), "offset.column")
    if kind == "effort":
        transform = c.get(offset, "transform", "offset.transform")
        if transform != "log":
            c.fail("offset.transform", f"is {_shown(transform)}; an effort offset is 'log'")
    elif kind != "offset":
        c.fail("offset.kind", f"is '{kind}'; expected 'effort' or 'offset'")


def _check_training(training: dict, terms: list, reference: dict, c: _Checker) -> None:
    rows = c.get(training, "rows", "training.rows")
    if isinstance(rows, bool) or not isinstance(rows, int) or rows < 1:
        c.fail("training.rows", f"must be a positive whole number, not {_shown(rows)}")
    if not isinstance(c.get(training, "weighted", "training.weighted"), bool):
        c.fail("training.weighted", "must be true or false")
    numeric = c.obj(c.get(training, "numeric", "training.numeric"), "training.numeric")
    categorical = c.obj(c.get(training, "categorical", "training.categorical"),
                        "training.categorical")
    for name, summary in numeric.items():
        path = f"training.numeric.{name}"
        summary = c.obj(summary, path)
        low = c.number(c.get(summary, "min", f"{path}.min"), f"{path}.min")
        high = c.number(c.get(summary, "max", f"{path}.max"), f"{path}.max")
        table = c.array(c.get(summary, "percentiles", f"{path}.percentiles"), f"{path}.percentiles")
        if len(table) != N_PERCENTILES:
            c.fail(f"{path}.percentiles", f"holds {len(table)} values; expected {N_PERCENTILES} "
                   "(percentiles 0 to 100)")
        values = [c.number(v, f"{path}.percentiles[{k}]") for k, v in enumerate(table)]
        if any(b < a for a, b in zip(values, values[1:])):
            c.fail(f"{path}.percentiles", "must not decrease")
        if values[0] != low or values[-1] != high:
            c.fail(f"{path}.percentiles", "must start at min and end at max")
    for name, summary in categorical.items():
        path = f"training.categorical.{name}"
        summary = c.obj(summary, path)
        levels = c.array(c.get(summary, "levels", f"{path}.levels"), f"{path}.levels")
        for k, level in enumerate(levels):
            c.text(level, f"{path}.levels[{k}]")
    factors = {t["sources"][0] for t in terms if t["kind"] == "level"} | set(reference)
    for j, term in enumerate(terms):
        if not term["in_model"]:
            continue
        for source in term["sources"]:
            is_factor = source in factors
            if is_factor and term["kind"] != "level":
                c.fail(f"terms[{j}].sources",
                       f"uses the factor '{source}' in a {term['kind']} term")
            summaries = categorical if is_factor else numeric
            part = "categorical" if is_factor else "numeric"
            if source not in summaries:
                c.fail(f"training.{part}.{source}", "is missing (the model uses that column)")
            if is_factor and term["level"] not in summaries[source]["levels"]:
                c.fail(f"training.categorical.{source}.levels",
                       f"lacks the level '{term['level']}' of term '{term['name']}'")


def _check_pick(pick: dict, c: _Checker) -> None:
    c.text(c.get(pick, "method", "pick.method"), "pick.method")
    c.text(c.get(pick, "rule", "pick.rule"), "pick.rule")
    for key in ("mix", "penalty"):   # null for methods without a penalty
        value = c.get(pick, key, f"pick.{key}")
        if value is not None:
            c.number(value, f"pick.{key}")
    relaxation = pick.get("relaxation")
    if relaxation is not None:
        c.number(relaxation, "pick.relaxation")
