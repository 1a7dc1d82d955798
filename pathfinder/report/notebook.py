"""Compact HTML summaries for notebooks: a study, a path, a loaded model.

Jupyter shows an object through its ``_repr_html_`` method; those of
:class:`pathfinder.Study`, :class:`pathfinder.PathResult` and the model that
:func:`pathfinder.load_model` returns call the functions here. They read
plain attributes and result tables only (this module computes nothing), and
write one self-contained block of HTML: no script, no style sheet from
elsewhere, so it shows the same offline and in a saved notebook.

Charts are drawn only when asked: ``show(study, charts=True)`` adds the
cross-validation curves, the comparison of methods and the chosen model's
coefficients as inline SVG (drawn by vl-convert, offline). A chart that cannot
be drawn is named with the reason, never left out silently.
"""

from __future__ import annotations

import html
from typing import Any, Callable

import numpy as np
import pandas as pd

from ..errors import InputError

MAX_TERMS_SHOWN = 25    # terms listed in a summary before "and N more"
MAX_NOTES_SHOWN = 8     # notes listed before "and N more"
PATH_ROWS = 8           # steps of a path shown in its summary table

_STYLE = ("font-family: system-ui, sans-serif; font-size: 13px; line-height: 1.4; "
          "max-width: 60em; border-left: 3px solid #2f6f4f; padding: 0.2em 0 0.2em 0.8em;")
_CELL = "padding: 0.1em 0.7em; text-align: left; border-bottom: 1px solid #ddd;"


# ---- small pieces -------------------------------------------------------------------

def _esc(value: Any) -> str:
    return html.escape(str(value))


def _num(value: Any, digits: int = 4) -> str:
    try:
        number = float(value)
    except (TypeError, ValueError):
        return _esc(value)
    if np.isnan(number):
        return ""
    return f"{number:.{digits}g}"


def _table(header: list[str], rows: list[list[str]]) -> str:
    head = "".join(f"<th style='{_CELL}'>{_esc(h)}</th>" for h in header)
    body = "".join("<tr>" + "".join(f"<td style='{_CELL}'>{cell}</td>" for cell in row) + "</tr>"
                   for row in rows)
    return f"<table style='border-collapse: collapse; margin: 0.3em 0; font-size: inherit;'><tr>{head}</tr>{body}</table>"


def _listing(items: list[str], limit: int) -> str:
    shown = ", ".join(_esc(i) for i in items[:limit])
    more = len(items) - limit
    return shown + (f" and {more} more" if more > 0 else "") if items else "none"


def _notes(title: str, notes: tuple | list) -> str:
    if not notes:
        return ""
    items = "".join(f"<li>{_esc(n)}</li>" for n in list(notes)[:MAX_NOTES_SHOWN])
    more = len(notes) - MAX_NOTES_SHOWN
    tail = f"<li>and {more} more</li>" if more > 0 else ""
    return f"<details><summary>{_esc(title)} ({len(notes)})</summary><ul>{items}{tail}</ul></details>"


def _block(title: str, parts: list[str]) -> str:
    return (f"<div class='pathfinder-summary' style='{_STYLE}'>"
            f"<div style='font-weight: 600; font-size: 14px;'>{_esc(title)}</div>"
            + "".join(p for p in parts if p) + "</div>")


def _line(label: str, value: str) -> str:
    return f"<div><span style='color: #555;'>{_esc(label)}:</span> {value}</div>"


def svg_chart(chart: Any) -> str:
    """An Altair chart as inline SVG, drawn offline by vl-convert with the report's look."""
    import vl_convert

    from . import vendor
    from .html import chart_spec

    return vl_convert.vegalite_to_svg(chart_spec(chart), vl_version=vendor.vegalite_version(),
                                      allowed_base_urls=[])


def _charts(drawings: list[tuple[str, Callable[[], Any]]]) -> str:
    parts = []
    for name, draw in drawings:
        try:
            parts.append(f"<div style='margin: 0.5em 0;'>{svg_chart(draw())}</div>")
        except (InputError, KeyError, ValueError) as problem:
            parts.append(f"<div><em>{_esc(name)} not drawn: {_esc(problem)}</em></div>")
    return "".join(parts)


