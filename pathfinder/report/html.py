"""The report: one self-contained HTML file, and the same charts as PNG or SVG figures.

``write_report(folder)`` reads the result tables (CSV files) and the run
record (run.json) of an output folder and writes ``folder/report.html``:

* one file, every script inlined (Vega, Vega-Lite and vega-embed come from
  vl-convert, see :mod:`pathfinder.report.vendor`); no fonts, styles,
  scripts or data are fetched from anywhere, and a Content-Security-Policy
  in the page forbids it, so the report opens offline with a double-click;
* ten sections, each with a one-line guide under its title; a table the run
  did not produce gives a short "not part of this run" line instead of a
  chart;
* the page records how many marks each chart drew (on the chart's element)
  and any script error or blocked request (on the root element), so a
  headless browser can check it (the tests do).

``write_figures(folder)`` writes every chart to ``folder/figures/NAME.png``
(three times screen resolution, for print) or ``.svg`` with vl-convert.

Nothing here computes results: it reads tables, picks rows and lays them out.
"""

from __future__ import annotations

import html
import json
import math
import os
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from ..defaults import CORRELATION_THRESHOLD
from ..errors import InputError
from . import charts, methods, summary, theme, vendor

#: The tables the report reads when an output folder holds them.
TABLE_NAMES = (
    "coefficients", "path", "cv", "picks", "criteria", "folds", "correlations", "comparison",
    "outer_folds", "stability", "stability_path", "subsets", "stepwise", "importance", "vif", "sites",
    "response_curves", "rug", "chosen", "skill", "subset_sizes", "by_size",
)

NOT_IN_RUN = "not part of this run"

#: Content-Security-Policy of the page: inline scripts and styles only (Vega compiles its
#: expressions with Function, hence 'unsafe-eval'); images only from data: and blob:
#: (the export buttons); nothing may be fetched from any address.
CSP = ("default-src 'none'; script-src 'unsafe-inline' 'unsafe-eval'; style-src 'unsafe-inline'; "
       "img-src data: blob:; font-src 'none'; connect-src 'none'; media-src 'none'; object-src 'none'; "
       "frame-src 'none'; worker-src 'none'; manifest-src 'none'; base-uri 'none'; form-action 'none'")

CAUTIONS = (
    "These are correlative models. A predictor that is chosen is associated with the response in "
    "these data; that is not evidence that it causes anything.",
    "Predictions for conditions outside the range that was sampled are unreliable, however good the "
    "cross-validated skill looks.",
    "A chosen predictor may be a stand-in for an unmeasured one that moves with it, and a left-out "
    "predictor may matter as much as a chosen one it correlates with.",
    "This report supports analysis, not decisions: management and regulatory decisions defer to local "
    "regulation, expert review and licensed professional practice.",
)


# ---- reading an output folder --------------------------------------------------------

def read_tables(folder) -> dict:
    """Every known result table present in ``folder``, as DataFrames keyed by name.

    Only empty fields count as missing, so a term or label spelled "NA" stays text.
    """
    folder = Path(folder)
    tables = {}
    for name in TABLE_NAMES:
        path = folder / f"{name}.csv"
        if path.is_file():
            try:
                tables[name] = pd.read_csv(path, keep_default_na=False, na_values=[""])
            except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as error:
                raise InputError(f"{path.name}: cannot be read as a table ({error}); "
                                 "write the folder again with pathfinder explore") from None
    return tables


def read_record(folder) -> dict | None:
    """run.json of ``folder`` as a dictionary, or None when there is none."""
    path = Path(folder) / "run.json"
    if not path.is_file():
        return None
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (json.JSONDecodeError, UnicodeDecodeError) as error:
        raise InputError(f"run.json in {Path(folder).name}: not valid JSON ({error}); "
                         "write the folder again with pathfinder explore") from None


# ---- the parts of a page ------------------------------------------------------------

@dataclass
class Figure:
    """One chart of the report (``chart`` None when it could not be drawn: ``problem`` says why)."""

    name: str
    chart: object = None
    caption: str = ""
    problem: str = ""


@dataclass
class Section:
    key: str
    title: str
    guide: str
    parts: list = field(default_factory=list)     # HTML strings and Figures


def _figure(name: str, draw, *args, caption: str = "", **kwargs) -> Figure:
    """Draw one chart; a table that does not fit gives a line in the report, not a crash."""
    try:
        chart = draw(*args, **kwargs)
        chart.to_dict()            # validates against the Vega-Lite schema
        return Figure(name, chart, caption)
    except InputError as error:
        return Figure(name, None, caption, str(error))
    except Exception as error:      # a fault drawing one chart must not lose the whole report
        return Figure(name, None, caption, f"{type(error).__name__}: {error}")


def _esc(value) -> str:
    return html.escape(str(value), quote=True)


def _num(value, digits: int = 4) -> str:
    try:
        number = float(value)
    except (TypeError, ValueError):
        return _esc(value)
    if not math.isfinite(number):
        return "&ndash;"
    return f"{number:.{digits}g}"


def _absent(name: str) -> str:
    return f'<p class="absent">{_esc(name)}: {NOT_IN_RUN}.</p>'


def _opening_chart(section, tables, name, draw, what):
    """A section that opens with the chart of table ``name``, or says the table is not in
    this run: ``(section, table or None)``."""
    frame = tables.get(name)
    if frame is None:
        section.parts.append(_absent(f"{what} ({name}.csv)"))
    else:
        section.parts.append(_figure(name, draw, frame))
    return section, frame


def _para(text: str, cls: str = "") -> str:
    return f'<p{f" class={chr(34)}{cls}{chr(34)}" if cls else ""}>{text}</p>'


