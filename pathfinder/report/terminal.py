"""The closing summary in the terminal (rich), and its machine-readable twin."""

from __future__ import annotations

import sys

import numpy as np
from rich.console import Console
from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeRemainingColumn
from rich.table import Table


class ProgressReporter:
    """Progress bars on standard error, one per stage, for the study's progress protocol.

    ``reporter(stage, total)`` starts a stage and returns a function to call
    once per finished task; ``reporter(stage, None)`` ends it.
    """

    def __init__(self, console: Console | None = None):
        self.console = console or Console(file=sys.stderr)
        self.progress = None
        self.task = None

    def __call__(self, stage, total):
        if total is None:
            if self.progress is not None:
                self.progress.stop()
                self.progress = None
            return None
        self.progress = Progress(TextColumn("{task.description:<28}"), BarColumn(), MofNCompleteColumn(),
                                 TimeRemainingColumn(), console=self.console, transient=True)
        self.progress.start()
        self.task = self.progress.add_task(stage, total=total)
        progress, task = self.progress, self.task
        return lambda *_: progress.advance(task)


def _skill(study):
    """(metric, outer mean, outer SE) of the suggested model, or None without nested CV."""
    table = study.tables.get("comparison")
    if table is None:
        return None
    row = table[(table.method == study.chosen.method) & (table.rule == study.chosen.rule)]
    if row.empty:
        return None
    row = row.iloc[0]
    return row.metric, float(row.outer_mean), float(row.outer_se)


def _frequency(study):
    table = study.tables.get("stability")
    return {} if table is None else dict(zip(table.term, table.selection_frequency))


def summary_dict(study, out) -> dict:
    chosen = study.tables["chosen"]
    skill = _skill(study)
    frequency = _frequency(study)
    return {
        "output": str(out),
        "rows_used": int(study.survey.n),
        "rows_read": int(study.survey.n_read),
        "family": study.survey.family,
        "folds": study.folds.scheme,
        "chosen": {
            "method": study.chosen.method, "rule": study.chosen.rule,
            "terms": [{"term": t, "estimate": float(e), "selection_frequency": frequency.get(t)}
                      for t, e in zip(chosen.term, chosen.estimate)],
        },
        "held_out": None if skill is None else {"metric": skill[0], "mean": skill[1], "se": skill[2]},
        "warnings": list(study.warnings),
    }


def print_summary(study, out, console: Console | None = None) -> None:
    """The closing summary: the data, the suggested model, its honest skill, the files."""
    console = console or Console()
    survey = study.survey
    console.print(f"[bold]{survey.response_name}[/bold]: {survey.family_reason}")
    console.print(f"rows used {survey.n} of {survey.n_read}; {len(survey.predictors)} predictors "
                  f"-> {len(study.design.names)} terms; folds: {study.folds.scheme} "
                  f"({study.folds.n_folds})")
    comparison = study.tables.get("comparison")
    if comparison is not None:
        table = Table(title="every method on the same outer folds (lower is better)",
                      title_justify="left")
        for column in ("method", "rule", "terms", f"held-out {comparison.metric.iloc[0]}", "SE",
                       "consistency"):
            table.add_column(column, justify="left" if column in ("method", "rule") else "right")
        for _, row in comparison.iterrows():
            mark = (row.method == study.chosen.method and row.rule == study.chosen.rule)
            style = "bold" if mark else None
            table.add_row(row.method, row.rule, str(int(row.n_terms)), f"{row.outer_mean:.4g}",
                          f"{row.outer_se:.2g}", f"{row.jaccard:.2f}", style=style)
        console.print(table)
    chosen = study.tables["chosen"]
    frequency = _frequency(study)
    table = Table(title=f"suggested model: {study.chosen.method} ({study.chosen.rule})",
                  title_justify="left")
    for column in ("term", "estimate", "per SD", "chosen in subsamples"):
        table.add_column(column, justify="left" if column == "term" else "right")
    for _, row in chosen.iterrows():
        f = frequency.get(row.term)
        table.add_row(row.term, f"{row.estimate:.4g}", f"{row.estimate_std:+.3f}",
                      "" if f is None else f"{f:.0%}")
    console.print(table)
    skill = _skill(study)
    if skill is not None:
        console.print(f"held-out {skill[0]} of the suggested model: {skill[1]:.4g} "
                      f"(SE {skill[2]:.2g}), from nested cross-validation")
    if study.warnings:
        console.print("[bold yellow]warnings[/bold yellow]")
        for message in study.warnings:
            console.print(f"  - {message}")
    console.print("Correlative models are not evidence of cause; predictions outside the "
                  "sampled conditions are unreliable.")
    console.print(f"results written to [bold]{out}[/bold]")


def print_screen(result, console: Console | None = None) -> None:
    """The screen as rich tables: terms grouped by correlation cluster, then strong pairs."""
    console = console or Console()
    survey = result.survey
    console.print(f"[bold]{survey.response_name}[/bold]: {survey.family_reason}")
    console.print(f"rows usable {survey.n} of {survey.n_read}; {len(result.terms)} terms")
    table = Table(title=f"terms, grouped where |r| >= {result.threshold:g}", title_justify="left")
    for column in ("cluster", "term", "min", "max", "mean", "VIF"):
        table.add_column(column, justify="left" if column == "term" else "right")
    sizes = result.terms.cluster.value_counts()
    for _, row in result.terms.sort_values(["cluster", "term"]).iterrows():
        shared = sizes[row.cluster] > 1
        vif = f"{row.vif:.1f}" if np.isfinite(row.vif) else "inf"
        table.add_row(str(row.cluster) if shared else "", row.term, f"{row['min']:.4g}",
                      f"{row['max']:.4g}", f"{row['mean']:.4g}",
                      f"[bold]{vif}[/bold]" if row.vif > 10 else vif)
    console.print(table)
    strong = result.correlations[result.correlations.r.abs() >= result.threshold]
    if len(strong):
        console.print(f"{len(strong)} pairs with |r| >= {result.threshold:g}, strongest first:")
        for _, row in strong.reindex(strong.r.abs().sort_values(ascending=False).index).head(15).iterrows():
            console.print(f"  {row.term_a} ~ {row.term_b}: r = {row.r:+.2f}")
    for message in survey.warnings:
        console.print(f"[yellow]warning[/yellow]: {message}")