# ---- a path ------------------------------------------------------------------------

def path_html(path: Any, charts: bool = False) -> str:
    """A fitted path: family, rows, grid, size and fit along it, how it ended, its warnings."""
    K = len(path.penalties)
    mix = float(path.mix)
    lines = [
        _line("family", _esc(str(path.family).replace("_", " "))
              + (f", theta {_num(path.theta)}" if path.theta is not None else "")),
        _line("rows", f"{int(path.n_obs):,}"),
        _line("terms", f"{len(path.names)} ({_listing(list(path.names), MAX_TERMS_SHOWN)})"),
        _line("mix", f"{mix:g} (1 lasso, 0 ridge, between an elastic net)"),
        _line("penalties", f"{K}, from {_num(path.penalties[0])} down to {_num(path.penalties[-1])}"),
        _line("ended", _esc(path.stop_reason)),
    ]
    steps = sorted(set(np.linspace(0, K - 1, min(PATH_ROWS, K)).round().astype(int)))
    rows = [[str(k), _num(path.penalties[k]), str(int(path.n_terms[k])),
             _num(path.deviance_explained[k], 3)] for k in steps]
    parts = lines + [_table(["step", "penalty", "terms", "deviance explained"], rows),
                     _notes("warnings", tuple(path.warnings))]
    if charts:
        from .charts import coefficient_paths

        def draw() -> Any:
            frame = path.to_frame()
            frame.insert(0, "mix", mix)
            frame.insert(0, "method", f"path (mix {mix:g})")
            return coefficient_paths(frame)
        parts.append(_charts([("coefficient paths", draw)]))
    return _block(f"pathfinder path: {len(path.names)} terms, {K} penalties", parts)


# ---- a study -----------------------------------------------------------------------

def _chosen_part(study: Any) -> str:
    chosen = study.chosen
    if chosen is None:
        return _line("suggested model", "none")
    terms = [n for n, b in zip(chosen.names, chosen.coef) if b != 0]
    how = f"{_esc(chosen.method)}, {_esc(chosen.rule)}"
    if chosen.penalty is not None and not (isinstance(chosen.penalty, float) and np.isnan(chosen.penalty)):
        how += f", penalty {_num(chosen.penalty)}"
    table = study.tables.get("chosen")
    rows = []
    if isinstance(table, pd.DataFrame) and len(table):
        for _, r in table.head(MAX_TERMS_SHOWN).iterrows():
            rows.append([_esc(r["term"]), _num(r["estimate"]), _num(r["estimate_std"])])
    coefficients = _table(["term", "estimate", "per SD"], rows) if rows else ""
    return (_line("suggested model", f"{how}; {len(terms)} terms: {_listing(terms, MAX_TERMS_SHOWN)}")
            + coefficients)


def _skill_part(tables: dict) -> str:
    skill = tables.get("skill")
    if not isinstance(skill, pd.DataFrame) or skill.empty:
        return ""
    rows = [[_esc(r["measure"]), _num(r["value"], 3), _num(r["se"], 2), _esc(r.get("scheme", ""))]
            for _, r in skill.iterrows()]
    return "<div>held-out skill of the suggested model:</div>" + _table(
        ["measure", "value", "SE", "folds"], rows)


def _picks_part(tables: dict) -> str:
    picks = tables.get("picks")
    if not isinstance(picks, pd.DataFrame) or picks.empty:
        return ""
    rows = [[_esc(r["method"]), _num(r["mix"], 3), _esc(r["rule"]), str(int(r["n_terms"])),
             _num(r["penalty"]), f"{_num(r['cv_mean'])} ± {_num(r['cv_se'], 2)}"]
            for _, r in picks.iterrows()]
    return "<div>cross-validation picks:</div>" + _table(
        ["method", "mix", "rule", "terms", "penalty", "held-out mean ± SE"], rows)


