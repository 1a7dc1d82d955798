"""The explore pipeline: one readable function, stage by stage.

    table -> intake -> design -> folds -> cross-validated paths (each mix)
          -> relaxed lasso -> information criteria -> nested cross-validation
          -> tables (+ the run record, written by outputs/)

Each stage is a plain call into its own module; this file only wires them
together, times them and reports progress. Nothing here writes files or
prints: the command line (or a notebook) decides what to do with the
returned :class:`Study`.
"""

from __future__ import annotations

import os
import time
import warnings
from collections.abc import Callable
from typing import Any
from dataclasses import asdict, dataclass, field, replace
from pathlib import Path

import numpy as np
import pandas as pd
from threadpoolctl import threadpool_limits

from .choose.criteria import information_criteria, quasi_criteria
from . import defaults
from .choose.cv import cross_validate
from .core.families import NegativeBinomial, get_family
from .core.glm import estimate_theta
from .diagnostics.dispersion import check_counts
from .choose.folds import make_folds
from .choose.metrics import METRICS, metrics_for as family_metrics
from .choose.problem import BEST_SUBSET, Problem, method_name
from .choose.nested import FoldPlan, choices, comparison_table, held_out_predictions, nested_cv, recommend
from .choose.folds import block_of
from .choose.relaxed import relaxed_lasso
from .choose.skill import held_out_skill
from .choose.subset_search import SEARCHABLE
from .choose.by_size import compare_by_size
from .choose.selectors import StabilitySelector, SubsetSelector
from .choose.subsets import akaike_table, model_average, variable_importance
from .data.design import Design, build_design
from .diagnostics.collinearity import correlation_clusters, correlation_matrix, variance_inflation
from .diagnostics.response_curves import response_curves
from .data.intake import Survey, TableInfo, prepare_survey, read_table
from .errors import FitWarning, InputError
from .outputs import tables
from .parallel import Backend, Session, describe

@dataclass(frozen=True)
class StudyOptions:
    """Everything that shapes the results of a run (written to the run record)."""

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
    fold_column: str | None = None
    missing: str = "drop"
    decimal: str | None = None
    delimiter: str | None = None
    na_values: tuple = ()                # no-data codes read as missing (e.g. -9999)
    squares: bool | tuple = False
    interactions: bool | tuple = False
    mixes: tuple = defaults.MIXES
    grid_decades: float | None = None   # None: defaults.GRID_DECADES (GRID_DECADES_WIDE when wide)
    grid_per_decade: int = defaults.GRID_PER_DECADE
    standardize: bool = True
    folds: int = defaults.FOLDS
    block_size: float | None = None
    repeats: int = 1
    metric: str = defaults.METRIC
    relaxed_lasso: bool = True
    nested: bool = True
    inner_folds: int = defaults.INNER_FOLDS
    stability: bool = True
    n_pairs: int = defaults.STABILITY_PAIRS
    stability_threshold: float | None = None
    pfer: float | None = None
    nested_pairs: int = defaults.NESTED_STABILITY_PAIRS
    subsets: bool = True
    subset_budget: int | None = None    # exact subset fits allowed (None: the search's own default)
    subset_sizes: int | None = None     # largest subset size (None: until the criteria turn up)
    seed: int = defaults.SEED

    def __post_init__(self):
        mixes = tuple(float(m) for m in self.mixes)
        if not mixes or any(not 0.0 <= m <= 1.0 for m in mixes):
            raise InputError(f"mix values must lie between 0 (ridge) and 1 (lasso); got {self.mixes}")
        object.__setattr__(self, "mixes", tuple(dict.fromkeys(mixes)))
        if int(self.grid_per_decade) < 1:
            raise InputError("the penalties per decade must be at least 1 (--grid-per-decade)")
        if self.grid_decades is not None and not 0 < float(self.grid_decades) <= 12:
            raise InputError("the grid depth must lie between 0 and 12 powers of ten, e.g. 3 "
                             "(--grid-decades)")
        if int(self.folds) < 2 or int(self.inner_folds) < 2:
            raise InputError("cross-validation needs at least 2 folds (outer and inner)")
        if int(self.repeats) < 1:
            raise InputError("repeats must be 1 or more")
        if self.block_size is not None and float(self.block_size) <= 0:
            raise InputError("the block size must be a positive distance in coordinate units")
        if self.block_size is not None and not self.coords:
            raise InputError("a block size needs the site coordinates: add --coords XCOL,YCOL")
        if int(self.n_pairs) < 2 or int(self.nested_pairs) < 2:
            raise InputError("stability selection needs at least 2 pairs of half samples")
        if self.stability_threshold is not None and self.pfer is not None:
            raise InputError("give either a stability threshold or a target error rate (pfer), not both")
        if self.stability_threshold is not None and not 0.5 < float(self.stability_threshold) <= 1:
            raise InputError("the stability threshold must lie above 0.5 and at most 1 (e.g. 0.75)")
        if self.subset_budget is not None and int(self.subset_budget) < 1:
            raise InputError("the subset budget must be a positive number of models "
                             "(--subset-budget N)")
        if self.subset_sizes is not None and int(self.subset_sizes) < 1:
            raise InputError("the largest subset size must be at least 1 (--subset-sizes K)")
        if self.metric not in METRICS:
            raise InputError(f"unknown metric {self.metric!r}: use one of {', '.join(METRICS)}")

    def to_dict(self) -> dict:
        return {k: (list(v) if isinstance(v, tuple) else v) for k, v in asdict(self).items()}