def _table(header, rows, cls: str = "") -> str:
    """A plain HTML table; cells are already escaped or formatted."""
    head = "".join(f"<th>{h}</th>" for h in header)
    body = "".join("<tr>" + "".join(f"<td>{c}</td>" for c in row) + "</tr>" for row in rows)
    return (f'<div class="table-wrap"><table class="{cls}"><thead><tr>{head}</tr></thead>'
            f"<tbody>{body}</tbody></table></div>")


def _list(items) -> str:
    return "<ul>" + "".join(f"<li>{i}</li>" for i in items) + "</ul>"


def _get(record, *keys, default=None):
    value = record
    for key in keys:
        if not isinstance(value, dict) or key not in value:
            return default
        value = value[key]
    return value


def _terms_text(terms, limit: int = 12) -> str:
    parts = [t for t in str(terms).split(";") if t] if not charts.is_missing(terms) else []
    shown = ", ".join(_esc(t) for t in parts[:limit])
    if len(parts) > limit:
        shown += f" and {len(parts) - limit} more"
    return shown or "(none)"


# ---- sections -------------------------------------------------------------------------


def section_summary(tables, record) -> Section:
    s = Section("summary", "At a glance",
                "What the analysis suggests, how well it predicts sites it did not see, "
                "and what to be careful about; every figure links to where it comes from.")
    s.parts.append(summary.summary_html(tables, record))
    return s


def section_data(tables, record) -> Section:
    s = Section(
        "data", "1 Data", "What went in: which rows and columns were used, and why any were left out."
    )
    if record is None:
        s.parts.append(_absent("The run record (run.json)"))
        return s
    rows = _get(record, "rows", default={}) or {}
    if rows:
        line = (
            f"{_num(rows.get('used'), 9)} of {_num(rows.get('read'), 9)} rows used; "
            f"{_num(rows.get('dropped', 0), 9)} left out."
        )
        s.parts.append(_para(line))
        why = rows.get("dropped_for_missing_value_in") or {}
        if why:
            s.parts.append(_para("Rows left out for a missing value, by column (a row can miss several):"))
            s.parts.append(
                _table(["column", "rows missing it"], [[_esc(k), _num(v, 9)] for k, v in why.items()])
            )
    response = _get(record, "response", default={}) or {}
    if response:
        text = f"Response: <b>{_esc(response.get('column'))}</b>, {_esc(response.get('family'))} family"
        if response.get("family_reason"):
            text += f" ({_esc(response.get('family_reason'))})"
        if response.get("labels"):
            text += f"; labels {', '.join(_esc(x) for x in response['labels'])}"
        if response.get("theta") is not None:
            text += f"; theta {_num(response['theta'], 4)} (smaller means more clumped counts)"
        s.parts.append(_para(text + "."))
        counts = [n for n in ((_get(record, "notes") if record else None) or [])
                  if any(w in str(n) for w in COUNT_WORDS)]
        if counts:
            s.parts.append(_para("How variable the counts are:"))
            s.parts.append(_list([_esc(n) for n in counts]))
    sites = tables.get("sites")
    if sites is not None and "observed" in sites.columns:
        observed = pd.to_numeric(sites["observed"], errors="coerce").dropna()
        if len(observed):
            if response.get("presence_absence"):
                summary = (
                    f"{int((observed > 0).sum())} presences and {int((observed == 0).sum())} absences "
                    f"(prevalence {observed.mean():.1%})."
                )
            else:
                summary = (
                    f"mean {_num(observed.mean())}, median {_num(observed.median())}, "
                    f"range {_num(observed.min())} to {_num(observed.max())}."
                )
            s.parts.append(_para(f"Response over the {len(observed)} sites used: {summary}"))
    predictors = _get(record, "predictors", default={}) or {}
    if predictors:
        kept = predictors.get("kept") or []
        categorical = set(predictors.get("categorical") or [])
        terms = predictors.get("terms") or []
        expanded = []
        for name in kept:
            made = [
                t
                for t in terms
                if t != name
                and (t.startswith(f"{name}=") or t.startswith(f"{name}^") or name in t.split(":"))
            ]
            if made:
                kind = (
                    "categorical: one indicator per level beside the first"
                    if name in categorical
                    else "numeric: squared or interaction terms from the centred predictor"
                )
                expanded.append([_esc(name), kind, ", ".join(_esc(t) for t in made)])
        s.parts.append(
            _para(
                f"{len(kept)} predictors kept, giving {len(terms)} model terms: "
                + ", ".join(_esc(k) for k in kept)
                + "."
            )
        )
        if expanded:
            s.parts.append(_para("Predictors that became more than one term:"))
            s.parts.append(_table(["predictor", "how", "extra terms"], expanded, "compact"))
        dropped = predictors.get("dropped") or []
        if dropped:
            s.parts.append(_para("Predictors left out:"))
            s.parts.append(
                _table(
                    ["predictor", "why"],
                    [
                        [_esc(d[0]), _esc(d[1]) if len(d) > 1 else ""]
                        if isinstance(d, (list, tuple))
                        else [_esc(d), ""]
                        for d in dropped
                    ],
                )
            )
    if record.get("offset_rule"):
        s.parts.append(_para(f"Offset: {_esc(record['offset_rule'])}."))
    notes, warnings = record.get("notes") or [], record.get("warnings") or []
    if notes:
        s.parts.append(_para("Notes from the run:") + _list(_esc(n) for n in notes))
    if warnings:
        s.parts.append(_para("Warnings:") + _list(_esc(w) for w in warnings))
    return s


