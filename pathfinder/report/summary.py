"""The report's first screen: what was found, how good it is, what to be careful about.

Read from the result tables and the run record only (nothing here computes a
model): the suggested model's predictors with the sign and size of each
effect and how often stability selection chose it (chosen.csv,
stability.csv); its held-out skill with the fold scheme (skill.csv); how the
other methods compared (comparison.csv); and the notes of the run that
change how the result reads. Every figure links to the section it comes from.
"""

from __future__ import annotations

import html

import numpy as np
import pandas as pd

from . import charts

MAX_ROWS = 9          # predictors listed on the first screen; the rest are counted

# Notes of a run that change how its result reads, found by what they say.
# Each pair: words that must all appear in the note, and the heading it gets.
CAUTIONS = (
    (("only", "presences"), "few presences"),
    (("only", "absences"), "few absences"),
    (("smaller than the distance",), "blocks shorter than the spatial dependence"),
    (("not proved",), "subset search not proved"),
    (("limited",), "a search or fit was limited"),
    (("overdispers",), "overdispersed counts"),
    (("excess", "zero"), "more zeros than the model expects"),
    (("separates",), "separation"),
    (("outside", "sampled"), "extrapolation"),
)

SKILL_WORDS = {
    "auc_pooled": "AUC over all held-out sites",
    "auc": "AUC per fold",
    "deviance_explained": "deviance explained on held-out sites",
    "rmse": "typical error (RMSE)",
    "mae": "mean absolute error",
}


def _esc(value) -> str:
    return html.escape(str(value), quote=True)


def _num(value, digits=3) -> str:
    try:
        value = float(value)
    except (TypeError, ValueError):
        return "&ndash;"
    if not np.isfinite(value):
        return "&ndash;"
    return f"{value:.{digits}g}"


def _link(text, section) -> str:
    return f'<a href="#{section}">{text}</a>'


def cautions(record) -> list[tuple[str, str]]:
    """(heading, note) for each note or warning of the run that changes the reading."""
    if not record:
        return []
    found = []
    for note in list(record.get("notes") or []) + list(record.get("warnings") or []):
        text = str(note).lower()
        for words, heading in CAUTIONS:
            if all(w in text for w in words):
                found.append((heading, str(note)))
                break
    return found


def _predictors(tables) -> tuple[str, int]:
    chosen = tables.get("chosen")
    if chosen is None or not {"term", "estimate_std"} <= set(chosen.columns):
        return "<p>No suggested model in this run.</p>", 0
    frequency = {}
    stability = tables.get("stability")
    if stability is not None and {"term", "selection_frequency"} <= set(stability.columns):
        frequency = dict(zip(stability["term"].astype(str), stability["selection_frequency"]))
    frame = chosen.assign(size=chosen["estimate_std"].abs()).sort_values("size", ascending=False)
    rows = []
    for _, c in frame.head(MAX_ROWS).iterrows():
        sign = "+" if float(c["estimate_std"]) > 0 else "&minus;"
        share = frequency.get(str(c["term"]))
        rows.append(f"<tr><td>{_esc(c['term'])}</td><td>{sign}</td>"
                    f"<td>{_num(abs(float(c['estimate_std'])))}</td>"
                    f"<td>{'&ndash;' if share is None else f'{float(share):.0%}'}</td></tr>")
    more = len(frame) - MAX_ROWS
    tail = f'<p class="note">and {more} more in {_link("the chosen model", "chosen")}.</p>' if more > 0 else ""
    head = ("<tr><th>predictor</th><th>direction</th>"
            f"<th>{_link('effect per SD', 'chosen')}</th>"
            f"<th>{_link('chosen in', 'stability')}</th></tr>")
    return f'<table class="compact">{head}{"".join(rows)}</table>{tail}', len(frame)