@dataclass(frozen=True, eq=False)
class Study:
    """What one explore run found, as plain objects and tables."""

    options: StudyOptions
    survey: Survey
    design: Design
    table_info: TableInfo | None
    folds: object
    cv: object
    relaxed: object
    choices: list
    chosen: object                # the Choice pathfinder suggests (see choose.nested.recommend)
    tables: dict                  # name -> DataFrame (written as name.csv)
    timings: dict
    backend: str
    warnings: tuple = field(default=())
    notes: tuple = field(default=())
    stability: object = None
    family: object = None         # the family fitted (with the negative binomial's theta)
    data_sends: int = 0           # times the shared data went out to workers

    @property
    def fits(self) -> dict:
        """(method, mix) -> full-data path."""
        return {(method_name(mix), mix): fit for mix, fit in self.cv.fits.items()}

    def _repr_html_(self) -> str:
        """A compact summary in notebooks (charts: ``pathfinder.report.notebook.show``)."""
        from .report.notebook import study_html
        return study_html(self)


def load_table(data, options: StudyOptions):
    """A path is read with intake's checks; a DataFrame is used as given.

    With the predictors listed, a Parquet file is read by columns: the columns
    the run does not use are never loaded.
    """
    if isinstance(data, pd.DataFrame):
        return data, None
    path = Path(data)
    columns = None
    if options.predictors is not None and path.suffix.lower() in (".parquet", ".pq"):
        roles = [options.response, options.effort, options.offset, options.weights, options.groups,
                 options.fold_column, *(options.coords or ())]
        columns = list(dict.fromkeys([*options.predictors, *(r for r in roles if r)]))
    return read_table(path, decimal=options.decimal, delimiter=options.delimiter, columns=columns,
                      na_values=list(options.na_values) or None)


class _Stages:
    """Times each stage and tells an optional progress reporter about it."""

    def __init__(self, progress):
        self.progress = progress
        self.timings = {}

    def run(self, name, fn, total=None):
        clock = time.perf_counter()
        tick = self.progress(name, total) if self.progress else None
        try:
            return fn(tick)
        finally:
            self.timings[name] = time.perf_counter() - clock
            if self.progress:
                self.progress(name, None)


def metrics_for(family, primary: str) -> tuple:
    """The primary metric first, then every other metric that fits the family."""
    suits = family_metrics(family)
    if primary not in suits:
        raise InputError(f"the metric {primary!r} does not apply to a {get_family(family).name} response; "
                         f"use one of {', '.join(suits)}")
    return (primary,) + tuple(k for k in suits if k != primary)