def _clusters(tables) -> dict:
    """cluster label -> terms, from vif.csv or stability.csv (clusters of two or more terms)."""
    for name in ("vif", "stability"):
        frame = tables.get(name)
        if frame is not None and "cluster" in frame.columns and "term" in frame.columns:
            labels = charts.cluster_labels(frame)
            groups = {}
            for term, label in zip(frame["term"].astype(str), labels):
                if label:
                    groups.setdefault(label, []).append(term)
            return groups
    return {}


def section_correlated(tables, record) -> Section:
    s, corr = _opening_chart(
        Section("correlated", "2 Correlated predictors",
                "Predictors that rise and fall together can stand in for each other; "
                "read any choice among them with care."),
        tables, "correlations", charts.correlation_heatmap, "Correlations between terms")
    if corr is not None:
        if {"term_a", "term_b", "r"} <= set(corr.columns):
            strong = corr[corr["r"].abs() > CORRELATION_THRESHOLD].copy()
            strong = strong.reindex(strong["r"].abs().sort_values(ascending=False).index).head(30)
            if len(strong):
                s.parts.append(
                    _para(
                        f"{int((corr['r'].abs() > CORRELATION_THRESHOLD).sum())} pairs have |r| above "
                        f"{CORRELATION_THRESHOLD}, a common "
                        "working threshold (Dormann et al. 2013); the strongest:"
                    )
                )
                s.parts.append(
                    _table(
                        ["term", "term", "r"],
                        [
                            [_esc(a), _esc(b), f"{r:+.2f}"]
                            for a, b, r in zip(strong["term_a"], strong["term_b"], strong["r"])
                        ],
                        "compact",
                    )
                )
            else:
                s.parts.append(
                    _para(f"No pair of terms has |r| above {CORRELATION_THRESHOLD} "
                          "(Dormann et al. 2013's working threshold).")
                )
    groups = _clusters(tables)
    if groups:
        s.parts.append(
            _para("Clusters of correlated terms:")
            + _list(f"<b>{_esc(k)}</b>: {', '.join(_esc(t) for t in v)}" for k, v in groups.items())
        )
    vif = tables.get("vif")
    if vif is None:
        s.parts.append(_absent("Variance inflation factors (vif.csv)"))
    else:
        s.parts.append(_figure("vif", charts.vif_bars, vif))
    return s


