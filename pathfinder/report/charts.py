"""One function per chart: result table(s) in, Altair chart out.

Every function reads the tables pathfinder writes (as DataFrames, e.g. from
``pandas.read_csv`` on an output folder) and returns an Altair chart that
works in a notebook as well as in the report. Nothing here fits a model:
the charts only select, thin and reshape what the tables already hold.

Large tables are thinned so that a report stays small: coefficient paths keep
at most ``max_steps`` penalties per method (always keeping the picked ones),
maps keep at most ``max_points`` sites (a seeded random sample, said in the
subtitle), rugs keep evenly spaced quantiles. Data travel inside the chart as
compact CSV text rather than one JSON object per row.

The look (colours, type) comes from :mod:`pathfinder.report.theme`; colours
that carry meaning are set on the charts themselves, so they survive any
Altair theme a notebook has enabled.
"""

from __future__ import annotations

import json
import math

import altair as alt
import numpy as np
import pandas as pd

from ..defaults import CORRELATION_THRESHOLD
from ..errors import InputError
from . import theme

# ---- sizes ---------------------------------------------------------------------

WIDE = 480
PANEL = 300
TALL = 340
ROW = 16            # height per bar in horizontal bar charts
LIST_ROWS = 22      # terms listed beside a coefficient path

# ---- words ---------------------------------------------------------------------

RULE_LABELS = {"min": "lowest CV error", "one_se": "one-SE rule", "refit": "stable terms, refitted",
               "aic": "AIC", "aicc": "AICc", "bic": "BIC"}
CV_RULES = ("lowest CV error", "one-SE rule")

#: Plain descriptions of the cross-validation metrics, and whether larger is better.
METRIC_LABELS = {
    "deviance": ("mean deviance per site", False),
    "mse": ("mean squared error", False),
    "mae": ("mean absolute error", False),
    "auc": ("AUC (chance a presence outranks an absence)", True),
    "brier": ("Brier score", False),
    "log_loss": ("log loss", False),
    "poisson_deviance": ("mean Poisson deviance", False),
    "deviance_explained": ("share of deviance explained", True),
}


def metric_label(metric: str) -> str:
    """'mean deviance per site (lower is better)' for 'deviance'; unknown names pass through."""
    if metric in METRIC_LABELS:
        words, larger = METRIC_LABELS[metric]
        return f"{words} ({'higher' if larger else 'lower'} is better)"
    return readable(metric)


def rule_label(rule) -> str:
    return RULE_LABELS.get(str(rule), readable(str(rule)))


def readable(name) -> str:
    """A column name as words for titles: underscores become spaces."""
    return str(name).replace("_", " ").strip()


def method_label(method, mix=None) -> str:
    """'lasso', 'ridge', 'relaxed lasso', 'elastic net (mix 0.5)', or the method as written."""
    method = str(method)
    if method == "elastic net" and mix is not None and not is_missing(mix):
        return f"elastic net (mix {float(mix):g})"
    return method


def is_missing(value) -> bool:
    try:
        return value is None or (isinstance(value, float) and math.isnan(value)) or pd.isna(value)
    except (TypeError, ValueError):
        return False


# ---- checking and packing tables ---------------------------------------------------

def require(frame, columns, table: str) -> pd.DataFrame:
    """``frame`` as a DataFrame with ``columns``, or one clear InputError."""
    if not isinstance(frame, pd.DataFrame):
        raise InputError(f"{table}: expected a table (pandas DataFrame), got {type(frame).__name__}; "
                         f"read it with pandas.read_csv('{table}.csv')")
    missing = [c for c in columns if c not in frame.columns]
    if missing:
        raise InputError(f"{table}: column(s) {', '.join(missing)} missing; this chart needs "
                         f"{', '.join(columns)} as written by pathfinder")
    return frame


def _format_column(values: pd.Series, digits: int) -> pd.Series:
    numbers = pd.to_numeric(values, errors="coerce").astype(float)
    text = numbers.map(lambda v: "" if not math.isfinite(v) else f"{v:.{digits}g}")
    return text


def inline(frame: pd.DataFrame, digits: int = 5, precise=()) -> alt.InlineData:
    """The frame as CSV text inside the chart, numbers parsed back as numbers.

    ``digits`` significant digits for floats (``precise`` columns keep 8):
    plenty for a picture, and several times smaller than JSON records.
    """
    out = pd.DataFrame(index=frame.index)
    parse = {}
    for column in frame.columns:
        values = frame[column]
        if pd.api.types.is_bool_dtype(values):
            out[column] = values.astype(int).astype(str)
            parse[column] = "number"
        elif pd.api.types.is_integer_dtype(values):
            out[column] = values.astype(str)
            parse[column] = "number"
        elif pd.api.types.is_float_dtype(values):
            out[column] = _format_column(values, 8 if column in precise else digits)
            parse[column] = "number"
        else:
            out[column] = values.astype(object).where(values.notna(), "").astype(str)
    text = out.to_csv(index=False, lineterminator="\n")
    return alt.InlineData(values=text, format=alt.DataFormat(type="csv", parse=parse))


def method_groups(frame: pd.DataFrame):
    """(label, method, mix, rows) per method and mix, in the order they first appear."""
    mix = frame["mix"] if "mix" in frame.columns else pd.Series(np.nan, index=frame.index)
    keys = list(dict.fromkeys(zip(frame["method"].astype(str), mix.astype(float))))
    for method, m in keys:
        rows = frame[(frame["method"].astype(str) == method)
                     & ((mix.astype(float) == m) | (np.isnan(m) & mix.isna()))]
        yield method_label(method, m), method, m, rows


def thin_steps(steps, limit: int, keep=()) -> list:
    """At most about ``limit`` evenly spaced values of ``steps`` (sorted), plus ``keep``."""
    steps = sorted(set(int(s) for s in steps))
    if len(steps) <= limit:
        return steps
    idx = np.unique(np.round(np.linspace(0, len(steps) - 1, max(limit, 2))).astype(int))
    chosen = {steps[i] for i in idx} | {int(k) for k in keep if int(k) in set(steps)}
    return sorted(chosen)


def _penalty_axis(title: str = "penalty (log scale; the model grows to the right)", values=None):
    """The penalty on a log axis, strongest on the left; ``values`` fix the domain (so that a layer
    emptied by a filter cannot leave the scale without an extent)."""
    domain = alt.Undefined
    if values is not None:
        values = pd.to_numeric(pd.Series(values), errors="coerce")
        values = values[values > 0]
        if len(values):
            domain = [float(values.min()), float(values.max())]
    return alt.X("x:Q", scale=alt.Scale(type="log", reverse=True, nice=False, domain=domain),
                 axis=alt.Axis(title=title, format="~g", grid=False, tickCount=6))


def _sample(frame: pd.DataFrame, limit: int, seed: int):
    """At most ``limit`` rows, a seeded random sample in the original order; and a note."""
    if len(frame) <= limit:
        return frame, ""
    rng = np.random.default_rng(seed)
    rows = np.sort(rng.choice(len(frame), size=limit, replace=False))
    return frame.iloc[rows], f"a random {limit:,} of {len(frame):,} shown (seed {seed})"


def truthy(values: pd.Series) -> pd.Series:
    """Booleans from True/False, 1/0 or 'true'/'false' text."""
    if pd.api.types.is_bool_dtype(values):
        return values.fillna(False)
    if pd.api.types.is_numeric_dtype(values):
        return values.fillna(0) != 0
    return values.astype(str).str.strip().str.lower().isin({"true", "1", "yes", "1.0"})


# ---- coefficient paths -------------------------------------------------------------