def explore(data: str | os.PathLike[str] | pd.DataFrame, options: StudyOptions | None = None, *,
            backend: Backend | None = None,
            progress: Callable[[str, int | None], Callable[..., Any] | None] | None = None,
            jobs: int | None = None, **settings: Any) -> Study:
    """Run the analysis on a table (a file path or a DataFrame).

    Give the settings either as a :class:`StudyOptions` or as keywords of its
    fields: ``explore("sites.csv", response="present", exclude=["site"])``.
    ``jobs`` (local processes) is a shortcut for ``backend=Backend(jobs=...)``.

    ``progress(stage, total)`` (optional) is called when a stage starts and
    returns a function to call once per finished task; it is called again
    with ``total=None`` when the stage ends.
    """
    if options is None:
        options = StudyOptions(**{k: tuple(v) if isinstance(v, list) else v for k, v in settings.items()})
    elif settings:
        raise InputError("give the settings either as StudyOptions or as keywords, not both")
    backend = backend or Backend(jobs=jobs or 1)
    stages = _Stages(progress)

    def prepare(_):
        frame, info = load_table(data, options)
        survey = prepare_survey(
            frame, response=options.response, family=options.family,
            predictors=list(options.predictors) if options.predictors is not None else None,
            exclude=list(options.exclude), categorical=list(options.categorical),
            effort=options.effort, offset=options.offset, weights=options.weights,
            coords=list(options.coords) if options.coords else None, groups=options.groups,
            fold_column=options.fold_column, missing=options.missing)
        labels = survey.fold_labels
        design = build_design(survey.frame, survey.predictors, survey.categorical,
                              squares=options.squares, interactions=options.interactions,
                              weights=survey.weights)
        return frame, info, survey, design, labels

    frame, info, survey, design, fold_labels = stages.run("reading the table", prepare)
    survey, family, count_notes, dispersion = stages.run("checking the counts", lambda _: _count_family(
        survey, design, options))
    metrics = metrics_for(family, options.metric)
    problem = Problem(np.asfortranarray(design.X), survey.response, family, tuple(design.names),
                      offset=survey.offset, weights=survey.weights, standardize=options.standardize)
    plan = FoldPlan(k=int(options.folds), family=survey.family, groups=survey.groups,
                    coords=survey.coords if options.block_size else None,
                    block_size=options.block_size, fold_labels=fold_labels)
    folds = make_folds(survey.n, k=int(options.folds), y=survey.response, family=survey.family,
                       groups=survey.groups, coords=survey.coords, block_size=options.block_size,
                       fold_labels=fold_labels, repeats=int(options.repeats), seed=options.seed)
    splits = [s for r in range(folds.n_repeats) for s in folds.splits(r)]

    session = Session(backend)   # one pool / one scattered copy of the data for every stage

    def runner(tick):
        return lambda fn, tasks, shared: session.run(fn, tasks, shared, on_done=tick)

    with session, warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", FitWarning)
        cv = stages.run("cross-validating the paths", lambda tick: cross_validate(
            problem, splits, mixes=options.mixes, metrics=metrics, primary=options.metric,
            decades=options.grid_decades, per_decade=int(options.grid_per_decade),
            repeats=folds.n_repeats, pool_auc=folds.scheme == "spatial blocks",
            run=runner(tick)), total=len(splits) * len(options.mixes))
        relaxed = None
        if options.relaxed_lasso and 1.0 in cv.fits:
            relaxed = stages.run("relaxing the lasso", lambda tick: relaxed_lasso(
                problem, cv.fits[1.0], splits, metric=options.metric, repeats=folds.n_repeats,
                run=runner(tick)),
                total=len(splits))
        criteria = stages.run("information criteria", lambda _: _criteria_table(cv.fits, problem,
                                                                                    dispersion))
        full_choices = choices(cv, relaxed)
        extra_tables, selectors, stability, budget_notes = {}, [], None, []
        subsets_run = options.subsets and problem.family.code in SEARCHABLE
        if options.subsets and not subsets_run:
            budget_notes.append(f"the best-subset and stepwise searches do not cover the "
                                f"{problem.family.name.replace('_', ' ')} family yet, so they "
                                "were left out of this run")
        if options.stability:
            selector = StabilitySelector(
                n_pairs=int(options.n_pairs), threshold=options.stability_threshold, pfer=options.pfer,
                mix=cv.best_mix if cv.best_mix > 0 else 1.0,
                strata=survey.response if problem.family.binary else None,
                units=_sampling_units(survey, options),
                term_groups=tuple(t.group for t in design.terms))
            stability, made = stages.run("stability selection", lambda tick: selector.run(
                problem, None, options.seed, run=runner(tick)), total=int(options.n_pairs))
            full_choices += made
            extra_tables["stability"] = stability.table()
            extra_tables["stability_path"] = stability.path_table()
            selectors.append(StabilitySelector(
                n_pairs=int(options.nested_pairs), threshold=options.stability_threshold,
                pfer=options.pfer, mix=selector.mix, strata=selector.strata, units=selector.units,
                term_groups=selector.term_groups))
        if subsets_run:
            chooser = SubsetSelector(max_fits=options.subset_budget, max_size=options.subset_sizes,
                                     dispersion=dispersion)
            selectors.append(chooser)
        outer, outer_predictions = None, {}
        if options.nested:
            outer, outer_predictions = stages.run("nested cross-validation", lambda tick: nested_cv(
                problem, folds.splits(0), plan, seed=options.seed, inner_k=int(options.inner_folds),
                mixes=options.mixes, metric=options.metric, decades=options.grid_decades,
                per_decade=int(options.grid_per_decade), relaxed_lasso=options.relaxed_lasso,
                selectors=selectors, run=runner(tick), keep_predictions=True), total=folds.n_folds)
        if subsets_run:   # after nested CV: its data go out once, on their own
            search, steps, made = stages.run("subset search", lambda tick: chooser.run(
                problem, None, run=runner(tick)))
            full_choices += made
            extra_tables["stepwise"] = steps.steps
            table = _subset_table(search, dispersion)
            extra_tables["subsets"] = table
            extra_tables["subset_sizes"] = search.sizes
            importance = variable_importance(table, problem.names)
            extra_tables["importance"] = importance.rename("importance").rename_axis("term").reset_index()
            extra_tables["averaged"] = _averaged_table(search, table, problem.names)
            if 1.0 in cv.fits:
                extra_tables["by_size"] = compare_by_size(problem, search, cv.fits[1.0])
            budget_notes.extend(n for n in search.notes if "not listed" not in n)
            budget_notes.append(_akaike_note(search, table))
    fit_warnings = tuple(dict.fromkeys(str(w.message) for w in caught
                                       if issubclass(w.category, FitWarning)))

    fits = {(method_name(mix), mix): fit for mix, fit in cv.fits.items()}
    result_tables = {
        "coefficients": tables.coefficients_table(fits),
        "path": tables.path_table(fits),
        "cv": tables.cv_table(cv.curves, relaxed, method_name),
        "picks": tables.picks_table(cv.picks, relaxed, method_name),
        "criteria": criteria,
        "folds": tables.folds_table(folds, survey.rows),
        "correlations": tables.correlations_table(design),
        **extra_tables,
    }
    comparison = None
    if outer is not None:
        comparison = comparison_table(full_choices, outer, options.metric)
        if "subset_sizes" in extra_tables:
            comparison = _with_subset_proof(comparison, extra_tables["subset_sizes"])
        result_tables["comparison"] = comparison
        result_tables["outer_folds"] = outer
    chosen = recommend(comparison, full_choices)
    budget_notes.extend(_unproved_choice_note(chosen, comparison))
    result_tables.update(stages.run("describing the chosen model", lambda _: _chosen_tables(
        chosen, problem, survey, design, folds, cv, splits, outer_predictions)))
    reading = tuple(info.notes) if info is not None else ()
    notes = tuple(dict.fromkeys(reading + tuple(survey.notes) + tuple(count_notes)
                                + tuple(folds.notes) + tuple(cv.notes) + tuple(budget_notes)))
    if stability is not None:
        notes += (stability.error_control,) + tuple(stability.notes)
    return Study(
        options=options, survey=survey, design=design, table_info=info, folds=folds, cv=cv,
        relaxed=relaxed, choices=full_choices, chosen=chosen, tables=result_tables, timings=stages.timings,
        backend=describe(backend), warnings=tuple(survey.warnings) + fit_warnings, notes=notes,
        stability=stability, data_sends=session.sends, family=problem.family,
    )


