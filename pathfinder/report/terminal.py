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


def summary_dict(study, out) -> dict:
    path = study.tables["path"]
    return {
        "output": str(out),
        "rows_used": int(study.survey.n),
        "rows_read": int(study.survey.n_read),
        "family": study.survey.family,
        "terms": len(study.design.names),
        "paths": [
            {"method": m, "mix": float(mix), "penalties": int(len(g)),
             "largest_deviance_explained": float(g.deviance_explained.max())}
            for (m, mix), g in path.groupby(["method", "mix"], sort=False)
        ],
        "warnings": list(study.warnings),
    }


def print_summary(study, out, console: Console | None = None) -> None:
    console = console or Console()
    survey = study.survey
    console.print(f"[bold]{survey.response_name}[/bold]: {survey.family_reason}")
    for note in survey.notes[1:]:
        console.print(f"  {note}")
    console.print(f"rows used {survey.n} of {survey.n_read}; {len(survey.predictors)} predictors "
                  f"-> {len(study.design.names)} terms")
    table = Table(title="models along the path", title_justify="left")
    for column in ("method", "mix", "penalty", "terms", "deviance explained"):
        table.add_column(column, justify="right" if column != "method" else "left")
    path = study.tables["path"]
    for (method, mix), g in path.groupby(["method", "mix"], sort=False):
        picks = sorted({0, len(g) // 4, len(g) // 2, (3 * len(g)) // 4, len(g) - 1})
        for i in picks:
            row = g.iloc[i]
            table.add_row(method, f"{mix:g}", f"{row.penalty:.4g}", str(int(row.n_terms)),
                          f"{row.deviance_explained:.3f}")
    console.print(table)
    if study.warnings:
        console.print("[bold yellow]warnings[/bold yellow]")
        for message in study.warnings:
            console.print(f"  - {message}")
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