def coefficient_paths(coefficients: pd.DataFrame, picks: pd.DataFrame | None = None,
                      x: str = "log_penalty", *,
                      method: str | None = None, max_steps: int = 100,
                      max_points: int = 60_000):
    """Coefficient paths, one line per term, one panel per method and mix.

    The y axis is the coefficient per standard deviation of its term, so terms
    in different units compare. ``x`` is ``"log_penalty"`` (the penalty on a
    log axis, the model growing to the right) or ``"n_terms"`` (the number of
    terms in the model at each penalty). Dashed and dotted rules mark the picks of ``picks``
    (lowest CV error, one-SE rule). A slider picks a model along the path:
    its terms are drawn in colour and listed beside the chart, largest first.
    Hovering a line names the term.

    ``method`` keeps one panel ("lasso", "ridge", "elastic net (mix 0.5)" or
    a method name). Each panel keeps at most ``max_steps`` penalties, fewer
    when many terms would exceed ``max_points`` points in all.
    """
    require(coefficients, ["method", "mix", "step", "penalty", "term", "estimate", "estimate_std"],
            "coefficients")
    if x not in ("log_penalty", "n_terms"):
        raise InputError(f"coefficient_paths: x must be 'log_penalty' or 'n_terms', not {x!r}")
    if picks is not None:
        require(picks, ["method", "mix", "rule", "step"], "picks")
    groups = [g for g in method_groups(coefficients)
              if method is None or method in (g[0], g[1])]
    if not groups:
        raise InputError(f"coefficient_paths: no coefficients for method {method!r}; the table has "
                         f"{', '.join(sorted(set(coefficients['method'].astype(str))))}")
    n_terms = max(1, coefficients["term"].nunique())
    limit = int(min(max_steps, max(20, max_points // (len(groups) * n_terms))))
    panels = [_path_panel(label, name, mix, rows, picks, x, limit, i)
              for i, (label, name, mix, rows) in enumerate(groups)]
    if len(panels) == 1:
        return panels[0]
    return alt.vconcat(*panels, spacing=40)


def _rows_for(frame, name, mix):
    if frame is None:
        return None
    same = frame["method"].astype(str) == name
    if "mix" in frame.columns and not is_missing(mix):
        same &= np.isclose(frame["mix"].astype(float), float(mix))
    return frame[same]


def _path_panel(label, name, mix, rows, picks, x, limit, index):
    param = f"model_{index}"
    own_picks = _rows_for(picks, name, mix)
    if own_picks is not None:
        own_picks = own_picks[own_picks.get("relaxation", pd.Series(np.nan, index=own_picks.index)).isna()]
    keep = [] if own_picks is None else own_picks["step"].astype(int).tolist()
    kept = thin_steps(rows["step"], limit, keep)
    position = {s: k for k, s in enumerate(kept)}
    sub = rows[rows["step"].isin(kept)].copy()
    sub["k"] = sub["step"].astype(int).map(position)
    sub = sub.sort_values(["term", "k"], kind="stable")

    # one row per kept step: penalty, x value, number of terms
    steps = (sub.groupby("k", sort=True)
             .agg(penalty=("penalty", "first"), step=("step", "first"),
                  n_terms=("estimate", lambda v: int((v != 0).sum())))
             .reset_index())
    if x == "n_terms":
        steps["x"] = steps["n_terms"].astype(float)
    else:
        steps["x"] = steps["penalty"]
    x_of_k = dict(zip(steps["k"], steps["x"]))

    # drop runs of zeros: keep a zero only beside a non-zero (where a line starts or ends)
    nonzero = sub["estimate"].to_numpy() != 0
    same_prev = np.r_[False, sub["term"].to_numpy()[1:] == sub["term"].to_numpy()[:-1]]
    same_next = np.r_[same_prev[1:], False]
    prev_nz = np.r_[False, nonzero[:-1]] & same_prev
    next_nz = np.r_[nonzero[1:], False] & same_next
    sub = sub[nonzero | prev_nz | next_nz]

    terms = list(dict.fromkeys(rows["term"].astype(str)))
    code = {t: i for i, t in enumerate(terms)}
    lines = pd.DataFrame({"t": sub["term"].astype(str).map(code).astype(int), "k": sub["k"].astype(int),
                          "estimate": sub["estimate"].astype(float),
                          "estimate_std": sub["estimate_std"].astype(float)})
    names = pd.DataFrame({"t": range(len(terms)), "term": terms})

    k0 = _initial_k(own_picks, position, len(kept))
    slider = alt.param(name=param, value=k0,
                       bind=alt.binding_range(min=0, max=max(len(kept) - 1, 1), step=1,
                                              name=f"{label}: model along the path "))
    hover = alt.selection_point(name=f"hover_{index}", fields=["t"], on="pointerover",
                                nearest=True, clear="pointerout", empty=False)
    # explicit domains: a layer the slider empties must not leave a scale without extent
    xs = steps["x"].dropna().astype(float)
    x_domain = [float(xs.min()), float(xs.max())] if len(xs) else [0.0, 1.0]
    if x == "log_penalty":
        x_enc = _penalty_axis(values=xs)
    else:
        x_enc = alt.X("x:Q", axis=alt.Axis(title="terms in the model", format="d", grid=False),
                      scale=alt.Scale(domain=[0.0, max(x_domain[1], 1.0)]))
    ys = lines["estimate_std"].astype(float)
    low, high = min(0.0, float(ys.min())) if len(ys) else -1.0, max(0.0, float(ys.max())) if len(ys) else 1.0
    pad = 0.04 * ((high - low) or 1.0)
    y_enc = alt.Y("estimate_std:Q", axis=alt.Axis(title="coefficient per SD of the term"),
                  scale=alt.Scale(domain=[low - pad, high + pad], nice=False))

    step_data = inline(steps[["k", "x", "penalty", "n_terms"]])
    names_data = inline(names)
    lines_data = inline(lines, digits=4)
    base = (alt.Chart(lines_data)
            .transform_lookup(lookup="t", from_=alt.LookupData(names_data, key="t", fields=["term"]))
            # a lookup source must not also feed a layer (Vega-Lite merges them and loses one),
            # hence its own, narrower copy of the steps
            .transform_lookup(lookup="k", from_=alt.LookupData(inline(steps[["k", "x", "penalty"]]), key="k",
                                                                fields=["x", "penalty"]))
            .transform_calculate(on=f"datum.k == {param} && datum.estimate != 0 ? 1 : 0")
            .transform_joinaggregate(active="max(on)", groupby=["t"]))
    idle = base.transform_filter("datum.active == 0").mark_line(
        color=theme.STONE, strokeWidth=1, opacity=0.8).encode(x=x_enc, y=y_enc, detail="t:N")
    live = base.transform_filter("datum.active == 1").mark_line(strokeWidth=1.7).encode(
        x=x_enc, y=y_enc, detail="t:N",
        color=alt.condition(hover, alt.value(theme.OCHRE), alt.value(theme.LOCH)))
    tooltip = [alt.Tooltip("term:N", title="term"),
               alt.Tooltip("penalty:Q", title="penalty", format=".4~g"),
               alt.Tooltip("estimate:Q", title="coefficient (units of the term)", format=".4~g"),
               alt.Tooltip("estimate_std:Q", title="coefficient per SD", format=".3~g")]
    dots = base.mark_circle(size=28, color=theme.OCHRE).encode(
        x=x_enc, y=y_enc, opacity=alt.condition(hover, alt.value(1.0), alt.value(0.0)),
        tooltip=tooltip).add_params(hover)
    zero = alt.Chart(inline(pd.DataFrame({"zero": [0.0]}))).mark_rule(
        color=theme.MUTED, strokeWidth=0.8).encode(y="zero:Q")
    chosen = alt.Chart(step_data).transform_filter(f"datum.k == {param}").mark_rule(
        color=theme.INK, strokeWidth=1.4).encode(x=x_enc)
    layers = [zero, idle, live, dots, chosen]
    if own_picks is not None and len(own_picks):
        marks = pd.DataFrame({"x": own_picks["step"].astype(int).map(position).map(x_of_k).astype(float),
                              "rule": [rule_label(r) for r in own_picks["rule"]]}).dropna()
        rules = alt.Chart(inline(marks))
        layers.append(rules.mark_rule(color=theme.MUTED, strokeWidth=1.2).encode(
            x=x_enc, strokeDash=alt.StrokeDash("rule:N", title="picked by cross-validation",
                                               scale=alt.Scale(domain=list(CV_RULES),
                                                               range=[[6, 3], [2, 2]])),
            tooltip=[alt.Tooltip("rule:N", title="pick")]))
    left = alt.layer(*layers).properties(width=WIDE, height=TALL).add_params(slider)

    listing = _term_list(lines_data, names_data, step_data, param)
    subtitle = ("Drag the slider to move along the path; coloured lines are the terms of that model. "
                "Hover a line to name it.")
    return alt.hconcat(left, listing, spacing=16,
                       title=alt.Title(f"Coefficient paths: {label}", subtitle=subtitle))


def _initial_k(picks, position, n):
    if picks is not None and len(picks):
        for rule in ("one_se", "min"):
            hit = picks[picks["rule"].astype(str) == rule]
            if len(hit) and int(hit["step"].iloc[0]) in position:
                return int(position[int(hit["step"].iloc[0])])
    return n // 2


def _term_list(lines, names, step_data, param):
    """The terms of the model the slider points at, largest standardised coefficient first."""
    y = alt.Y("rank:Q", axis=None, scale=alt.Scale(domain=[-1.6, LIST_ROWS + 1.5], reverse=True))
    head = (alt.Chart(step_data).transform_filter(f"datum.k == {param}")
            .transform_calculate(rank="-1", label="format(datum.penalty, '.3~g')")
            .transform_calculate(label="'penalty ' + datum.label + ' · ' + datum.n_terms + "
                                       "(datum.n_terms == 1 ? ' term' : ' terms')")
            .mark_text(align="left", fontWeight=600, fontSize=12)
            .encode(x=alt.value(0), y=y, text="label:N"))
    key = (alt.Chart(step_data).transform_filter(f"datum.k == {param}")
           .transform_calculate(rank="-0.1", label="'+ response rises with the term, \u2212 falls'")
           .mark_text(align="left", fontSize=10.5, color=theme.MUTED)
           .encode(x=alt.value(0), y=y, text="label:N"))
    ranked = (alt.Chart(lines).transform_filter(f"datum.k == {param} && datum.estimate != 0")
              .transform_lookup(lookup="t", from_=alt.LookupData(names, key="t", fields=["term"]))
              .transform_calculate(size="abs(datum.estimate_std)",
                                   sign="datum.estimate > 0 ? 'larger with more' : 'smaller with more'")
              .transform_window(rank="row_number()", sort=[alt.SortField("size", order="descending")])
              .transform_joinaggregate(total="count()"))
    rows = ranked.transform_filter(f"datum.rank <= {LIST_ROWS}").transform_calculate(
        label="(datum.estimate > 0 ? '+ ' : '\u2212 ') + datum.term").mark_text(
        align="left", fontSize=11.5).encode(
        x=alt.value(4), y=y, text="label:N",
        color=alt.Color("sign:N", legend=None,
                        scale=alt.Scale(domain=["larger with more", "smaller with more"],
                                        range=[theme.LOCH, theme.OCHRE])))
    more = ranked.transform_filter(f"datum.rank == {LIST_ROWS + 1}").transform_calculate(
        label=f"'\u2026 and ' + (datum.total - {LIST_ROWS}) + ' more'").mark_text(
        align="left", fontStyle="italic", color=theme.MUTED).encode(x=alt.value(4), y=y, text="label:N")
    return alt.layer(head, key, rows, more).properties(width=230, height=TALL)


# ---- cross-validation --------------------------------------------------------------

def cv_curve(cv: pd.DataFrame, picks: pd.DataFrame | None = None, metric: str | None = None, *,
             max_steps: int = 100):
    """Held-out error (mean ± SE over folds) against the penalty, one panel per method and mix.

    The training-fold error runs beside it: where the two part, the model has
    started to fit noise (the bias-variance picture). Rules mark the picks
    (lowest CV error, one-SE rule). The relaxed lasso gets one curve per
    relaxation. ``metric`` defaults to ``deviance`` when present.
    """
    require(cv, ["method", "mix", "step", "penalty", "metric", "cv_mean", "cv_se"], "cv")
    metrics = list(dict.fromkeys(cv["metric"].astype(str)))
    if not metrics:
        raise InputError("cv: the table is empty; nothing to draw")
    metric = metric or ("deviance" if "deviance" in metrics else metrics[0])
    if metric not in metrics:
        raise InputError(f"cv_curve: metric {metric!r} is not in the table; it has {', '.join(metrics)}")
    data = cv[cv["metric"].astype(str) == metric]
    if picks is not None:
        require(picks, ["method", "mix", "rule", "step"], "picks")
    low = (data["cv_mean"] - data["cv_se"].fillna(0)).min()
    high = (data["cv_mean"] + data["cv_se"].fillna(0)).max()
    if "train_mean" in data.columns and data["train_mean"].notna().any():
        low, high = min(low, data["train_mean"].min()), max(high, data["train_mean"].max())
    pad = 0.04 * (high - low if high > low else abs(high) or 1.0)
    domain = [float(low - pad), float(high + pad)]
    panels = []
    for label, name, mix, rows in method_groups(data):
        own = _rows_for(picks, name, mix)
        panels.append(_cv_panel(label, rows, own, metric, domain, max_steps))
    chart = alt.concat(*panels, columns=2, spacing=30).resolve_scale(color="independent",
                                                                     strokeDash="independent")
    return chart.properties(title=alt.Title(
        f"Cross-validated error: {metric_label(metric)}",
        subtitle="Blue: error on held-out folds (mean, bars ± 1 SE); ochre dashed: error on the training "
                 "folds. Where the two part, the model starts to fit noise."))


def _relaxation_name(value) -> str:
    value = float(value)
    if value == 1.0:
        return "1 (the lasso)"
    if value == 0.0:
        return "0 (plain refit)"
    return f"{value:g}"


def _cv_panel(label, rows, picks, metric, domain, max_steps):
    relaxation = rows["relaxation"] if "relaxation" in rows.columns else pd.Series(np.nan, index=rows.index)
    keep = [] if picks is None else picks["step"].astype(int).tolist()
    kept = thin_steps(rows["step"], max_steps, keep)
    rows = rows[rows["step"].isin(kept)]
    relaxation = relaxation.loc[rows.index]
    y = alt.Y("value:Q", scale=alt.Scale(domain=domain, zero=False),
              axis=alt.Axis(title=metric_label(metric)))
    x = _penalty_axis("penalty (log scale)", values=rows["penalty"])
    tooltip = [alt.Tooltip("series:N", title="curve"), alt.Tooltip("x:Q", title="penalty", format=".4~g"),
               alt.Tooltip("n_terms:Q", title="terms"), alt.Tooltip("value:Q", title="mean", format=".4~g"),
               alt.Tooltip("se:Q", title="SE", format=".3~g")]
    n_terms = rows["n_terms"] if "n_terms" in rows.columns else pd.Series(np.nan, index=rows.index)
    if relaxation.notna().any():
        long = pd.DataFrame({"x": rows["penalty"], "n_terms": n_terms, "value": rows["cv_mean"],
                             "se": rows["cv_se"], "lo": rows["cv_mean"] - rows["cv_se"],
                             "hi": rows["cv_mean"] + rows["cv_se"],
                             "series": [_relaxation_name(r) for r in relaxation]})
        domain_s = list(dict.fromkeys(long["series"]))
        colour = alt.Color("series:N", title="relaxation",
                           scale=alt.Scale(domain=domain_s, range=theme.cycle(len(domain_s))),
                           legend=alt.Legend(orient="right"))
        # error bars only for the relaxation the picks use
        bar_series = ([_relaxation_name(r) for r in picks["relaxation"].dropna()]
                      if picks is not None and "relaxation" in picks.columns else [])
        bars_data = long[long["series"].isin(bar_series)] if bar_series else long.iloc[:0]
    else:
        series = [pd.DataFrame({"x": rows["penalty"], "n_terms": n_terms, "value": rows["cv_mean"],
                                "se": rows["cv_se"], "lo": rows["cv_mean"] - rows["cv_se"],
                                "hi": rows["cv_mean"] + rows["cv_se"],
                                "series": "held-out folds (mean ± SE)"})]
        if "train_mean" in rows.columns and rows["train_mean"].notna().any():
            series.append(pd.DataFrame({"x": rows["penalty"], "n_terms": n_terms,
                                        "value": rows["train_mean"], "se": np.nan, "lo": np.nan,
                                        "hi": np.nan, "series": "training folds"}))
        long = pd.concat(series, ignore_index=True)
        domain_s = ["held-out folds (mean ± SE)", "training folds"]
        colour = alt.Color("series:N", title=None, legend=None,
                           scale=alt.Scale(domain=domain_s, range=[theme.LOCH, theme.OCHRE]))
        bars_data = long[long["series"] == domain_s[0]]
    data = inline(long)
    lines = alt.Chart(data).mark_line(strokeWidth=1.6).encode(x=x, y=y, color=colour)
    if not relaxation.notna().any():
        lines = lines.encode(strokeDash=alt.StrokeDash("series:N", legend=None, scale=alt.Scale(
            domain=domain_s, range=[[1, 0], [5, 3]])))
    points = alt.Chart(data).mark_circle(size=16).encode(x=x, y=y, color=colour, tooltip=tooltip)
    layers = [lines, points]
    if len(bars_data):
        layers.insert(0, alt.Chart(inline(bars_data)).mark_rule(color=theme.HAREBELL, strokeWidth=1.1)
                      .encode(x=x, y=alt.Y("lo:Q", scale=alt.Scale(domain=domain)), y2="hi:Q"))
    if picks is not None and len(picks):
        marks = pd.DataFrame({"x": picks["penalty"].astype(float) if "penalty" in picks.columns
                              else np.nan, "rule": [rule_label(r) for r in picks["rule"]]}).dropna()
        rules = alt.Chart(inline(marks))
        layers.append(rules.mark_rule(color=theme.INK, strokeWidth=1, strokeDash=[4, 3]).encode(
            x=x, tooltip=[alt.Tooltip("rule:N", title="pick"),
                          alt.Tooltip("x:Q", title="penalty", format=".4~g")]))
        layers.append(rules.mark_text(angle=270, align="right", baseline="bottom", dx=-4, dy=-3,
                                      fontSize=10, color=theme.MUTED)
                      .encode(x=x, y=alt.value(0), text="rule:N"))
    return alt.layer(*layers).properties(width=PANEL, height=220, title=label)


# ---- stability -----------------------------------------------------------------------

def cluster_labels(frame: pd.DataFrame, column: str = "cluster") -> pd.Series:
    """'cluster 3' for terms sharing a cluster with another term, '' for terms on their own."""
    if column not in frame.columns:
        return pd.Series("", index=frame.index)
    raw = frame[column]
    text = raw.map(lambda v: "" if is_missing(v) or str(v).strip() == "" else
                   (f"cluster {int(v)}" if isinstance(v, (int, float, np.integer, np.floating))
                    and float(v).is_integer() else str(v)))
    size = text.map(text.value_counts())
    return text.where((text != "") & (size >= 2), "")


def _cluster_colour(labels: pd.Series):
    """A colour scale: the first seven clusters (in the order given) in colour, the rest in stone."""
    named = [c for c in dict.fromkeys(labels) if c]
    coloured = named[:len(theme.CATEGORICAL)]
    domain = coloured + ["other cluster or none"]
    colours = list(theme.CATEGORICAL[:len(coloured)]) + [theme.STONE]
    shown = labels.where(labels.isin(coloured), "other cluster or none")
    return shown, alt.Scale(domain=domain, range=colours)


def stability_bars(stability: pd.DataFrame, threshold: float | None = None, *, max_terms: int = 60):
    """Selection frequency of each term across subsamples, highest first.

    Bars are coloured by correlation cluster (terms that stand in for each
    other); a tick marks how often any term of the cluster was chosen, and the
    vertical rule is the threshold a term must pass to count as stable.
    """
    require(stability, ["term", "selection_frequency"], "stability")
    frame = stability.copy()
    frame["cluster_name"] = cluster_labels(frame)
    frame = frame.sort_values("selection_frequency", ascending=False, kind="stable")
    note = ""
    if len(frame) > max_terms:
        note = f" The {max_terms} most often chosen of {len(frame)} terms are shown."
        frame = frame.head(max_terms)
    frame["colour"], scale = _cluster_colour(frame["cluster_name"])
    stable = truthy(frame["stable"]) if "stable" in frame.columns else pd.Series(False, index=frame.index)
    frame["status"] = np.where(stable, "stable", "not stable")
    keep = ["term", "selection_frequency", "cluster_name", "colour", "status"]
    stable_names = json.dumps(frame.loc[stable, "term"].astype(str).tolist())
    if "cluster_frequency" in frame.columns:
        keep.append("cluster_frequency")
    data = inline(frame[keep])
    order = frame["term"].astype(str).tolist()
    # stable terms are named in bold
    bold = {"condition": {"test": f"indexof({stable_names}, datum.value) >= 0", "value": 700}, "value": 400}
    y = alt.Y("term:N", sort=order, axis=alt.Axis(title=None, labelLimit=260, labelFontWeight=bold))
    x = alt.X("selection_frequency:Q", scale=alt.Scale(domain=[0, 1]),
              axis=alt.Axis(title="share of subsamples in which the term was chosen", format=".0%"))
    tooltip = [alt.Tooltip("term:N"), alt.Tooltip("selection_frequency:Q", title="chosen in", format=".0%"),
               alt.Tooltip("status:N", title="verdict"), alt.Tooltip("cluster_name:N", title="cluster")]
    if "cluster_frequency" in keep:
        tooltip.append(alt.Tooltip("cluster_frequency:Q", title="any of its cluster", format=".0%"))
    bars = alt.Chart(data).mark_bar(height={"band": 0.72}).encode(
        x=x, y=y, color=alt.Color("colour:N", title="correlation cluster", scale=scale), tooltip=tooltip)
    layers = [bars]
    if "cluster_frequency" in keep:
        layers.append(alt.Chart(data).transform_filter("datum.cluster_name != ''").mark_tick(
            color=theme.INK, thickness=2, size=ROW * 0.8).encode(
            x="cluster_frequency:Q", y=y, tooltip=tooltip))
    if threshold is not None and not is_missing(threshold):
        rule = pd.DataFrame({"threshold": [float(threshold)], "label": [f"threshold {float(threshold):.0%}"]})
        layers.append(alt.Chart(inline(rule)).mark_rule(color=theme.INK, strokeDash=[5, 3]).encode(
            x="threshold:Q", tooltip=[alt.Tooltip("label:N", title="stable above")]))
    subtitle = "Stable terms in bold; dashed line: the threshold."
    if "cluster_frequency" in keep:
        subtitle += " Tick: how often any term of the same cluster was chosen."
    return alt.layer(*layers).properties(
        width=WIDE, height=max(120, ROW * len(frame)),
        title=alt.Title("How often each term was chosen",
                        subtitle=(subtitle + note).strip() or alt.Undefined))


def stability_paths(
    stability_path: pd.DataFrame,
    threshold: float | None = None,
    stable=None,
    *,
    max_steps: int = 100,
    max_points: int = 20_000,
):
    """Selection frequency of every term along the penalty (stability paths).

    Terms that reach ``threshold`` (or are listed in ``stable``) are drawn in
    colour and named where they first cross the threshold (at their highest
    point when no threshold is given); the rest stay in stone. When the table
    has ``in_region``, the penalties it marks are shaded: the stretch over
    which frequencies count and the error bound holds.
    """
    require(stability_path, ["term", "penalty", "frequency"], "stability_path")
    frame = stability_path[["term", "penalty", "frequency"]].copy()
    frame["term"] = frame["term"].astype(str)
    region = None
    if "in_region" in stability_path.columns:
        inside = stability_path.loc[truthy(stability_path["in_region"]), "penalty"].astype(float)
        if len(inside):
            region = (float(inside.max()), float(inside.min()))
    penalties = np.sort(frame["penalty"].unique())[::-1]  # strongest first
    n_terms = max(1, frame["term"].nunique())
    limit = int(min(max_steps, max(20, max_points // n_terms)))
    if len(penalties) > limit:
        penalties = penalties[np.unique(np.round(np.linspace(0, len(penalties) - 1, limit)).astype(int))]
        frame = frame[frame["penalty"].isin(set(penalties))]
    position = {v: k for k, v in enumerate(penalties)}
    frame["k"] = frame["penalty"].map(position).astype(int)
    frame = frame.sort_values(["term", "k"], kind="stable")
    peak = frame.groupby("term")["frequency"].max()
    if stable is not None:
        chosen = set(map(str, stable))
    elif threshold is not None and not is_missing(threshold):
        chosen = set(peak[peak >= float(threshold)].index.astype(str))
    else:
        chosen = set()
    # a term's line starts at its last zero: earlier zeros only repeat the floor
    positive = frame["frequency"].to_numpy() > 0
    same_next = np.r_[frame["term"].to_numpy()[1:] == frame["term"].to_numpy()[:-1], False]
    frame = frame[positive | (np.r_[positive[1:], False] & same_next)]
    terms = sorted(frame["term"].unique())
    code = {t: i for i, t in enumerate(terms)}
    names = pd.DataFrame(
        {"t": range(len(terms)), "term": terms, "stable": [1 if t in chosen else 0 for t in terms]}
    )
    points = pd.DataFrame(
        {
            "t": frame["term"].map(code).astype(int),
            "k": frame["k"],
            "frequency": frame["frequency"].astype(float),
        }
    )
    grid = pd.DataFrame({"k": range(len(penalties)), "x": penalties.astype(float)})
    data = (
        alt.Chart(inline(points, digits=3))
        .transform_lookup(lookup="t", from_=alt.LookupData(inline(names), key="t", fields=["term", "stable"]))
        .transform_lookup(lookup="k", from_=alt.LookupData(inline(grid), key="k", fields=["x"]))
        .transform_calculate(group="datum.stable == 1 ? 'stable' : 'not stable'")
    )
    x = _penalty_axis(values=penalties)
    y = alt.Y(
        "frequency:Q",
        scale=alt.Scale(domain=[0, 1]),
        axis=alt.Axis(title="share of subsamples choosing the term", format=".0%"),
    )
    hover = alt.selection_point(
        name="stability_hover", fields=["t"], on="pointerover", nearest=True, clear="pointerout", empty=False
    )
    tooltip = [
        alt.Tooltip("term:N"),
        alt.Tooltip("x:Q", title="penalty", format=".4~g"),
        alt.Tooltip("frequency:Q", title="chosen in", format=".0%"),
    ]
    rest = (
        data.transform_filter("datum.group != 'stable'")
        .mark_line(color=theme.STONE, strokeWidth=1)
        .encode(x=x, y=y, detail="t:N")
    )
    named = list(sorted(chosen))
    top = (
        data.transform_filter("datum.group == 'stable'")
        .mark_line(strokeWidth=1.8)
        .encode(
            x=x, y=y, detail="t:N", color=alt.condition(hover, alt.value(theme.OCHRE), alt.value(theme.LOCH))
        )
    )
    dots = (
        data.mark_circle(size=26, color=theme.OCHRE)
        .encode(x=x, y=y, opacity=alt.condition(hover, alt.value(1.0), alt.value(0.0)), tooltip=tooltip)
        .add_params(hover)
    )
    # name each stable line where it first crosses the threshold (lines cross at different
    # penalties, so the names rarely collide), or at its highest point without a threshold
    if threshold is not None and not is_missing(threshold):
        marked = data.transform_filter(f"datum.group == 'stable' && datum.frequency >= {float(threshold)}")
        order = [alt.SortField("k", order="ascending")]
    else:
        marked = data.transform_filter("datum.group == 'stable'")
        order = [alt.SortField("frequency", order="descending"), alt.SortField("k", order="ascending")]
    labels = (
        marked.transform_window(rank="row_number()", groupby=["t"], sort=order)
        .transform_filter("datum.rank == 1")
        # names that land close together are stacked on three rows
        .transform_window(row="row_number()", sort=[alt.SortField("k", order="ascending")])
        .transform_calculate(label_y="min(1.02, datum.frequency + 0.055 * ((datum.row - 1) % 3))")
        .mark_text(align="left", dx=5, dy=-6, fontSize=10.5, color=theme.LOCH)
        .encode(x=x, y=alt.Y("label_y:Q", scale=alt.Scale(domain=[0, 1])), text="term:N")
    )
    layers = [rest, top, dots, labels]
    if region is not None:
        shade = pd.DataFrame(
            {"x": [region[0]], "x2": [region[1]], "label": ["penalties the error bound covers"]}
        )
        layers.insert(
            0,
            alt.Chart(inline(shade))
            .mark_rect(color=theme.GRID, opacity=0.7)
            .encode(x=x, x2="x2:Q", tooltip=[alt.Tooltip("label:N", title="shaded")]),
        )
    if threshold is not None and not is_missing(threshold):
        layers.append(
            alt.Chart(inline(pd.DataFrame({"level": [float(threshold)]})))
            .mark_rule(color=theme.INK, strokeDash=[5, 3])
            .encode(y="level:Q")
        )
    subtitle = (
        f"{len(named)} term(s) pass the threshold; hover a line to name it."
        if named
        else "Hover a line to name it."
    )
    if region is not None:
        subtitle += " Shaded: the penalties over which frequencies count and the error bound holds."
    return alt.layer(*layers).properties(
        width=WIDE,
        height=TALL,
        title=alt.Title(
            "Stability paths: how often each term is chosen as the penalty weakens", subtitle=subtitle
        ),
    )


# ---- comparing methods --------------------------------------------------------------


def comparison_chart(comparison: pd.DataFrame):
    """Every method and pick rule judged on the same outer folds: error (± SE) against size.

    The error is the outer-fold (nested cross-validation) score of the whole
    choice, redone inside each fold; the x axis is the number of terms in the
    model chosen on all sites.
    """
    require(comparison, ["method", "rule", "n_terms", "outer_mean", "outer_se"], "comparison")
    frame = comparison.copy()
    mix = frame["mix"] if "mix" in frame.columns else pd.Series(np.nan, index=frame.index)
    frame["label"] = [method_label(m, x) for m, x in zip(frame["method"], mix)]
    frame["rule_name"] = [rule_label(r) for r in frame["rule"]]
    frame["lo"] = frame["outer_mean"] - frame["outer_se"].fillna(0)
    frame["hi"] = frame["outer_mean"] + frame["outer_se"].fillna(0)
    metric = str(frame["metric"].iloc[0]) if "metric" in frame.columns and len(frame) else ""
    # rows with the same size sit side by side instead of on top of each other
    frame["position"] = frame["n_terms"].astype(float) + 0.0
    for _, same in frame.groupby("n_terms"):
        if len(same) > 1:
            spread = min(0.8, 0.02 * max(1.0, float(frame["n_terms"].max())) * len(same))
            frame.loc[same.index, "position"] += np.linspace(-spread / 2, spread / 2, len(same))
    low, high = float(frame["lo"].min()), float(frame["hi"].max())
    pad = 0.06 * (high - low if high > low else 1.0)
    domain = [low - pad, high + pad]
    keep = ["label", "rule_name", "n_terms", "position", "outer_mean", "outer_se", "lo", "hi"]
    extra = [c for c in ("optimism", "jaccard", "outer_n_terms", "inner_mean") if c in frame.columns]
    data = inline(frame[keep + extra])
    methods = list(dict.fromkeys(frame["label"]))
    rules = list(dict.fromkeys(frame["rule_name"]))
    method_scale = alt.Scale(domain=methods, range=theme.cycle(len(methods)))
    colour = alt.Color("label:N", title="method", scale=method_scale)
    shapes = ["circle", "square", "triangle-up", "diamond", "cross", "triangle-down"]
    shape = alt.Shape(
        "rule_name:N",
        title="pick rule",
        scale=alt.Scale(domain=rules, range=[shapes[i % len(shapes)] for i in range(len(rules))]),
    )
    x = alt.X(
        "position:Q",
        axis=alt.Axis(title="terms in the model chosen on all sites", tickMinStep=1),
        scale=alt.Scale(zero=True, nice=True),
    )
    y = alt.Y(
        "outer_mean:Q",
        scale=alt.Scale(domain=domain, zero=False),
        axis=alt.Axis(title=f"outer-fold error: {metric_label(metric)}" if metric else "outer-fold error"),
    )
    tooltip = [
        alt.Tooltip("label:N", title="method"),
        alt.Tooltip("rule_name:N", title="rule"),
        alt.Tooltip("n_terms:Q", title="terms"),
        alt.Tooltip("outer_mean:Q", title="outer error", format=".4~g"),
        alt.Tooltip("outer_se:Q", title="SE", format=".3~g"),
    ] + [alt.Tooltip(f"{c}:Q", title=readable(c), format=".3~g") for c in extra]
    bars = (
        alt.Chart(data)
        .mark_rule(strokeWidth=1.5)
        .encode(x=x, y=alt.Y("lo:Q", scale=alt.Scale(domain=domain, zero=False)), y2="hi:Q", color=colour)
    )
    points = (
        alt.Chart(data)
        .mark_point(filled=True, size=90, opacity=1)
        .encode(x=x, y=y, color=colour, shape=shape, tooltip=tooltip)
    )
    return alt.layer(bars, points).properties(
        width=WIDE,
        height=TALL,
        title=alt.Title(
            "Every method judged on the same outer folds",
            subtitle="Lower and further left is better: less error with fewer terms. "
                     "Bars are ± 1 SE over folds.",
        ),
    )


def akaike_weights(subsets: pd.DataFrame, *, max_models: int = 20):
    """Akaike weights of the best candidate models from the subset search.

    The weight column is ``akaike_weight`` (or ``weight``); models of the 95%
    confidence set (``in_confidence_set``) are drawn in colour, the rest in stone.
    """
    column = "akaike_weight" if "akaike_weight" in subsets.columns else "weight"
    require(subsets, ["terms", column], "subsets")
    frame = subsets.rename(columns={column: "weight"})
    total = len(frame)
    frame = frame.sort_values("weight", ascending=False, kind="stable").head(max_models).copy()
    frame["terms"] = frame["terms"].fillna("").astype(str)
    frame["model"] = [_model_name(t, i + 1) for i, t in enumerate(frame["terms"])]
    frame["cumulative"] = frame["weight"].cumsum()
    frame["set"] = (
        np.where(truthy(frame["in_confidence_set"]), "in the 95% confidence set", "outside it")
        if "in_confidence_set" in frame.columns
        else "model"
    )
    keep = ["model", "terms", "weight", "cumulative", "set"] + [
        c for c in ("k", "delta", "aicc", "aic", "bic", "log_likelihood") if c in frame.columns
    ]
    data = inline(frame[keep])
    order = frame["model"].tolist()
    tooltip = [
        alt.Tooltip("terms:N", title="terms"),
        alt.Tooltip("weight:Q", format=".3f"),
        alt.Tooltip("cumulative:Q", title="cumulative weight", format=".3f"),
    ] + [
        alt.Tooltip(
            f"{c}:Q", title={"aic": "AIC", "aicc": "AICc", "bic": "BIC"}.get(c, readable(c)), format=".4~g"
        )
        for c in keep[5:]
    ]
    y = alt.Y("model:N", sort=order, axis=alt.Axis(title=None, labelLimit=360))
    flagged = "in_confidence_set" in subsets.columns
    sets = ["in the 95% confidence set", "outside it"] if flagged else ["model"]
    bars = (
        alt.Chart(data)
        .mark_bar(height={"band": 0.72})
        .encode(
            color=alt.Color(
                "set:N",
                title=None,
                scale=alt.Scale(domain=sets, range=[theme.LOCH, theme.STONE][: len(sets)]),
                legend=alt.Legend(orient="bottom") if flagged else None,
            ),
            x=alt.X(
                "weight:Q",
                axis=alt.Axis(title="Akaike weight", format=".1f", tickCount=5),
                scale=alt.Scale(domain=[0, 1]),
            ),
            y=y,
            tooltip=tooltip,
        )
    )
    text = (
        alt.Chart(data)
        .mark_text(align="left", dx=4, fontSize=10, color=theme.MUTED)
        .encode(x="weight:Q", y=y, text=alt.Text("weight:Q", format=".2f"))
    )
    return alt.layer(bars, text).properties(
        width=WIDE - 120,
        height=max(100, ROW * len(frame)),
        title=alt.Title(
            "Akaike weights of the best subsets",
            subtitle=f"The {len(frame)} best-supported of {total} models; weights sum to 1 over all of them.",
        ),
    )


def _model_name(terms: str, rank: int, limit: int = 70) -> str:
    parts = [t for t in terms.split(";") if t]
    text = " + ".join(parts) if parts else "(intercept only)"
    if len(text) > limit:
        text = text[: limit - 1].rstrip(" +") + "\u2026"
    return f"{rank}. {text}"


def _share_bars(data, field, colour, title, number_format, y, tooltip):
    """Horizontal bars of a share between 0 and 1, one per term."""
    return (
        alt.Chart(data)
        .mark_bar(color=colour, height={"band": 0.7})
        .encode(
            x=alt.X(f"{field}:Q", scale=alt.Scale(domain=[0, 1]),
                    axis=alt.Axis(title=title, format=number_format)),
            y=y,
            tooltip=tooltip,
        )
    )


def importance_bars(importance: pd.DataFrame, *, max_terms: int = 60):
    """Relative importance of each term: the summed Akaike weight of the models holding it."""
    require(importance, ["term", "importance"], "importance")
    frame = importance.sort_values("importance", ascending=False, kind="stable")
    note = alt.Undefined
    if len(frame) > max_terms:
        note = f"The {max_terms} most important of {len(frame)} terms are shown."
        frame = frame.head(max_terms)
    data = inline(frame[["term", "importance"]])
    y = alt.Y("term:N", sort=frame["term"].astype(str).tolist(), axis=alt.Axis(title=None))
    bars = _share_bars(data, "importance", theme.HEATHER,
                       "summed Akaike weight of the models that hold the term", ".1f", y,
                       [alt.Tooltip("term:N"), alt.Tooltip("importance:Q", format=".3f")])
    return bars.properties(
        width=WIDE - 120,
        height=max(100, ROW * len(frame)),
        title=alt.Title("Relative importance of each term", subtitle=note),
    )


# ---- correlated predictors ----------------------------------------------------------


def cluster_order(correlations: pd.DataFrame) -> list:
    """Terms ordered so that strongly correlated ones sit together.

    Average-linkage clustering on 1 - |r| with the optimal leaf order
    (scipy.cluster.hierarchy); falls back to the order of appearance for
    fewer than three terms.
    """
    require(correlations, ["term_a", "term_b", "r"], "correlations")
    names = list(
        dict.fromkeys(list(correlations["term_a"].astype(str)) + list(correlations["term_b"].astype(str)))
    )
    if len(names) < 3:
        return names
    from scipy.cluster.hierarchy import leaves_list, linkage, optimal_leaf_ordering
    from scipy.spatial.distance import squareform

    index = {n: i for i, n in enumerate(names)}
    dist = np.ones((len(names), len(names)))
    np.fill_diagonal(dist, 0.0)
    a = correlations["term_a"].astype(str).map(index).to_numpy()
    b = correlations["term_b"].astype(str).map(index).to_numpy()
    r = np.nan_to_num(correlations["r"].to_numpy(dtype=float), nan=0.0)
    dist[a, b] = dist[b, a] = 1.0 - np.abs(r)
    condensed = np.clip(squareform(dist, checks=False), 0.0, None)
    tree = optimal_leaf_ordering(linkage(condensed, method="average"), condensed)
    return [names[i] for i in leaves_list(tree)]


def correlation_heatmap(correlations: pd.DataFrame, order=None, *, max_terms: int = 80):
    """Pearson correlations between terms, ordered so that correlated terms cluster.

    One triangle of the matrix (each pair once). With more than ``max_terms``
    terms only those with the strongest partners are drawn (the subtitle says
    so); correlations.csv holds every pair.
    """
    require(correlations, ["term_a", "term_b", "r"], "correlations")
    frame = correlations[["term_a", "term_b", "r"]].copy()
    frame["term_a"], frame["term_b"] = frame["term_a"].astype(str), frame["term_b"].astype(str)
    names = list(dict.fromkeys(list(frame["term_a"]) + list(frame["term_b"])))
    subtitle = (
        "Blue: rise and fall in opposite directions; ochre: together. "
        f"|r| > {CORRELATION_THRESHOLD} is a common warning sign."
    )
    if len(names) > max_terms:
        strongest = pd.concat(
            [
                frame[["term_a", "r"]].rename(columns={"term_a": "term"}),
                frame[["term_b", "r"]].rename(columns={"term_b": "term"}),
            ]
        )
        strongest = strongest.assign(r=strongest["r"].abs()).groupby("term")["r"].max()
        keep = set(strongest.sort_values(ascending=False, kind="stable").head(max_terms).index)
        frame = frame[frame["term_a"].isin(keep) & frame["term_b"].isin(keep)]
        subtitle = (
            f"The {max_terms} of {len(names)} terms with the strongest partners are shown; "
            "correlations.csv holds every pair."
        )
        names = [n for n in names if n in keep]
    if order is None:
        order = cluster_order(frame)
    order = [str(t) for t in order if str(t) in set(names)] + [
        n for n in names if n not in set(map(str, order))
    ]
    position = {t: i for i, t in enumerate(order)}
    # put every pair in the lower triangle of the chosen order
    pa, pb = frame["term_a"].map(position), frame["term_b"].map(position)
    swap = pa < pb
    row = np.where(swap, frame["term_b"], frame["term_a"])
    col = np.where(swap, frame["term_a"], frame["term_b"])
    cells = pd.DataFrame({"row": row, "col": col, "r": frame["r"].astype(float)})
    cells["strong"] = np.where(cells["r"].abs() > CORRELATION_THRESHOLD, cells["r"].map(lambda v: f"{v:.1f}"), "")
    size = 18 if len(order) <= 30 else (13 if len(order) <= 60 else 10)
    data = inline(cells, digits=3)
    chart = (
        alt.Chart(data)
        .mark_rect(stroke=theme.PAPER, strokeWidth=0.5)
        .encode(
            x=alt.X(
                "col:N",
                sort=order[:-1],
                axis=alt.Axis(
                    title=None, labelAngle=-60, labelLimit=180, labelFontSize=10 if size >= 13 else 8
                ),
            ),
            y=alt.Y(
                "row:N",
                sort=order[1:],
                axis=alt.Axis(title=None, labelLimit=180, labelFontSize=10 if size >= 13 else 8),
            ),
            color=alt.Color(
                "r:Q",
                title="r",
                scale=alt.Scale(
                    domain=[-1, 0, 1],
                    range=[theme.DIVERGING[0], theme.DIVERGING[2], theme.DIVERGING[-1]],
                    interpolate="lab",
                ),
                legend=alt.Legend(
                    gradientLength=int(min(160, max(60, size * (len(order) - 1)))), format=".1f"
                ),
            ),
            tooltip=[
                alt.Tooltip("row:N", title="term"),
                alt.Tooltip("col:N", title="and"),
                alt.Tooltip("r:Q", format=".2f"),
            ],
        )
    )
    layers = [chart]
    if size >= 13:
        layers.append(
            alt.Chart(data)
            .mark_text(fontSize=8 if size < 18 else 9)
            .encode(
                x=alt.X("col:N", sort=order[:-1]),
                y=alt.Y("row:N", sort=order[1:]),
                text="strong:N",
                color=alt.condition("abs(datum.r) > 0.85", alt.value("#FFFFFF"), alt.value(theme.INK)),
            )
        )
    n = max(1, len(order) - 1)
    return alt.layer(*layers).properties(
        width=size * n,
        height=size * n,
        title=alt.Title("How the terms move together (Pearson r)", subtitle=subtitle),
    )


def vif_bars(vif: pd.DataFrame, *, max_terms: int = 60):
    """Variance inflation factor of each term, with the common warning lines at 5 and 10."""
    require(vif, ["term", "vif"], "vif")
    frame = vif.copy()
    frame["vif"] = pd.to_numeric(frame["vif"], errors="coerce")
    cap = 1000.0
    frame["shown"] = frame["vif"].clip(upper=cap).fillna(cap)
    frame["value"] = frame["vif"].map(lambda v: "not defined" if not math.isfinite(v) else f"{v:.3g}")
    frame["cluster_name"] = cluster_labels(frame)
    frame = frame.sort_values("shown", ascending=False, kind="stable")
    note = "Above 5 (dashed) or 10 (solid) a term is largely predictable from the others."
    if len(frame) > max_terms:
        note += f" The {max_terms} highest of {len(frame)} are shown."
        frame = frame.head(max_terms)
    if (frame["vif"] > cap).any() or frame["vif"].isna().any():
        note += f" Bars are cut at {cap:g}."
    frame["colour"], scale = _cluster_colour(frame["cluster_name"])
    data = inline(frame[["term", "shown", "value", "cluster_name", "colour"]])
    y = alt.Y("term:N", sort=frame["term"].astype(str).tolist(), axis=alt.Axis(title=None))
    top = max(20.0, float(frame["shown"].max()) * 1.2 if len(frame) else 20.0)
    ticks = [v for v in (1, 2, 5, 10, 20, 50, 100, 200, 500, 1000) if v <= top]
    # bars start at 1 (no inflation): a log scale has no zero to start from
    bars = (
        alt.Chart(data)
        .transform_calculate(one="1")
        .mark_bar(height={"band": 0.72})
        .encode(
            x=alt.X(
                "one:Q",
                scale=alt.Scale(type="log", domain=[1, top], nice=False),
                axis=alt.Axis(title="variance inflation factor (log scale)", format="~g", values=ticks),
            ),
            x2="shown:Q",
            y=y,
            color=alt.Color("colour:N", title="correlation cluster", scale=scale),
            tooltip=[
                alt.Tooltip("term:N"),
                alt.Tooltip("value:N", title="VIF"),
                alt.Tooltip("cluster_name:N", title="cluster"),
            ],
        )
    )
    lines = (
        alt.Chart(inline(pd.DataFrame({"at": [5.0, 10.0], "kind": ["5", "10"]})))
        .mark_rule(color=theme.INK)
        .encode(
            x="at:Q",
            strokeDash=alt.StrokeDash(
                "kind:N", legend=None, scale=alt.Scale(domain=["5", "10"], range=[[5, 3], [1, 0]])
            ),
        )
    )
    return alt.layer(bars, lines).properties(
        width=WIDE - 100,
        height=max(100, ROW * len(frame)),
        title=alt.Title("Variance inflation", subtitle=note),
    )


# ---- the chosen model -------------------------------------------------------------------


def chosen_coefficients(chosen: pd.DataFrame):
    """The chosen model's coefficients per SD of each term, beside how often each term was chosen."""
    require(chosen, ["term", "estimate", "estimate_std"], "chosen")
    frame = chosen.copy()
    title = "The chosen model"
    if {"method", "rule"} <= set(frame.columns) and len(frame):
        first = frame.iloc[0]
        title += f": {method_label(first['method'], first.get('mix'))}, {rule_label(first['rule'])}"
    frame["direction"] = np.where(frame["estimate_std"] >= 0, "larger with more", "smaller with more")
    frame = frame.reindex(frame["estimate_std"].abs().sort_values(ascending=False, kind="stable").index)
    has_freq = "selection_frequency" in frame.columns and frame["selection_frequency"].notna().any()
    keep = ["term", "estimate", "estimate_std", "direction"] + (["selection_frequency"] if has_freq else [])
    data = inline(frame[keep])
    y = alt.Y("term:N", sort=frame["term"].astype(str).tolist(), axis=alt.Axis(title=None))
    tooltip = [
        alt.Tooltip("term:N"),
        alt.Tooltip("estimate:Q", title="coefficient (units of the term)", format=".4~g"),
        alt.Tooltip("estimate_std:Q", title="coefficient per SD", format=".3~g"),
    ]
    if has_freq:
        tooltip.append(alt.Tooltip("selection_frequency:Q", title="chosen in", format=".0%"))
    colour = alt.Color(
        "direction:N",
        title="response is",
        scale=alt.Scale(domain=["larger with more", "smaller with more"], range=[theme.LOCH, theme.OCHRE]),
    )
    x = alt.X("estimate_std:Q", axis=alt.Axis(title="coefficient per SD of the term (link scale)"))
    stems = (
        alt.Chart(data)
        .mark_bar(height=2)
        .encode(x=alt.X("zero:Q"), x2="estimate_std:Q", y=y, color=colour)
        .transform_calculate(zero="0")
    )
    dots = alt.Chart(data).mark_circle(size=80, opacity=1).encode(x=x, y=y, color=colour, tooltip=tooltip)
    zero = alt.Chart(inline(pd.DataFrame({"zero": [0.0]}))).mark_rule(color=theme.MUTED).encode(x="zero:Q")
    height = max(80, ROW * len(frame))
    left = alt.layer(zero, stems, dots).properties(width=360, height=height)
    if not has_freq:
        return left.properties(title=alt.Title(title, subtitle="Coefficients per SD of each term."))
    right = _share_bars(data, "selection_frequency", theme.HAREBELL, "chosen in (share of subsamples)",
                        ".0%", alt.Y("term:N", sort=frame["term"].astype(str).tolist(), axis=None),
                        tooltip).properties(width=170, height=height)
    return alt.hconcat(
        left,
        right,
        spacing=10,
        title=alt.Title(
            title, subtitle="Left: coefficient per SD of each term. Right: how often the term was chosen."
        ),
    )


def response_curves(
    response_curves: pd.DataFrame,
    rug: pd.DataFrame | None = None,
    response_label: str = "fitted value",
    *,
    columns: int = 4,
    max_rug: int = 300,
):
    """Fitted response against each term (others held at typical values), small multiples.

    A band shows ``lower``..``upper`` when the table has them; ticks along the
    bottom (the rug) show where the observed values of the term lie, thinned
    to ``max_rug`` evenly spaced quantiles per term.
    """
    require(response_curves, ["term", "value", "fitted"], "response_curves")
    if rug is not None:
        require(rug, ["term", "value"], "rug")
    frame = response_curves.copy()
    frame["term"] = frame["term"].astype(str)
    has_band = {"lower", "upper"} <= set(frame.columns) and frame[["lower", "upper"]].notna().any().all()
    low = frame[["fitted"] + (["lower"] if has_band else [])].min().min()
    high = frame[["fitted"] + (["upper"] if has_band else [])].max().max()
    domain = [float(low), float(high)] if np.isfinite([low, high]).all() and high > low else alt.Undefined
    panels = []
    for term, rows in frame.groupby("term", sort=False):
        keep = ["value", "fitted"] + (["lower", "upper"] if has_band else [])
        data = inline(rows[keep])
        x = alt.X("value:Q", title=term, scale=alt.Scale(zero=False, nice=False))
        y = alt.Y("fitted:Q", title=response_label, scale=alt.Scale(domain=domain, zero=False))
        layers = []
        if has_band:
            layers.append(
                alt.Chart(data)
                .mark_area(color=theme.HAREBELL, opacity=0.45)
                .encode(x=x, y=alt.Y("lower:Q", scale=alt.Scale(domain=domain, zero=False)), y2="upper:Q")
            )
        layers.append(
            alt.Chart(data)
            .mark_line(color=theme.LOCH, strokeWidth=2)
            .encode(
                x=x,
                y=y,
                tooltip=[
                    alt.Tooltip("value:Q", title=term, format=".4~g"),
                    alt.Tooltip("fitted:Q", title=response_label, format=".3~g"),
                ],
            )
        )
        if rug is not None:
            values = pd.to_numeric(
                rug.loc[rug["term"].astype(str) == term, "value"], errors="coerce"
            ).dropna()
            if len(values) > max_rug:
                values = pd.Series(np.quantile(values, np.linspace(0, 1, max_rug)))
            if len(values):
                layers.append(
                    alt.Chart(inline(pd.DataFrame({"value": values.to_numpy()})))
                    .mark_tick(color=theme.PEAT, opacity=0.5, thickness=1, size=7)
                    .encode(x="value:Q", y=alt.value(126))
                )
        panels.append(alt.layer(*layers).properties(width=170, height=130))
    if not panels:
        raise InputError("response_curves: the table has no rows; nothing to draw")
    subtitle = (
        "Each panel varies one term and holds the others at typical values; "
        "ticks at the bottom show where sites were sampled."
    )
    return alt.concat(*panels, columns=columns, spacing=18).properties(
        title=alt.Title("Fitted response along each term", subtitle=subtitle)
    )


# ---- space ------------------------------------------------------------------------------


def site_map(
    sites: pd.DataFrame,
    colour: str = "fold",
    *,
    max_points: int = 5_000,
    seed: int = 0,
    size: int = 420,
    x_title: str = "x",
    y_title: str = "y",
):
    """Sites on their coordinates, coloured by cross-validation fold or by held-out residual.

    ``colour="held_out"`` shows observed minus the held-out prediction (the
    prediction for the site from the model fitted without its fold): clumps
    of one colour mean the model misses something that varies in space. More
    than ``max_points`` sites are sampled (seeded by ``seed``; the subtitle
    says so).
    """
    if colour not in ("fold", "held_out"):
        raise InputError(f"site_map: colour must be 'fold' or 'held_out', not {colour!r}")
    need = ["x", "y"] + (["fold"] if colour == "fold" else ["observed", "held_out"])
    require(sites, need, "sites")
    frame = sites.copy()
    frame["x"], frame["y"] = (
        pd.to_numeric(frame["x"], errors="coerce"),
        pd.to_numeric(frame["y"], errors="coerce"),
    )
    frame = frame[frame["x"].notna() & frame["y"].notna()]
    if frame.empty:
        raise InputError("sites: no site has coordinates; give them with --coords XCOL,YCOL")
    frame, note = _sample(frame, max_points, seed)
    xr = float(frame["x"].max() - frame["x"].min()) or 1.0
    yr = float(frame["y"].max() - frame["y"].min()) or 1.0
    width, height = (
        (size, max(120, int(size * yr / xr))) if xr >= yr else (max(120, int(size * xr / yr)), size)
    )
    x = alt.X("x:Q", scale=alt.Scale(zero=False, nice=False), axis=alt.Axis(title=x_title, grid=False))
    y = alt.Y("y:Q", scale=alt.Scale(zero=False, nice=False), axis=alt.Axis(title=y_title, grid=False))
    point = 36 if len(frame) <= 1000 else (16 if len(frame) <= 3000 else 9)
    if colour == "fold":
        frame["fold_name"] = frame["fold"].map(
            lambda f: f"fold {int(f)}" if not is_missing(f) and float(f).is_integer() else f"fold {f}"
        )
        folds = list(dict.fromkeys(frame.sort_values("fold")["fold_name"]))
        shapes = ["circle", "square", "triangle-up", "diamond"]
        n = len(theme.CATEGORICAL)
        data = inline(
            frame[["x", "y", "fold_name"] + [c for c in ("row",) if c in frame.columns]], precise=("x", "y")
        )
        mark = (
            alt.Chart(data)
            .mark_point(filled=True, size=point, opacity=0.9)
            .encode(
                x=x,
                y=y,
                color=alt.Color(
                    "fold_name:N", title="fold", scale=alt.Scale(domain=folds, range=theme.cycle(len(folds)))
                ),
                shape=alt.Shape(
                    "fold_name:N",
                    title="fold",
                    scale=alt.Scale(
                        domain=folds, range=[shapes[(i // n) % len(shapes)] for i in range(len(folds))]
                    ),
                ),
                tooltip=[alt.Tooltip("fold_name:N", title="fold")]
                + ([alt.Tooltip("row:Q", title="row")] if "row" in frame.columns else []),
            )
        )
        title = "Sites by cross-validation fold"
        subtitle = "Sites of one colour are held out together."
    else:
        if "held_out_residual" in frame.columns:
            frame["residual"] = pd.to_numeric(frame["held_out_residual"], errors="coerce")
        else:
            frame["residual"] = pd.to_numeric(frame["observed"], errors="coerce") - pd.to_numeric(
                frame["held_out"], errors="coerce"
            )
        frame = frame[frame["residual"].notna()]
        reach = float(frame["residual"].abs().quantile(0.98)) if len(frame) else 1.0
        reach = reach if reach > 0 else 1.0
        data = inline(
            frame[
                ["x", "y", "observed", "held_out", "residual"] + [c for c in ("row",) if c in frame.columns]
            ],
            precise=("x", "y"),
        )
        mark = (
            alt.Chart(data)
            .mark_circle(size=point, opacity=0.9)
            .encode(
                x=x,
                y=y,
                color=alt.Color(
                    "residual:Q",
                    title="observed \u2212 held-out",
                    scale=alt.Scale(
                        domain=[-reach, 0, reach],
                        clamp=True,
                        range=[theme.DIVERGING[0], theme.DIVERGING[2], theme.DIVERGING[-1]],
                        interpolate="lab",
                    ),
                ),
                tooltip=[
                    alt.Tooltip("observed:Q", format=".3~g"),
                    alt.Tooltip("held_out:Q", title="held-out prediction", format=".3~g"),
                    alt.Tooltip("residual:Q", format=".3~g"),
                ]
                + ([alt.Tooltip("row:Q", title="row")] if "row" in frame.columns else []),
            )
        )
        title = "Held-out residuals in space"
        subtitle = ("Blue: fewer than predicted; ochre: more. "
                    "Patches of one colour point to a missing spatial driver.")
    if note:
        subtitle = f"{subtitle} ({note})"
    return mark.properties(width=width, height=height, title=alt.Title(title, subtitle=subtitle))


BY_SIZE_COLOURS = {"best subset": theme.LOCH, "stepwise (forward)": theme.OCHRE,
                   "lasso": theme.HEATHER, "relaxed lasso (refit)": theme.LICHEN}


def fit_by_size(by_size: pd.DataFrame):
    """Log-likelihood on all sites against the number of terms, one line per way of choosing.

    Best subset is drawn solid where its size was proved (or every subset
    compared) and hollow where it was only searched.
    """
    require(by_size, ["k", "method", "log_likelihood"], "by_size")
    frame = by_size.copy()
    frame["how"] = np.where(frame.get("found_by", pd.Series("", index=frame.index)).astype(str)
                            == "searched", "searched, not proved", "proved or not a search")
    data = inline(frame[["k", "method", "log_likelihood", "how", "terms"]].fillna(""))
    methods = [m for m in BY_SIZE_COLOURS if m in set(frame["method"])] + sorted(
        set(frame["method"]) - set(BY_SIZE_COLOURS))
    colour = alt.Color("method:N", title="chosen by",
                       scale=alt.Scale(domain=methods,
                                       range=[BY_SIZE_COLOURS.get(m, theme.STONE) for m in methods]))
    x = alt.X("k:Q", axis=alt.Axis(title="terms in the model", format="d"))
    y = alt.Y("log_likelihood:Q", axis=alt.Axis(title="log-likelihood on all sites"),
              scale=alt.Scale(zero=False))
    lines = alt.Chart(data).mark_line(strokeWidth=1.5).encode(x=x, y=y, color=colour)
    points = alt.Chart(data).mark_point(size=36, filled=True).encode(
        x=x, y=y, color=colour,
        shape=alt.Shape("how:N", title="best subset",
                        scale=alt.Scale(domain=["proved or not a search", "searched, not proved"],
                                        range=["circle", "triangle"])),
        tooltip=[alt.Tooltip("method:N"), alt.Tooltip("k:Q", title="terms"),
                 alt.Tooltip("log_likelihood:Q", format=".5~g"), alt.Tooltip("how:N"),
                 alt.Tooltip("terms:N")])
    return alt.layer(lines, points).properties(
        width=WIDE, height=260,
        title=alt.Title("How well each way of choosing fits, size by size",
                        subtitle="On the sites the models were chosen from; held-out skill is in "
                                 "the comparison above."))