def _count_family(survey, design, options):
    """For counts: the dispersion checks, the family they point to, and theta.

    ``--family auto`` moves a count from Poisson to the negative binomial when
    the regression test of Cameron & Trivedi (1990) finds overdispersion, and
    says why; a family the user chose is kept, with a warning when the counts
    are overdispersed (the criteria would then reward noise). A negative
    binomial's theta is estimated once, from the model of every term, and
    held for every fit of the run (see core/glm.py: estimate_theta).
    Returns ``(survey, family object, notes, dispersion)``: the dispersion of a
    Poisson family kept on overdispersed counts (for QAIC and QAICc, Burnham &
    Anderson 2002, section 2.5), else None.
    """
    family = get_family(survey.family)
    notes, dispersion = [], None
    if family.counts:
        checks = check_counts(design.X, survey.response, offset=survey.offset,
                              weights=survey.weights)
        notes += [checks.pearson.message, checks.regression_test.message,
                  checks.likelihood_ratio.message]
        if options.family == "auto" and not family.takes_theta and checks.prefer_negative_binomial:
            family = NegativeBinomial()
            reason = ("negative binomial: the counts are more variable than a Poisson model "
                      f"allows ({checks.regression_test.message})")
            survey = replace(survey, family=family.name, family_reason=reason,
                             notes=tuple(reason if n == survey.family_reason else n
                                         for n in survey.notes))
        elif not family.takes_theta and checks.regression_test.found:
            dispersion = float(checks.pearson.statistic)
            notes.append("the counts are overdispersed but the Poisson family was chosen: its "
                         "likelihood, standard errors and Akaike weights are overconfident, so "
                         f"QAIC and QAICc (dispersion {dispersion:.3g}) are given beside AIC in "
                         "criteria.csv and subsets.csv and the Akaike weights use QAICc; "
                         "--family negative_binomial (or auto) models the extra variation")
        zeros = checks.zeros_negative_binomial if family.takes_theta else checks.zeros_poisson
        notes.append(zeros.message)
        notes += list(checks.notes)
    if family.takes_theta and family.theta is None:
        found = estimate_theta(design.X, survey.response, offset=survey.offset,
                               weights=survey.weights)
        family = NegativeBinomial(found.theta, estimated=True)
        notes.append(f"negative binomial theta {found.theta:.4g}: {found.note}; held for every "
                     "fit of the run (folds and subsamples too) and counted as a parameter")
    return survey, family, tuple(n for n in notes if n), dispersion