def section_paths(tables, record) -> Section:
    s = Section(
        "paths",
        "3 Coefficient paths",
        "Each line is one term's coefficient as the penalty weakens from left to right; "
        "a term enters the model where its line leaves zero.",
    )
    coef = tables.get("coefficients")
    if coef is None:
        s.parts.append(_absent("Coefficient paths (coefficients.csv)"))
        return s
    picks = tables.get("picks")
    try:
        groups = list(
            charts.method_groups(
                charts.require(
                    coef,
                    ["method", "mix", "step", "penalty", "term", "estimate", "estimate_std"],
                    "coefficients",
                )
            )
        )
    except InputError as error:
        s.parts.append(Figure("paths", None, "", str(error)))
        return s
    n_terms = max(1, coef["term"].nunique())
    budget = max(20, 60_000 // (len(groups) * n_terms))
    for label, *_ in groups:
        name = "paths_" + "".join(c if c.isalnum() else "_" for c in label).strip("_").replace("__", "_")
        s.parts.append(
            _figure(
                name,
                charts.coefficient_paths,
                coef,
                picks,
                method=label,
                max_steps=min(100, budget),
            )
        )
    return s


def section_cv(tables, record) -> Section:
    s = Section(
        "cv",
        "4 Cross-validation",
        "How well each model predicts sites it did not see; the picks are the lowest error and the "
        "simplest model within one standard error of it.",
    )
    cv, picks = tables.get("cv"), tables.get("picks")
    folds = _get(record, "folds", default=None) if record else None
    if folds:
        repeats = folds.get("repeats", 1)
        s.parts.append(
            _para(
                f"Folds: {_esc(folds.get('scheme'))}, {_num(folds.get('count'), 6)} folds"
                + (f", repeated {_num(repeats, 6)} times" if repeats and repeats != 1 else "")
                + "."
            )
        )
    if cv is None:
        s.parts.append(_absent("Cross-validation curves (cv.csv)"))
    else:
        metric = _get(record, "options", "metric") if record else None
        if metric is not None and "metric" in cv.columns and metric not in set(cv["metric"].astype(str)):
            metric = None
        s.parts.append(_figure("cross_validation", charts.cv_curve, cv, picks, metric=metric))
    if picks is None:
        s.parts.append(_absent("The picks of each method (picks.csv)"))
    elif {"method", "rule", "n_terms", "cv_mean"} <= set(picks.columns):
        rows = []
        for _, p in picks.iterrows():
            label = charts.method_label(p["method"], p.get("mix"))
            if "relaxation" in picks.columns and not charts.is_missing(p.get("relaxation")):
                label += f", relaxation {float(p['relaxation']):g}"
            rows.append(
                [
                    _esc(label),
                    _esc(charts.rule_label(p["rule"])),
                    _num(p.get("penalty")),
                    _num(p["n_terms"], 6),
                    f"{_num(p['cv_mean'])} &plusmn; {_num(p.get('cv_se'), 3)}",
                    _terms_text(p.get("terms", ""), 8),
                ]
            )
        s.parts.append(_table(["method", "rule", "penalty", "terms", "CV error (± SE)", "which terms"], rows))
    return s


def _method_of_mix(mix) -> str:
    mix = float(mix)
    return "lasso" if mix == 1.0 else ("ridge" if mix == 0.0 else "elastic net")


def section_stability(tables, record) -> Section:
    s = Section(
        "stability",
        "5 Stability",
        "How often each term is chosen when the analysis is repeated on half the sites; "
        "terms above the threshold are stable.",
    )
    info = (_get(record, "stability") if record else None) or {}
    threshold = info.get("threshold")
    stability, paths = tables.get("stability"), tables.get("stability_path")
    caption = ""
    if info:
        bits = []
        if threshold is not None:
            bits.append(
                f"threshold {float(threshold):.0%} of subsamples"
                if 0 < float(threshold) <= 1
                else f"threshold {_num(threshold, 3)}"
            )
        if info.get("q") is not None:
            bits.append(f"on average {_num(info['q'], 4)} terms chosen per subsample")
        if info.get("pfer_bound") is not None:
            bits.append(
                f"expected number of wrongly chosen terms (PFER) at most {_num(info['pfer_bound'], 3)}, "
                "among the terms a half-sample selects with probability at most q/p (the "
                "condition under which the bound holds)"
            )
        if info.get("n_pairs") is not None:
            bits.append(f"{_num(info['n_pairs'], 6)} complementary pairs of half-samples")
        if info.get("mix") is not None:
            bits.append(f"selection by {_esc(charts.method_label(_method_of_mix(info['mix']), info['mix']))}")
        caption = (
            (
                "; ".join(bits) + ". Bound of Meinshausen &amp; B&uuml;hlmann (2010) for complementary "
                "pairs (Shah &amp; Samworth 2013)."
            )
            if bits
            else ""
        )
    if stability is None:
        s.parts.append(_absent("Selection frequencies (stability.csv)"))
    else:
        s.parts.append(_figure("stability", charts.stability_bars, stability, threshold, caption=caption))
    if paths is None:
        s.parts.append(_absent("Stability paths (stability_path.csv)"))
    else:
        stable = None
        if stability is not None and {"term", "stable"} <= set(stability.columns):
            stable = stability.loc[charts.truthy(stability["stable"]), "term"].astype(str).tolist()
        s.parts.append(
            _figure(
                "stability_paths",
                charts.stability_paths,
                paths,
                threshold,
                stable=stable,
                caption=caption if stability is None else "",
            )
        )
    return s


def section_compare(tables, record) -> Section:
    s, comparison = _opening_chart(
        Section("compare", "6 Shrinkage against subsets",
                "All methods judged on the same outer folds, with the choice redone inside each "
                "fold; and the classic subset search by information criteria beside them."),
        tables, "comparison", charts.comparison_chart, "The nested comparison of methods")
    if comparison is not None:
        need = {"method", "rule", "n_terms", "outer_mean", "outer_se"}
        if need <= set(comparison.columns):
            rows = []
            for _, c in comparison.iterrows():
                rows.append(
                    [
                        _esc(charts.method_label(c["method"], c.get("mix"))),
                        _esc(charts.rule_label(c["rule"])),
                        _num(c["n_terms"], 6),
                        f"{_num(c['outer_mean'])} &plusmn; {_num(c['outer_se'], 3)}",
                        _num(c.get("optimism"), 3),
                        _num(c.get("jaccard"), 3),
                        FOUND_BY_WORDS.get(str(c.get("found_by", "")), ""),
                        _terms_text(c.get("terms", "")),
                    ]
                )
            s.parts.append(
                _table(
                    [
                        "method",
                        "rule",
                        "terms",
                        "outer-fold error (± SE)",
                        "optimism",
                        "agreement across folds",
                        "subset of that size",
                        "terms chosen on all sites",
                    ],
                    rows,
                )
            )
            s.parts.append(
                _para(
                    "Optimism: the outer-fold error minus the inner (cross-validated) error that "
                    "made the choice; for an error such as the deviance a positive value means the "
                    "inner folds flattered the choice (for a score such as the AUC, where larger "
                    "is better, a negative value does). Agreement: mean Jaccard similarity of the "
                    "terms chosen in each pair of outer folds (1 = always the same terms).",
                    "note",
                )
            )
    stepwise = tables.get("stepwise")
    if stepwise is not None and {"step", "action", "term"} <= set(stepwise.columns):
        rule = ""
        comparison = tables.get("comparison")
        if comparison is not None and {"method", "rule"} <= set(comparison.columns):
            rules = comparison.loc[comparison["method"].astype(str) == "stepwise", "rule"]
            rule = charts.rule_label(rules.iloc[0]) if len(rules) else ""
        s.parts.append(_para(f"Stepwise search{f' by {_esc(rule)}' if rule else ''}, one change at a time:"))
        s.parts.append(
            _table(
                [
                    "step",
                    "change",
                    "term",
                    "terms in the model",
                    "log-likelihood",
                    f"{_esc(rule) or 'criterion'}",
                ],
                [
                    [
                        _num(r["step"], 6),
                        _esc(r["action"]),
                        _esc("" if charts.is_missing(r["term"]) else r["term"]),
                        _terms_text(r.get("terms", ""), 10),
                        _num(r.get("log_likelihood"), 6),
                        _num(r.get("value"), 6),
                    ]
                    for _, r in stepwise.iterrows()
                ],
                "compact",
            )
        )
    subsets, importance = tables.get("subsets"), tables.get("importance")
    if subsets is None:
        s.parts.append(_absent("Best-subset and stepwise search (subsets.csv)"))
    else:
        s.parts.extend(_subset_search_parts(tables, record))
        s.parts.append(_figure("akaike_weights", charts.akaike_weights, subsets))
    if importance is None:
        s.parts.append(_absent("Relative importance from Akaike weights (importance.csv)"))
    else:
        s.parts.append(_figure("importance", charts.importance_bars, importance))
    return s


COUNT_WORDS = ("dispersion", "overdispersed", "zero counts", "theta", "QAIC",
               "likelihood ratio of the negative binomial")
FOUND_BY_WORDS = {"exhaustive": "every subset compared", "proved": "proved best",
                  "searched": "searched, not proved"}
SEARCH_WORDS = ("subset", "splicing", "branch and bound", "sizes")


def _subset_search_parts(tables, record) -> list:
    """How the best subset of each size was found, the search's own notes, and the fit by size."""
    parts = []
    sizes = tables.get("subset_sizes")
    if sizes is not None and {"k", "found_by"} <= set(sizes.columns):
        groups = []
        for how, words in FOUND_BY_WORDS.items():
            ks = sizes.loc[sizes["found_by"].astype(str) == how, "k"].astype(int).tolist()
            if ks:
                groups.append(f"{words} at {_ranges(ks)} terms")
        visited = sizes["models_visited"].sum() if "models_visited" in sizes.columns else None
        parts.append(_para(
            f"Best subset of every size from 0 to {int(sizes['k'].max())} terms: "
            + "; ".join(groups)
            + (f" ({int(visited):,} models fitted or bounded in all)." if visited is not None else ".")
            + " Where a size was only searched, a better subset of that size may exist."))
    notes = [n for n in ((_get(record, "notes") if record else None) or [])
             if any(w in str(n) for w in SEARCH_WORDS) and "search" in str(n)]
    if notes:
        parts.append(_list([_esc(n) for n in notes]))
    by_size = tables.get("by_size")
    if by_size is not None:
        parts.append(_figure("fit_by_size", charts.fit_by_size, by_size))
    return parts


def _ranges(ks) -> str:
    """[0, 1, 2, 5, 6] -> '0-2, 5-6'."""
    out, start = [], ks[0]
    for a, b in zip(ks, ks[1:] + [None]):
        if b != a + 1:
            out.append(f"{start}" if start == a else f"{start}-{a}")
            start = b
    return ", ".join(out)


def _response_label(record) -> str:
    column = _get(record, "response", "column") if record else None
    template = (_get(record, "response", "prediction") if record else None) or "{}"
    if not column:
        return "fitted value"
    return template.replace("{}", charts.readable(column))


def section_chosen(tables, record) -> Section:
    s = Section(
        "chosen",
        "7 The chosen model",
        "The model to report: its coefficients, how reliably each term was chosen, and the shape "
        "of the fitted response.",
    )
    chosen = tables.get("chosen")
    stability = tables.get("stability")
    if (
        chosen is not None
        and "selection_frequency" not in chosen.columns
        and stability is not None
        and {"term", "selection_frequency"} <= set(stability.columns)
        and "term" in chosen.columns
    ):
        frequency = dict(zip(stability["term"].astype(str), stability["selection_frequency"]))
        chosen = chosen.assign(selection_frequency=chosen["term"].astype(str).map(frequency))
    if chosen is None:
        s.parts.append(_absent("The chosen model (chosen.csv)"))
    else:
        how = (_get(record, "chosen") if record else None) or {}
        if how.get("method"):
            s.parts.append(
                _para(
                    f"Chosen: {_esc(how['method'])} ({_esc(charts.rule_label(how.get('rule', '')))}), "
                    f"{len(how.get('terms') or [])} terms. How often each term was chosen comes from "
                    "the stability section."
                )
            )
        s.parts.append(_figure("chosen", charts.chosen_coefficients, chosen))
        if {"term", "estimate", "estimate_std"} <= set(chosen.columns):
            freq = "selection_frequency" in chosen.columns
            rows = [
                [_esc(c["term"]), _num(c["estimate"]), _num(c["estimate_std"], 3)]
                + (
                    [
                        f"{float(c['selection_frequency']):.0%}"
                        if not charts.is_missing(c["selection_frequency"])
                        else "&ndash;"
                    ]
                    if freq
                    else []
                )
                for _, c in chosen.iterrows()
            ]
            s.parts.append(
                _table(
                    ["term", "coefficient (units of the term)", "per SD of the term"]
                    + (["chosen in (share of subsamples)"] if freq else []),
                    rows,
                )
            )
            if freq:
                s.parts.append(_para(
                    "The share of subsamples comes from stability selection, which looks only at the "
                    "strongest penalties, where about q terms enter each half-sample; a term the "
                    "chosen model keeps may never enter there and then shows 0%.", "note"))
    curves = tables.get("response_curves")
    if curves is None:
        s.parts.append(_absent("Response curves (response_curves.csv)"))
    else:
        s.parts.append(
            _figure(
                "response_curves",
                charts.response_curves,
                curves,
                tables.get("rug"),
                response_label=_response_label(record),
            )
        )
    return s


def section_space(tables, record) -> Section:
    s = Section(
        "space", "8 Space", "Where the sites are, how they were split into folds, and where the model misses."
    )
    sites = tables.get("sites")
    if sites is None:
        s.parts.append(_absent("Site coordinates and held-out predictions (sites.csv)"))
        return s
    has_xy = {"x", "y"} <= set(sites.columns) and pd.to_numeric(sites["x"], errors="coerce").notna().any()
    if not has_xy:
        s.parts.append(
            _para(
                "No coordinates were given for this run, so there is no map "
                "(give them with --coords XCOL,YCOL)."
            )
        )
        return s
    coords = _get(record, "options", "coords") if record else None
    names = {"x_title": str(coords[0]), "y_title": str(coords[1])} if coords and len(coords) == 2 else {}
    if "fold" in sites.columns:
        s.parts.append(_figure("sites_by_fold", charts.site_map, sites, colour="fold", **names))
    if {"observed", "held_out"} <= set(sites.columns):
        s.parts.append(_figure("sites_by_residual", charts.site_map, sites, colour="held_out", **names))
    return s


def section_methods(tables, record) -> Section:
    s = Section("methods", "9 Methods for a paper",
                "What this run did, with the sources of each method, ready to paste and edit "
                "(also in methods.md).")
    if record is None:
        s.parts.append(_absent("The run record (run.json)"))
        return s
    s.parts.append(_markdown(methods.methods_text(record, tables)))
    return s


def _markdown(text: str) -> str:
    """The little Markdown that methods.md uses: headings, paragraphs, one bullet list."""
    out, items = [], []
    for line in text.splitlines():
        if line.startswith("- "):
            items.append(f"<li>{_esc(line[2:])}</li>")
            continue
        if items:
            out.append(f'<ul class="references">{"".join(items)}</ul>')
            items = []
        if line.startswith("## "):
            out.append(f"<h3>{_esc(line[3:])}</h3>")
        elif line.strip():
            out.append(_para(_esc(line)))
    if items:
        out.append(f'<ul class="references">{"".join(items)}</ul>')
    return "".join(out)


def section_record(tables, record) -> Section:
    s = Section("record", "10 Run record", "Everything needed to repeat this run exactly.")
    if record is None:
        s.parts.append(_absent("The run record (run.json)"))
        return s
    top = [
        ["command", _esc(record.get("command", ""))],
        ["seed", _esc(record.get("seed", ""))],
        ["computed on", _esc(record.get("backend", ""))],
    ]
    source = record.get("input") or {}
    if source:
        top += [
            ["input file", _esc(source.get("file", ""))],
            ["format", _esc(source.get("format", ""))],
            ["rows, columns", f"{_num(source.get('rows'), 9)}, {_num(source.get('columns'), 9)}"],
            ["SHA-256", f"<code>{_esc(source.get('sha256', ''))}</code>"],
        ]
    else:
        top.append(["input file", "a table passed from Python (no file, no checksum)"])
    s.parts.append(_table(["", ""], top, "record"))
    options = record.get("options") or {}
    if options:
        s.parts.append(_para("Options:"))
        s.parts.append(
            _table(
                ["option", "value"], [[_esc(k), _esc(json.dumps(v))] for k, v in options.items()], "compact"
            )
        )
    paths = record.get("paths") or []
    if paths:
        s.parts.append(
            _table(
                ["method", "mix", "penalties", "why the path stopped"],
                [
                    [
                        _esc(p.get("method")),
                        _num(p.get("mix"), 3),
                        _num(p.get("penalties"), 6),
                        _esc(p.get("stop_reason", "")),
                    ]
                    for p in paths
                ],
                "compact",
            )
        )
    versions = record.get("versions") or {}
    if versions:
        s.parts.append(_para("Versions:"))
        s.parts.append(
            _table(["software", "version"], [[_esc(k), _esc(v)] for k, v in versions.items()], "compact")
        )
    timings = record.get("timings_seconds") or {}
    if timings:
        s.parts.append(_para("Time taken:"))
        s.parts.append(
            _table(["stage", "seconds"], [[_esc(k), _num(v, 3)] for k, v in timings.items()], "compact")
        )
    return s


def section_cautions(tables, record) -> Section:
    s = Section("cautions", "11 Cautions", "What these results can and cannot support.")
    s.parts.append(_list(_esc(c) for c in CAUTIONS))
    return s


SECTION_BUILDERS = (
    section_summary,
    section_data,
    section_correlated,
    section_paths,
    section_cv,
    section_stability,
    section_compare,
    section_chosen,
    section_space,
    section_methods,
    section_record,
    section_cautions,
)


def build_sections(tables: dict, record: dict | None) -> list:
    """Every section of the report, in order, with its charts drawn (or the reason they are not)."""
    return [build(tables, record) for build in SECTION_BUILDERS]


def figures(sections) -> list:
    return [p for s in sections for p in s.parts if isinstance(p, Figure)]


# ---- the page ---------------------------------------------------------------------------

STYLE = f"""
:root {{ --ink: {theme.INK}; --muted: {theme.MUTED}; --paper: {theme.PAPER}; --grid: {theme.GRID};
        --accent: {theme.LOCH}; --warm: {theme.OCHRE}; }}
* {{ box-sizing: border-box; }}
html {{ background: var(--paper); }}
body {{ margin: 0 auto; max-width: 1180px; padding: 24px 28px 64px; color: var(--ink);
       font-family: {theme.FONT}; font-size: 15.5px; line-height: 1.5; }}
header {{ border-bottom: 3px solid var(--accent); padding-bottom: 12px; margin-bottom: 8px; }}
h1 {{ font-size: 26px; margin: 0 0 4px; letter-spacing: -0.01em; }}
header p {{ margin: 0; color: var(--muted); }}
nav {{ font-size: 13.5px; margin: 10px 0 18px; display: flex; flex-wrap: wrap; gap: 4px 14px; }}
nav a {{ color: var(--accent); text-decoration: none; border-bottom: 1px solid var(--grid); }}
section {{ margin-top: 34px; }}
h2 {{ font-size: 20px; margin: 0; padding-top: 8px; border-top: 1px solid var(--grid); }}
p.guide {{ margin: 2px 0 14px; color: var(--muted); font-style: italic; }}
p.absent {{ color: var(--muted); margin: 6px 0; padding-left: 10px; border-left: 3px solid var(--grid); }}
p.problem {{ color: {theme.PEAT}; margin: 6px 0; padding-left: 10px; border-left: 3px solid var(--warm); }}
p.note, figcaption {{ font-size: 13.5px; color: var(--muted); }}
figure {{ margin: 14px 0 22px; overflow-x: auto; }}
.chart {{ min-height: 40px; }}
.table-wrap {{ overflow-x: auto; margin: 8px 0 16px; }}
table {{ border-collapse: collapse; font-size: 13.5px; font-variant-numeric: tabular-nums; }}
th {{ text-align: left; font-weight: 600; border-bottom: 2px solid var(--ink); padding: 4px 12px 4px 0; }}
td {{ border-bottom: 1px solid var(--grid); padding: 3px 12px 3px 0; vertical-align: top; }}
table.compact td, table.compact th {{ padding-top: 2px; padding-bottom: 2px; }}
table.record th {{ display: none; }}
code {{ font-family: {theme.MONO}; font-size: 12.5px; word-break: break-all; }}
ul {{ margin: 6px 0 12px; padding-left: 22px; }}
footer {{ margin-top: 40px; font-size: 12.5px; color: var(--muted); }}
.glance {{ display: grid; grid-template-columns: 1fr 1fr; gap: 8px 32px; }}
.glance h3, .glance-care h3 {{ font-size: 15.5px; margin: 6px 0 4px; }}
.glance ul, .glance-care ul {{ margin: 2px 0 6px; }}
.glance-care {{ font-size: 13.5px; border-left: 3px solid var(--warm); padding-left: 10px; }}
#summary p {{ margin: 4px 0; }}
.vega-bindings {{ font-size: 13px; margin: 4px 0 0; }}
.vega-bindings input[type=range] {{ width: 320px; vertical-align: middle; accent-color: var(--accent); }}
#summary a {{ color: var(--accent); }}
@media print {{
  nav, .vega-bindings, .vega-actions, .vega-embed details {{ display: none !important; }}
  html {{ background: white; }}
  body {{ max-width: none; padding: 0; font-size: 10pt; }}
  section {{ break-before: page; margin-top: 0; }}
  section#summary {{ break-before: auto; }}
  figure, table, .glance, .glance-care, p.note {{ break-inside: avoid; }}
  h2, h3, p.guide {{ break-after: avoid; }}
  figure {{ overflow: visible; }}
  .chart canvas, .chart svg {{ max-width: 100% !important; height: auto !important; }}
  a {{ color: inherit; text-decoration: none; }}
}}
"""


def _page_style(record) -> str:
    """Print layout: page numbers, and the run's date and input file at the foot of every page."""
    bits = [b for b in (_get(record, "date") if record else None,
                        _get(record, "input", "file") if record else None) if b]
    left = " · ".join(str(b) for b in bits) or "pathfinder report"
    left = "".join(c for c in left if c not in '\\"<>')     # nothing that ends the string or the style
    return ("@page { size: A4; margin: 14mm 12mm 16mm; "
            f'@bottom-left {{ content: "{left}"; font-size: 8pt; color: #555; }} '
            '@bottom-right { content: "page " counter(page) " of " counter(pages); '
            "font-size: 8pt; color: #555; } }")

#: Runs first: records script errors, console errors and blocked requests on <html>.
GUARD = """
(function () {
  var root = document.documentElement, errors = [], blocked = [];
  function keep() {
    root.setAttribute('data-errors', JSON.stringify(errors));
    root.setAttribute('data-blocked', JSON.stringify(blocked));
  }
  window.addEventListener('error', function (e) {
    var source = e.target && e.target !== window ? (e.target.src || e.target.href || e.target.tagName) : '';
    var where = source ? ' (loading ' + source + ')' : '';
    errors.push(String(e.message || 'error') + where); keep();
  }, true);
  window.addEventListener('unhandledrejection', function (e) {
    errors.push('unhandled: ' + String(e.reason)); keep();
  });
  document.addEventListener('securitypolicyviolation', function (e) {
    blocked.push(e.violatedDirective + ' ' + e.blockedURI); keep();
  });
  var consoleError = console.error;
  console.error = function () {
    errors.push('console: ' + Array.prototype.map.call(arguments, String).join(' ')); keep();
    return consoleError.apply(console, arguments);
  };
  keep();
})();
"""

#: Draws every chart, then records on each chart's element how many marks it drew.
RENDER = """
(function () {
  var root = document.documentElement;
  function marks(node) {
    var n = 0;
    (function walk(x) {
      if (!x) return;
      if (x.marktype) {
        if (x.marktype === 'group') { (x.items || []).forEach(walk); }
        else { n += (x.items || []).length; }
      } else if (x.items) { x.items.forEach(walk); }
    })(node);
    return n;
  }
  var boxes = Array.prototype.slice.call(document.querySelectorAll('div.chart[data-spec]'));
  var jobs = boxes.map(function (box) {
    var spec = JSON.parse(document.getElementById(box.getAttribute('data-spec')).textContent);
    var options = {mode: 'vega-lite', renderer: 'canvas', downloadFileName: box.id.replace('chart-', ''),
                   actions: {export: true, source: false, compiled: false, editor: false}};
    return vegaEmbed(box, spec, options).then(function (result) {
      box.setAttribute('data-marks', String(marks(result.view.scenegraph().root)));
    }).catch(function (error) {
      box.setAttribute('data-error', String(error && error.message || error));
    });
  });
  Promise.all(jobs).then(function () {
    var glance = document.getElementById('summary');
    if (glance) {   // how far down the page the first screen's summary reaches
      root.setAttribute('data-summary-bottom',
                        String(Math.ceil(glance.getBoundingClientRect().bottom + window.scrollY)));
    }
    root.setAttribute('data-rendered', String(boxes.length));
  });
})();
"""


def _script_json(data) -> str:
    """JSON that cannot end its <script> element early."""
    return (
        json.dumps(data, separators=(",", ":"), allow_nan=False)
        .replace("<", "\\u003c")
        .replace(">", "\\u003e")
        .replace("&", "\\u0026")
    )


def chart_spec(chart) -> dict:
    """The Vega-Lite spec of a chart with our look, without the (never fetched) schema address."""
    spec = theme.with_look(chart.to_dict())
    spec.pop("$schema", None)
    return spec


def _render_figure(figure: Figure, specs: list) -> str:
    caption = f"<figcaption>{figure.caption}</figcaption>" if figure.caption else ""
    if figure.chart is None:
        return f'<p class="problem">This chart could not be drawn: {_esc(figure.problem)}</p>'
    spec_id = f"spec-{figure.name}"
    specs.append(
        f'<script type="application/json" id="{spec_id}">{_script_json(chart_spec(figure.chart))}</script>'
    )
    return (
        f'<figure><div class="chart" id="chart-{_esc(figure.name)}" data-spec="{spec_id}"></div>'
        f"{caption}</figure>"
    )


def render_page(sections, record) -> str:
    """The whole report as one HTML string."""
    specs = []
    body = []
    for section in sections:
        parts = []
        for part in section.parts:
            parts.append(_render_figure(part, specs) if isinstance(part, Figure) else part)
        body.append(
            f'<section id="{section.key}"><h2>{_esc(section.title)}</h2>'
            f'<p class="guide">{_esc(section.guide)}</p>{"".join(parts)}</section>'
        )
    nav = "".join(f'<a href="#{s.key}">{_esc(s.title)}</a>' for s in sections)
    response = _get(record, "response", "column") if record else None
    source = _get(record, "input", "file") if record else None
    title = f"Choosing predictors for {response}" if response else "Choosing predictors"
    sub = []
    if source:
        sub.append(f"survey table {_esc(source)}")
    family = _get(record, "response", "family") if record else None
    if family:
        sub.append(f"{_esc(family)} response")
    version = _get(record, "versions", "pathfinder") if record else None
    sub.append(f"pathfinder {_esc(version)}" if version else "pathfinder")
    return "".join(
        [
            '<!DOCTYPE html>\n<html lang="en">\n<head>\n<meta charset="utf-8">\n',
            f'<meta http-equiv="Content-Security-Policy" content="{CSP}">\n',
            '<meta name="viewport" content="width=device-width, initial-scale=1">\n',
            f"<title>{_esc(title)}</title>\n<style>{STYLE}{_page_style(record)}</style>\n",
            f"<script>{GUARD}</script>\n</head>\n<body>\n",
            f"<header><h1>{_esc(title)}</h1><p>{' · '.join(sub)}</p></header>\n",
            f"<nav>{nav}</nav>\n<main>\n",
            "\n".join(body),
            "\n</main>\n",
            "<footer>Written by pathfinder. This file is complete in itself: "
            "it needs no internet connection. "
            "Every table behind these charts is in the same folder as CSV.</footer>\n",
            f"<script>{vendor.javascript_bundle()}</script>\n",
            "\n".join(specs),
            "\n",
            f"<script>{RENDER}</script>\n</body>\n</html>\n",
        ]
    )


def _write_atomically(path: Path, data, mode: str) -> None:
    """Write beside the target, then rename: a reader never sees half a file.

    The file is opened by name (not made by mkstemp), so it gets the user's usual permissions.
    """
    temp = path.with_name(f".{path.name}.{os.getpid()}.part")
    try:
        with open(temp, mode, **({"encoding": "utf-8"} if "b" not in mode else {})) as out:
            out.write(data)
        os.replace(temp, path)
    except BaseException:
        temp.unlink(missing_ok=True)
        raise


def _inputs(folder, tables, record):
    folder = Path(folder)
    tables = read_tables(folder) if tables is None else dict(tables)
    record = read_record(folder) if record is None else record
    return folder, tables, record


def write_report(folder: Path, tables: dict | None = None, record: dict | None = None) -> Path:
    """Write ``folder/report.html`` and return its path.

    ``tables`` (name -> DataFrame) and ``record`` (the run.json dictionary)
    default to what the folder holds; a missing table gives a "not part of
    this run" line in its section.
    """
    folder, tables, record = _inputs(folder, tables, record)
    folder.mkdir(parents=True, exist_ok=True)
    page = render_page(build_sections(tables, record), record)
    target = folder / "report.html"
    _write_atomically(target, page, "w")
    if record is not None:
        _write_atomically(folder / "methods.md", methods.methods_text(record, tables), "w")
    return target


def write_figures(
    folder, fmt: str = "png", tables: dict | None = None, record: dict | None = None, *, scale: float = 3.0
) -> list:
    """Write every chart of the report to ``folder/figures/NAME.png`` or ``.svg``; return the paths.

    PNG figures are drawn at ``scale`` times screen size (about 216 pixels per
    inch at the default 3, enough for print) and say so in their header;
    charts that cannot be drawn are skipped.
    """
    import vl_convert

    if fmt not in ("png", "svg"):
        raise InputError(f"figures: format must be 'png' or 'svg', not {fmt!r}")
    folder, tables, record = _inputs(folder, tables, record)
    out = folder / "figures"
    out.mkdir(parents=True, exist_ok=True)
    version = vendor.vegalite_version()
    written = []
    for figure in figures(build_sections(tables, record)):
        if figure.chart is None:
            continue
        spec = chart_spec(figure.chart)
        path = out / f"{figure.name}.{fmt}"
        if fmt == "png":
            # vl-convert sizes the image by scale * ppi / 72: one factor, carried by ppi so
            # that the file also says its resolution and prints at the chart's intended size
            data = vl_convert.vegalite_to_png(
                spec, vl_version=version, scale=1.0, ppi=72 * scale, allowed_base_urls=[]
            )
            _write_atomically(path, data, "wb")
        else:
            data = vl_convert.vegalite_to_svg(spec, vl_version=version, allowed_base_urls=[])
            _write_atomically(path, data, "w")
        written.append(path)
    return written