def _skill(tables, record) -> str:
    skill = tables.get("skill")
    if skill is None or "measure" not in skill.columns:
        return "<p>No held-out skill in this run.</p>"
    scheme = ""
    folds = (record or {}).get("folds") or {}
    if folds:
        scheme = f"{_esc(folds.get('count'))} folds by {_esc(folds.get('scheme'))}"
    items = []
    table = skill.set_index("measure")
    order = ["auc_pooled", "deviance_explained", "rmse", "mae"]
    if (folds.get("scheme") or "") != "spatial blocks":
        order.insert(1, "auc")
    for measure in order:
        if measure not in table.index:
            continue
        row = table.loc[measure]
        se = f" &plusmn; {_num(row['se'], 2)}" if np.isfinite(float(row.get("se", np.nan))) else ""
        items.append(f"<li>{SKILL_WORDS[measure]}: <b>{_num(row['value'])}</b>{se}</li>")
    nested = bool(((record or {}).get("options") or {}).get("nested", True))
    how = ("each site predicted by the model its outer fold chose without it"
           if nested else "each site predicted by the suggested model refitted without its fold")
    return (f"<ul>{''.join(items)}</ul><p class=\"note\">{scheme}; {how} "
            f"({_link('comparison', 'compare')}).</p>")


def _others(tables, record) -> str:
    comparison = tables.get("comparison")
    chosen = (record or {}).get("chosen") or {}
    if comparison is None or not {"method", "rule", "outer_mean", "outer_se"} <= set(comparison.columns):
        return ""
    table = comparison.dropna(subset=["outer_mean"])
    if table.empty:
        return ""
    best = table.loc[table["outer_mean"].idxmin()]
    bound = float(best["outer_mean"]) + (float(best["outer_se"]) if np.isfinite(best["outer_se"]) else 0.0)
    near = int((table["outer_mean"] <= bound).sum())
    label = charts.method_label(best["method"], best.get("mix"))
    return (f"<p>Of {len(table)} methods and rules judged on the same outer folds, {near} lie within "
            f"one standard error of the best ({_esc(label)}, {_esc(charts.rule_label(best['rule']))}); "
            f"the suggestion is the one with fewest terms among them "
            f"({_esc(chosen.get('method', ''))}, {_esc(charts.rule_label(chosen.get('rule', '')))}). "
            f"{_link('How they compare', 'compare')}.</p>")


def summary_html(tables: dict, record: dict | None) -> str:
    """The body of the first section (HTML), compact enough for one laptop screen."""
    response = (record or {}).get("response") or {}
    rows = ((record or {}).get("rows") or {}).get("used")
    what = (f"<b>{_esc(response.get('column', 'the response'))}</b> "
            f"({_esc(response.get('kind') or response.get('family') or '')})")
    opening = f"<p>Modelled {what}" + (f" at <b>{_esc(rows)}</b> sites" if rows else "") + ".</p>"
    predictors, count = _predictors(tables)
    chosen = (record or {}).get("chosen") or {}
    title = (f"Suggested model: {_esc(chosen.get('method', ''))}, "
             f"{_esc(charts.rule_label(chosen.get('rule', '')))}, {count} terms"
             if chosen else "Suggested model")
    care = cautions(record)
    care_html = ""
    if care:
        items = "".join(f"<li><b>{_esc(h)}</b>: {_esc(n)}</li>" for h, n in care[:6])
        care_html = (f'<div class="glance-care"><h3>Read with care</h3><ul>{items}</ul>'
                     f'<p class="note">All notes: {_link("run record", "record")}.</p></div>')
    return (
        f'{opening}<div class="glance">'
        f'<div><h3>{title}</h3>{predictors}</div>'
        f'<div><h3>{_link("Held-out skill", "compare")}</h3>{_skill(tables, record)}'
        f'{_others(tables, record)}</div></div>{care_html}'
    )


def has_content(tables: dict) -> bool:
    return any(isinstance(tables.get(name), pd.DataFrame) for name in ("chosen", "skill"))