def _with_subset_proof(comparison: pd.DataFrame, sizes: pd.DataFrame) -> pd.DataFrame:
    """comparison.csv with ``found_by`` beside each best-subset row: how its size was found."""
    found = dict(zip(sizes["k"].astype(int), sizes["found_by"].astype(str)))
    out = comparison.copy()
    out["found_by"] = [found.get(int(k), "") if m == BEST_SUBSET else ""
                       for m, k in zip(out["method"], out["n_terms"])]
    return out


def _unproved_choice_note(chosen, comparison) -> tuple:
    """A note when the suggested model is a best subset whose size was not proved best."""
    if comparison is None or "found_by" not in comparison.columns or chosen.method != BEST_SUBSET:
        return ()
    row = comparison[(comparison["method"] == chosen.method) & (comparison["rule"] == chosen.rule)]
    if len(row) and row["found_by"].iloc[0] == "searched":
        return (f"the suggested model is the best subset of {len(chosen.terms)} terms that the "
                "search found, not proved best at that size (see subset_sizes.csv); "
                "--subset-budget N searches exactly for longer",)
    return ()


def _subset_table(search, dispersion) -> pd.DataFrame:
    """subsets.csv: the Akaike table by AICc, or by QAICc for overdispersed Poisson counts."""
    if dispersion is None:
        return search.akaike("aicc")
    table = search.table.copy()
    for name, values in quasi_criteria(table["log_likelihood"], table["n_parameters"], search.n,
                                       dispersion).items():
        table[name] = values
    return akaike_table(table, "qaicc")


def _akaike_note(search, akaike) -> str:
    """What the Akaike weights are shares of, and how much the models not listed could hold."""
    left = search.weight_left_out("aicc")
    criterion = "QAICc" if "qaicc" in akaike.columns else "AICc"
    text = (f"Akaike weights ({criterion}) are shares among the {len(akaike)} models listed in "
            f"subsets.csv (the best {search.keep_per_size} of each size, {search.n_models:,} "
            f"models fitted or bounded in the search)")
    if not np.isfinite(left):
        text += "; the weight of the models not listed cannot be bounded here"
    elif "searched" in set(search.sizes["found_by"]):
        text += (f"; at sizes that were searched, not proved, the models not listed could hold "
                 f"up to {left:.2g} of the weight (a loose bound)")
    else:
        text += (f"; the models not listed could hold at most {left:.2g} of the weight "
                 "(Burnham & Anderson 2002, section 4.2)")
    return text


