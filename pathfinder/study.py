"""The explore pipeline: one readable function, stage by stage.

    table -> intake -> design -> paths (one per mix) -> tables + run record

Each stage is a plain call into its own module; this file only wires them
together and times them. Nothing here writes files or prints: the command
line (or a notebook) decides what to do with the returned :class:`Study`.
"""

from __future__ import annotations

import time
import warnings
from dataclasses import asdict, dataclass, field
from pathlib import Path

import pandas as pd

from .core import PathResult, fit_path
from .data.design import Design, build_design
from .data.intake import Survey, TableInfo, prepare_survey, read_table
from .errors import FitWarning, InputError
from .outputs import tables


def method_name(mix: float) -> str:
    """Published names: lasso (mix 1), ridge (mix 0), elastic net in between."""
    if mix == 1.0:
        return "lasso"
    if mix == 0.0:
        return "ridge"
    return "elastic net"


@dataclass(frozen=True)
class StudyOptions:
    """Everything that shapes a run, in one place (written to the run record)."""

    response: str
    family: str = "auto"
    predictors: tuple | None = None
    exclude: tuple = ()
    categorical: tuple = ()
    effort: str | None = None
    offset: str | None = None
    weights: str | None = None
    coords: tuple | None = None
    groups: str | None = None
    missing: str = "drop"
    decimal: str | None = None
    delimiter: str | None = None
    squares: bool | tuple = False
    interactions: bool | tuple = False
    mixes: tuple = (1.0,)
    n_penalties: int = 100
    penalty_ratio: float | None = None
    standardize: bool = True
    seed: int = 1

    def __post_init__(self):
        for mix in self.mixes:
            if not 0.0 <= float(mix) <= 1.0:
                raise InputError(f"mix {mix} is outside 0 (ridge) to 1 (lasso): give values such as 1,0.5")
        if int(self.n_penalties) < 2:
            raise InputError("the number of penalties must be at least 2")
        if self.penalty_ratio is not None and not 0 < float(self.penalty_ratio) < 1:
            raise InputError("the penalty ratio must lie strictly between 0 and 1, e.g. 0.001")

    def to_dict(self) -> dict:
        return {k: (list(v) if isinstance(v, tuple) else v) for k, v in asdict(self).items()}


@dataclass(frozen=True, eq=False)
class Study:
    """What one explore run found, as plain objects and tables."""

    options: StudyOptions
    survey: Survey
    design: Design
    table_info: TableInfo | None
    fits: dict                    # (method, mix) -> PathResult
    tables: dict                  # name -> DataFrame (written as name.csv)
    timings: dict
    warnings: tuple = field(default=())


def load_table(data, options: StudyOptions):
    """A path is read with intake's checks; a DataFrame is used as given."""
    if isinstance(data, pd.DataFrame):
        return data, None
    return read_table(Path(data), decimal=options.decimal, delimiter=options.delimiter)


def explore(data, options: StudyOptions) -> Study:
    """Run the analysis on a table (a file path or a DataFrame)."""
    timings = {}
    clock = time.perf_counter()

    frame, info = load_table(data, options)
    survey = prepare_survey(
        frame, response=options.response, family=options.family,
        predictors=list(options.predictors) if options.predictors is not None else None,
        exclude=list(options.exclude), categorical=list(options.categorical),
        effort=options.effort, offset=options.offset, weights=options.weights,
        coords=list(options.coords) if options.coords else None, groups=options.groups,
        missing=options.missing,
    )
    design = build_design(survey.frame, survey.predictors, survey.categorical,
                          squares=options.squares, interactions=options.interactions,
                          weights=survey.weights)
    timings["intake and design"] = time.perf_counter() - clock

    clock = time.perf_counter()
    X = pd.DataFrame(design.X, columns=design.names)
    fits = {}
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", FitWarning)
        for mix in options.mixes:
            fits[(method_name(float(mix)), float(mix))] = fit_path(
                X, survey.response, family=survey.family, mix=float(mix),
                n_penalties=int(options.n_penalties), penalty_ratio=options.penalty_ratio,
                offset=survey.offset, weights=survey.weights, standardize=options.standardize)
    fit_warnings = tuple(str(w.message) for w in caught if issubclass(w.category, FitWarning))
    timings["paths"] = time.perf_counter() - clock

    return Study(
        options=options, survey=survey, design=design, table_info=info, fits=fits,
        tables={"coefficients": tables.coefficients_table(fits), "path": tables.path_table(fits)},
        timings=timings, warnings=tuple(survey.warnings) + fit_warnings,
    )


def path_of(study: Study, method: str = "lasso") -> PathResult:
    """The first fitted path of a method."""
    for (name, _), fit in study.fits.items():
        if name == method:
            return fit
    raise KeyError(method)