def _comparison_part(tables: dict) -> str:
    comparison = tables.get("comparison")
    if not isinstance(comparison, pd.DataFrame) or comparison.empty:
        return ""
    rows = [[_esc(r["method"]), _esc(r["rule"]), str(int(r["n_terms"])),
             f"{_num(r['outer_mean'])} ± {_num(r['outer_se'], 2)}"]
            for _, r in comparison.iterrows()]
    return "<div>methods judged on the same outer folds:</div>" + _table(
        ["method", "rule", "terms", "outer mean ± SE"], rows)


def study_html(study: Any, charts: bool = False) -> str:
    """A study: response and family, rows, the suggested model, its skill, picks, comparison, notes."""
    tables = study.tables
    family = study.family if study.family is not None else study.survey.family
    family_name = str(getattr(family, "name", family)).replace("_", " ")
    theta = getattr(family, "theta", None)
    lines = [
        _line("response", f"{_esc(study.options.response)} ({_esc(family_name)}"
              + (f", theta {_num(theta)}" if theta is not None else "") + ")"),
        _line("rows", f"{int(study.survey.n):,}"),
        _line("terms", str(len(study.design.names))),
        _line("folds", f"{int(study.folds.n_folds)} ({_esc(study.folds.scheme)})"),
        _chosen_part(study), _skill_part(tables), _picks_part(tables), _comparison_part(tables),
        _notes("warnings", tuple(study.warnings)), _notes("notes", tuple(study.notes)),
        "<div style='color: #555;'>the tables: <code>study.tables[name]</code> ("
        + _esc(", ".join(tables)) + ")</div>",
    ]
    if charts:
        from . import charts as drawing
        drawings: list[tuple[str, Callable[[], Any]]] = [
            ("cross-validation curves", lambda: drawing.cv_curve(tables["cv"], tables.get("picks")))]
        if "comparison" in tables:
            drawings.append(("comparison of methods", lambda: drawing.comparison_chart(tables["comparison"])))
        drawings.append(("the chosen model", lambda: drawing.chosen_coefficients(tables["chosen"])))
        lines.append(_charts(drawings))
    return _block(f"pathfinder study of {study.options.response}", lines)


# ---- a loaded model ----------------------------------------------------------------

def model_html(model: Any) -> str:
    """A model read from model.json: family, response, the terms it uses, its offset, its source."""
    document = model.document
    theta = document.get("theta")
    rows = [[_esc(t.name), _num(b)] for t, b in zip(model.terms, model.coef) if b != 0]
    offset = model.offset_rule
    offset_text = "none" if offset is None else _esc(
        f"log of {offset['column']}" if offset.get("kind") == "effort" else offset["column"])
    pick = document.get("pick") or {}
    lines = [
        _line("family", _esc(str(model.family).replace("_", " "))
              + (f", theta {_num(theta)}" if theta is not None else "")),
        _line("response", _esc(model.response_name)),
        _line("predicts", _esc(document["response"].get("prediction", ""))),
        _line("chosen by", _esc(", ".join(str(pick[k]) for k in ("method", "rule") if pick.get(k))
                                or "not recorded")),
        _line("trained on", f"{int(document['training']['rows']):,} rows"),
        _line("offset", offset_text),
        _line("needs the columns", _esc(", ".join(model.required_columns) or "none")),
        _line("intercept", _num(model.intercept)),
        _table(["term", "coefficient"], rows),
        _line("read from", _esc(model.source)),
    ]
    return _block(f"pathfinder model of {model.response_name}: {len(rows)} terms", lines)


# ---- asking for charts -------------------------------------------------------------

class Shown:
    """What :func:`show` returns: a notebook displays its HTML."""

    def __init__(self, text: str) -> None:
        self.text = text

    def _repr_html_(self) -> str:
        return self.text


def show(thing: Any, charts: bool = True) -> Shown:
    """A study, path or loaded model shown in a notebook, with its charts inline (``charts=True``)."""
    if hasattr(thing, "tables") and hasattr(thing, "chosen"):
        return Shown(study_html(thing, charts=charts))
    if hasattr(thing, "penalties") and hasattr(thing, "coef"):
        return Shown(path_html(thing, charts=charts))
    if hasattr(thing, "document") and hasattr(thing, "terms"):
        return Shown(model_html(thing))
    raise InputError(f"show: expected a study, a path or a loaded model, not {type(thing).__name__}")