def _averaged_table(search, akaike, names) -> pd.DataFrame:
    """Model-averaged coefficients over the Akaike table (Burnham & Anderson 2002, 4.2.4).

    Averaged coefficients are hard to read when predictors are collinear:
    the weight of one covariate is shared with its stand-ins.
    """
    averaged = model_average(akaike, search.coefficients)
    return pd.DataFrame({"term": list(names), "averaged_estimate": averaged,
                         "criterion": "qaicc" if "qaicc" in akaike.columns else "aicc"})


def _sampling_units(survey, options):
    """What subsamples keep whole: spatial blocks when the folds use them, else groups."""
    if options.block_size and survey.coords is not None:
        return block_of(survey.coords, options.block_size)
    if survey.groups is not None:
        return pd.factorize(pd.Series(survey.groups).astype(str))[0]
    return None


def _criteria_table(fits: dict, problem: Problem, dispersion=None) -> pd.DataFrame:
    with threadpool_limits(limits=1):   # many small matrices: one thread is fastest
        return _criteria_parts(fits, problem, dispersion)


def _criteria_parts(fits: dict, problem: Problem, dispersion=None) -> pd.DataFrame:
    parts = []
    for mix, fit in fits.items():
        frame = information_criteria(fit, problem.X, problem.y, weights=problem.weights,
                                     offset=problem.offset, count_variance=True,
                                     dispersion=dispersion)
        frame.insert(0, "mix", mix)
        frame.insert(0, "method", method_name(mix))
        parts.append(frame)
    return pd.concat(parts, ignore_index=True)


def _chosen_tables(chosen, problem, survey, design, folds, cv, splits, outer_predictions) -> dict:
    """Tables about the suggested model and the sites: chosen, sites, curves, rug, vif."""
    fam = problem.family
    sd = design.X.std(axis=0)
    chosen_table = pd.DataFrame({
        "term": design.names, "estimate": chosen.coef, "estimate_std": chosen.coef * sd,
    })
    chosen_table = chosen_table[chosen_table.estimate != 0].reset_index(drop=True)
    fitted = fam.inverse_link(problem.linear_predictor(
        np.array([chosen.intercept]), chosen.coef[None, :], np.arange(problem.n))[:, 0])
    grid = cv.fits[chosen.mix].penalties if chosen.mix in cv.fits else None
    # Held-out predictions: each site predicted by the model that its outer fold chose
    # without it (the whole choice redone, as nested cross-validation graded it).
    held = outer_predictions.get((chosen.method, chosen.rule))
    if held is None:
        # Without nested cross-validation: the chosen model refitted without each fold.
        held = held_out_predictions(problem, folds.splits(0), chosen, grid)
    sites = pd.DataFrame({"row": survey.rows + 1})
    if survey.coords is not None:
        sites["x"], sites["y"] = survey.coords[:, 0], survey.coords[:, 1]
    sites["fold"] = folds.fold + 1
    sites["observed"] = survey.response
    sites["fitted"] = fitted
    sites["held_out"] = held
    sites["held_out_residual"] = survey.response - held
    curves, rug = response_curves(survey.frame, survey.categorical, design.terms,
                                  design.reference_levels, chosen.intercept, chosen.coef, survey.family)
    R = correlation_matrix(design.X, survey.weights)
    vif = pd.DataFrame({"term": design.names, "vif": variance_inflation(design.X, survey.weights),
                        "cluster": correlation_clusters(R)})
    chosen_table.insert(0, "method", chosen.method)
    chosen_table.insert(1, "rule", chosen.rule)
    skill = held_out_skill(problem, held, folds.splits(0), scheme=folds.scheme)
    skill.insert(0, "method", chosen.method)
    skill.insert(1, "rule", chosen.rule)
    return {"chosen": chosen_table, "sites": sites, "response_curves": curves, "rug": rug, "vif": vif,
            "skill": skill}
