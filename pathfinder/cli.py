"""The command line: argument parsing, terminal output and exit codes.

Exit status: 0 success; 2 bad input or usage (one line on standard error, no
traceback); 1 an internal fault (a short message and a pointer to --debug).
Everything that computes lives in the modules this file calls.
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from . import __version__, defaults
from .core.families import BINOMIAL, FAMILIES, GAUSSIAN, POISSON
from .errors import InputError

DEMO_FOLDER = "pathfinder-demo"
DEMO_CHOICES = {"presence": BINOMIAL.name, "count": POISSON.name, "continuous": GAUSSIAN.name}
DEMO_BLOCK_KM = 50.0  # spatial blocks for the demo survey, beyond its autocorrelation range (~42 km)


class _Parser(argparse.ArgumentParser):
    """argparse, but a usage error is one line and exit status 2."""

    def error(self, message):
        raise InputError(f"{message} (see '{self.prog} --help')")


def _names(text):
    return tuple(part.strip() for part in text.split(",") if part.strip())


def _listed(values) -> str:
    return ",".join(f"{v:g}" for v in values)


def _numbers(text):
    try:
        return tuple(float(part) for part in _names(text))
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected numbers separated by commas, got {text!r}") from None


def _coords(text):
    names = _names(text)
    if len(names) != 2:
        raise argparse.ArgumentTypeError(f"give two columns, x and y, as X,Y (got {text!r})")
    return names


# Every study option defaults to None here, so that an option given on the
# command line can be told from one left out; left-out options come from the
# study file (--config) or else from StudyOptions' own defaults.

def _add_table_options(p):
    p.add_argument("data", nargs="?", help="the survey table: a CSV file (any common delimiter) or "
                                           "a Parquet file (may instead be named in the study file)")
    p.add_argument("--response", metavar="COL", help="the column to model (required here or in the study file)")
    p.add_argument("--family", choices=["auto", *FAMILIES],
                   help="binomial for presence/absence, poisson for counts, gaussian for a "
                        "continuous measure; auto (default) picks one from the response and says why")
    p.add_argument("--predictors", type=_names, metavar="A,B,..",
                   help="predictor columns (default: every column with no other role)")
    p.add_argument("--exclude", type=_names, metavar="A,B,..",
                   help="columns to leave out of the predictors (site labels, notes)")
    p.add_argument("--categorical", type=_names, metavar="A,B,..",
                   help="number-coded columns to treat as classes (e.g. a habitat code)")
    p.add_argument("--effort", metavar="COL", help="survey effort (positive); its log becomes the offset")
    p.add_argument("--offset", metavar="COL", help="a column added to the linear predictor as is")
    p.add_argument("--weights", metavar="COL", help="observation weights (non-negative)")
    p.add_argument("--coords", type=_coords, metavar="XCOL,YCOL", help="site coordinates")
    p.add_argument("--groups", metavar="COL", help="a grouping column (site, region, year)")
    p.add_argument("--missing", choices=["drop", "refuse"],
                   help="rows with missing values: drop and count them (default) or stop")
    p.add_argument("--decimal", choices=[".", ","], help="decimal mark of the CSV (',' for decimal commas)")
    p.add_argument("--delimiter", help="field delimiter of the CSV (default: detected)")
    p.add_argument("--na-values", type=_names, metavar="CODE,..",
                   help="no-data codes to read as missing, such as -9999")


def _add_model_options(p):
    p.add_argument("--squares", nargs="?", const=True, type=_names, metavar="A,B,..",
                   help="add centred squared terms (unimodal responses): for all numeric "
                        "predictors, or those listed")
    p.add_argument("--interactions", action="store_const", const=True,
                   help="add every pairwise interaction of numeric predictors (centred)")
    p.add_argument("--mix", dest="mixes", type=_numbers, metavar="M1,M2,..",
                   help="lasso-to-ridge mix values: 1 lasso, 0 ridge, between: elastic net "
                        f"(default {_listed(defaults.MIXES)})")
    p.add_argument("--grid-decades", type=float, metavar="D",
                   help="how far the penalty grid runs below its start, in powers of ten "
                        f"(default {defaults.GRID_DECADES:g}, or {defaults.GRID_DECADES_WIDE:g} "
                        "when terms are at least as many as sites)")
    p.add_argument("--grid-per-decade", type=int, metavar="N",
                   help=f"penalties in each power of ten of the grid (default {defaults.GRID_PER_DECADE})")
    p.add_argument("--seed", type=int, help=f"seed for every random choice (default {defaults.SEED})")


def _add_choosing_options(p):
    p.add_argument("--folds", type=int, metavar="K", help=f"cross-validation folds (default {defaults.FOLDS})")
    p.add_argument("--block-size", type=float, metavar="S",
                   help="spatial blocks: square blocks of this size in coordinate units, whole "
                        "blocks to a fold (needs --coords)")
    p.add_argument("--fold-column", metavar="COL", help="a column that gives each site's fold")
    p.add_argument("--repeats", type=int, metavar="R", help="repeat cross-validation R times")
    p.add_argument("--metric",
                   choices=["deviance", "mse", "mae", "auc", "brier", "log_loss", "deviance_explained"],
                   help=f"held-out measure that picks the penalty (default {defaults.METRIC})")
    p.add_argument("--no-relaxed-lasso", dest="relaxed_lasso", action="store_const", const=False,
                   help="skip the relaxed lasso")
    p.add_argument("--no-nested", dest="nested", action="store_const", const=False,
                   help="skip nested cross-validation (faster, but no honest error for the comparison)")
    p.add_argument("--inner-folds", type=int, metavar="K",
                   help="folds inside each outer training set in nested cross-validation "
                        f"(default {defaults.INNER_FOLDS})")
    p.add_argument("--pairs", dest="n_pairs", type=int, metavar="B",
                   help="stability selection: pairs of half samples "
                        f"(default {defaults.STABILITY_PAIRS}, i.e. {2 * defaults.STABILITY_PAIRS} fits)")
    p.add_argument("--stability-threshold", type=float, metavar="PI",
                   help="selection frequency that makes a term stable "
                        f"(default {defaults.STABILITY_THRESHOLD})")
    p.add_argument("--pfer", type=float, metavar="V",
                   help="instead of a threshold: the expected number of wrongly stable terms to allow")
    p.add_argument("--no-stability", dest="stability", action="store_const", const=False,
                   help="skip stability selection")
    p.add_argument("--subset-budget", type=int, metavar="N",
                   help="models the best-subset search may fit exactly before it searches instead "
                        f"(default: {defaults.SUBSET_PROOF_MODELS:.0e} for a continuous response; "
                        f"{defaults.SUBSET_EXACT_ROW_FITS:.0e} / rows for presence/absence and "
                        "counts); each size says whether it was proved or searched")
    p.add_argument("--subset-sizes", type=int, metavar="K",
                   help="largest subset size searched (default: every size for a continuous "
                        "response; else until AIC, AICc and BIC have all risen for "
                        f"{defaults.SUBSET_RISING_SIZES} sizes running)")
    p.add_argument("--no-subsets", dest="subsets", action="store_const", const=False,
                   help="skip the best-subset and stepwise searches")
    p.add_argument("--jobs", type=int, default=1, metavar="N", help="local worker processes (default 1)")
    p.add_argument("--cluster", metavar="ADDRESS",
                   help="send repeated fits to a running Dask scheduler, e.g. tcp://host:8786")
    p.add_argument("--config", metavar="FILE.toml",
                   help="a study file holding any of these options (a run.json works too); "
                        "options given here override it")


def _add_output_options(p, default_out=None):
    p.add_argument("--out", default=default_out, metavar="DIR", required=default_out is None,
                   help="output folder (written completely or not at all)")
    p.add_argument("--figures", choices=["png", "svg"],
                   help="also write every chart of the report to DIR/figures at print resolution")
    p.add_argument("--overwrite", action="store_true", help="replace a non-empty output folder")
    _add_terminal_options(p, json_help="print a machine-readable summary on standard output")


def _add_terminal_options(p, json_help="print a machine-readable summary"):
    p.add_argument("--quiet", action="store_true", help="print nothing but errors")
    if json_help:
        p.add_argument("--json", action="store_true", help=json_help)
    p.add_argument("--debug", action="store_true", help="show the full traceback of an internal fault")


def _command(commands, name, run, *, summary, description, examples):
    """One subcommand, with its help line, description and examples."""
    epilog = ("examples:\n" if len(examples) > 1 else "example:\n") + "\n".join(
        f"  pathfinder {name} {line}" for line in examples)
    command = commands.add_parser(name, help=summary, description=description, epilog=epilog,
                                  formatter_class=argparse.RawDescriptionHelpFormatter)
    command.set_defaults(run=run)
    return command


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="pathfinder", description=(
        "Choose predictors for habitat models that you can defend: penalised regression "
        "paths, honest cross-validation, stability and subset selection."))
    parser.add_argument("--version", action="version", version=f"pathfinder {__version__}")
    commands = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)

    explore = _command(
        commands, "explore", run_explore, summary="analyse a survey table",
        description="Fit lasso, elastic-net or ridge paths to a survey table and write the tables.",
        examples=["sites.csv --response present --out results",
                  "counts.csv --response n_birds --effort minutes --exclude site_id --mix 1,0.5 "
                  "--out results"])
    _add_table_options(explore)
    _add_model_options(explore)
    _add_choosing_options(explore)
    _add_output_options(explore)

    demo = _command(
        commands, "demo", run_demo, summary="run the analysis on the bundled invented survey",
        description="Explore the bundled invented survey (the Carrow bell-moss).",
        examples=["--response count --out demo-counts"])
    demo.add_argument("--response", choices=list(DEMO_CHOICES), default="presence",
                      help="which of the three responses to model (default presence)")
    demo.add_argument("--seed", type=int, default=defaults.SEED)
    demo.add_argument("--jobs", type=int, default=1, metavar="N", help="local worker processes")
    demo.add_argument("--quick", action="store_true", help="skip nested cross-validation (faster)")
    _add_output_options(demo, default_out=DEMO_FOLDER)

    screen = _command(
        commands, "screen", run_screen, summary="check a table and show which covariates move together",
        description="Fast checks before any model: missing values, ranges, correlation clusters "
                    "and variance inflation factors of every predictor.",
        examples=["sites.csv --response present --exclude site_id --out checks"])
    _add_table_options(screen)
    screen.add_argument("--threshold", type=float, default=defaults.CORRELATION_THRESHOLD, metavar="R",
                        help="|r| at which covariates count as moving together "
                             f"(default {defaults.CORRELATION_THRESHOLD})")
    screen.add_argument("--out", metavar="DIR", help="also write the tables as CSV to this folder")
    screen.add_argument("--overwrite", action="store_true", help="replace a non-empty output folder")
    _add_terminal_options(screen)

    predict = _command(
        commands, "predict", run_predict, summary="predict at new sites from a model file",
        description="Predict at the sites of a table with a model.json written by explore, "
                    "flagging sites outside the sampled conditions (training range and MESS).",
        examples=["results/model.json new_sites.csv --out predictions.csv"])
    predict.add_argument("model", metavar="MODEL.json", help="the model file written by pathfinder explore")
    predict.add_argument("data", help="the table of new sites: CSV or Parquet")
    predict.add_argument("--out", metavar="FILE", help="write the predictions as CSV (default: standard output)")
    predict.add_argument("--link", action="store_true", help="add the linear predictor (column 'link')")
    predict.add_argument("--decimal", choices=[".", ","], help="decimal mark of the CSV")
    predict.add_argument("--na-values", type=_names, metavar="CODE,..",
                         help="no-data codes to read as missing, such as -9999")
    predict.add_argument("--overwrite", action="store_true", help="replace an existing --out file")
    _add_terminal_options(predict, json_help=None)

    mapping = _command(
        commands, "map", run_map, summary="map a model over raster layers",
        description="Map the model of a model.json over a folder of GeoTIFF layers (one per "
                    "covariate, named by its file): the prediction, MESS, the most dissimilar "
                    "covariate and novel combinations, on the layers' grid.",
        examples=["results/model.json layers/ --out maps"])
    mapping.add_argument("model", metavar="MODEL.json", help="the model file written by pathfinder explore")
    mapping.add_argument("layers", metavar="LAYERS", help="a folder of GeoTIFFs, one per covariate")
    mapping.add_argument("--out", required=True, metavar="DIR", help="folder for the map GeoTIFFs")
    mapping.add_argument("--bias-layers", type=_names, metavar="A,B,..",
                         help="observer-bias covariates held at one value on every cell "
                              "(default: as the model file says)")
    mapping.add_argument("--jobs", type=int, default=1, metavar="N", help="windows computed at once")
    mapping.add_argument("--overwrite", action="store_true", help="replace maps already in DIR")
    _add_terminal_options(mapping, json_help=None)
    return parser


def _options_from(args):
    """StudyOptions from the study file (if any), overridden by the command line."""
    from dataclasses import fields

    from .study import StudyOptions
    from .study_file import read_study_file
    settings = read_study_file(args.config, data_given=args.data is not None) if args.config else {}
    names = [f.name for f in fields(StudyOptions)]
    for name in names:
        value = getattr(args, name, None)
        if value is not None:
            settings[name] = value
    data = args.data or settings.pop("data", None)
    settings.pop("data", None)
    figures = settings.pop("figures", None)
    if getattr(args, "figures", None) is None:
        args.figures = figures
    if data is None:
        raise InputError("name the survey table: pathfinder explore DATA --response COL "
                         "(or 'data = ...' in the study file)")
    if not settings.get("response"):
        raise InputError("name the response column with --response COL (or 'response = ...' "
                         "in the study file)")
    return data, StudyOptions(**settings)


def _check_counts(args) -> None:
    """Whole-number options that no parser type can bound: one line naming the option."""
    seed = getattr(args, "seed", None)
    if seed is not None and seed < 0:
        raise InputError(f"--seed must be a whole number, 0 or more (got {seed})")


def _backend(args):
    from .parallel import Backend
    if args.jobs < 1:
        raise InputError("--jobs must be 1 or more")
    return Backend(jobs=args.jobs, cluster=getattr(args, "cluster", None))


def run_explore(args) -> int:
    from .outputs.folder import check_target, output_lock
    from .study import explore
    _check_counts(args)
    data, options = _options_from(args)
    with output_lock(args.out):   # one run at a time into one folder
        check_target(args.out, overwrite=args.overwrite, inputs=[data])
        study = explore(Path(data), options, backend=_backend(args), progress=_progress(args))
        return _finish(study, args, command="explore", inputs=[data])


def run_demo(args) -> int:
    from . import examples
    from .outputs.folder import check_target, output_lock
    from .study import StudyOptions, explore
    _check_counts(args)
    family = DEMO_CHOICES[args.response]
    counts = args.response == "count"
    response = examples.DEMO_RESPONSES[family]
    others = tuple(c for f, c in examples.DEMO_RESPONSES.items() if f != family)
    effort = examples.EFFORT
    # Effort is an offset for the count; for the other responses it is not a predictor either.
    # counts: let the dispersion checks choose between Poisson and the negative binomial
    options = StudyOptions(
        response=response, family="auto" if counts else family,
        exclude=others + tuple(examples.SITE_LABELS) + (examples.GROUPS,)
        + (() if counts else (effort,)),
        effort=effort if counts else None, coords=tuple(examples.COORDS),
        block_size=DEMO_BLOCK_KM, squares=("july_temp_c",), nested=not args.quick, seed=args.seed)
    with output_lock(args.out):   # one run at a time into one folder
        args.overwrite = args.overwrite or _is_earlier_demo(Path(args.out))
        check_target(args.out, overwrite=args.overwrite)
        with examples.table_file() as table:
            study = explore(table, options, backend=_backend(args), progress=_progress(args))
        return _finish(study, args, command="demo")


def run_screen(args) -> int:
    from .data.intake import read_table
    from .outputs.folder import check_target, output_folder
    from .outputs.write import write_csv
    from .report.terminal import print_screen
    from .screen import screen
    if args.data is None or not args.response:
        raise InputError("give the table and the response: pathfinder screen DATA --response COL")
    if args.out:
        check_target(args.out, overwrite=args.overwrite, inputs=[args.data])
    frame, info = read_table(Path(args.data), decimal=args.decimal, delimiter=args.delimiter,
                             na_values=args.na_values)
    result = screen(frame, response=args.response, threshold=args.threshold,
                    family=args.family or "auto", predictors=args.predictors,
                    exclude=list(args.exclude or ()), categorical=list(args.categorical or ()),
                    effort=args.effort, offset=args.offset, weights=args.weights,
                    coords=list(args.coords) if args.coords else None, groups=args.groups,
                    missing=args.missing or "drop")
    if args.out:
        with output_folder(args.out, overwrite=args.overwrite, inputs=[args.data]) as folder:
            for name, table in result.tables.items():
                write_csv(table, folder / f"{name}.csv")
    if args.json:
        print(json.dumps({"terms": int(len(result.terms)),
                          "clusters": int(result.terms.cluster.nunique()),
                          "high_vif": result.terms.term[result.terms.vif > 10].tolist(),
                          "notes": list(dict.fromkeys(info.notes + result.survey.notes)),
                          "warnings": list(result.survey.warnings)}))
    elif not args.quiet:
        survey = result.survey
        _print_notes(info.notes + tuple(n for n in survey.notes if n != survey.family_reason))
        print_screen(result)
    return 0


def _print_notes(notes) -> None:
    """The run's notes (how the table was read, what was assumed), one line each."""
    for note in dict.fromkeys(notes):
        print(f"note: {note}")


def run_predict(args) -> int:
    from .predict import predict_table, prediction_summary
    result = predict_table(args.model, args.data, args.out, decimal=args.decimal,
                           na_values=args.na_values, kind="both" if args.link else "response",
                           overwrite=args.overwrite)
    if args.out is None:
        try:
            result.to_csv(sys.stdout, index=False, lineterminator="\n")
            sys.stdout.flush()
        except BrokenPipeError:
            raise
        except OSError as error:   # a full disk behind a redirection, say
            from .outputs.folder import os_error_line
            raise InputError(os_error_line(error, "standard output", "write the predictions to")) from None
    if not args.quiet:
        for note in result.attrs.get("notes", ()):
            print(f"note: {note}", file=sys.stderr)
        print(prediction_summary(result), file=sys.stderr)
    return 0


def run_map(args) -> int:
    from .mapping import write_maps
    if args.jobs < 1:
        raise InputError("--jobs must be 1 or more")
    result = write_maps(args.model, args.layers, args.out, jobs=args.jobs,
                        bias_values=list(args.bias_layers) if args.bias_layers else None,
                        overwrite=args.overwrite)
    if not args.quiet:
        for note in result.notes:
            print(f"note: {note}", file=sys.stderr)
        print(f"maps written to {args.out}: " + ", ".join(Path(p).name for p in result.paths.values()),
              file=sys.stderr)
    return 0


def _progress(args):
    if args.quiet or args.json:
        return None
    from .report.terminal import ProgressReporter
    return ProgressReporter()


DEMO_FILES = {"run.json", "report.html", "model.json", "methods.md"}


def _is_earlier_demo(folder: Path) -> bool:
    """May the demo replace this folder without --overwrite?

    Only if an earlier demo wrote it (its run.json says so) and it holds
    nothing but what a demo writes: files a user added there are never lost.
    """
    try:
        if json.loads((folder / "run.json").read_text(encoding="utf-8")).get("command") != "demo":
            return False
        return all(entry.is_file() and (entry.suffix == ".csv" or entry.name in DEMO_FILES)
                   or entry.is_dir() and entry.name == "figures"
                   for entry in folder.iterdir())
    except (OSError, ValueError, AttributeError):
        return False


def _finish(study, args, *, command, inputs=()) -> int:
    from .outputs.write import run_notes, write_study
    from .report.terminal import print_summary
    out = write_study(study, args.out, overwrite=args.overwrite, command=command, inputs=inputs,
                      figures=args.figures)
    notes = run_notes(study)
    if args.json:
        from .report.terminal import summary_dict
        summary = summary_dict(study, out)
        summary.setdefault("notes", notes)
        print(json.dumps(summary))
    elif not args.quiet:
        print_summary(study, out)
        _print_notes(n for n in notes if n != study.survey.family_reason)
        print(f"open {Path(out).resolve() / 'report.html'} in a web browser to explore the results")
    return 0


class Stopped(KeyboardInterrupt):
    """A stop signal (SIGTERM, SIGHUP), met like Ctrl-C: nothing half-written is left."""

    def __init__(self, signum):
        super().__init__(signum)
        self.signum = signum


STOP_SIGNALS = ("SIGTERM", "SIGHUP")   # kill, timeout, a batch system's time limit, a closed terminal


def _raise_stopped(signum, _frame):
    raise Stopped(signum)


def _on_stop_signals():
    """Turn stop signals into :class:`Stopped` while a command runs; the old handlers back after."""
    import signal
    previous = {}
    for name in STOP_SIGNALS:
        number = getattr(signal, name, None)
        if number is None:
            continue
        try:
            previous[number] = signal.signal(number, _raise_stopped)
        except (ValueError, OSError):   # not the main thread: leave signals alone
            pass

    def restore():
        for number, handler in previous.items():
            signal.signal(number, handler)
    return restore


def _end_quietly_on_broken_pipe():
    """The reader of standard output has gone (``... | head``): stop writing, say nothing."""
    import os
    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())   # no second error when Python flushes at exit
    except (OSError, ValueError, AttributeError):
        pass
    return 128 + 13   # as a program ended by SIGPIPE


def _stopped_line(error) -> str:
    import signal
    signum = getattr(error, "signum", None)
    if signum is None:
        return "pathfinder: interrupted; nothing was written (an earlier output is as it was)"
    name = signal.Signals(signum).name
    return f"pathfinder: stopped by {name}; nothing was written (an earlier output is as it was)"


def main(argv=None) -> int:
    argv = sys.argv[1:] if argv is None else list(argv)
    debug = "--debug" in argv
    restore_signals = _on_stop_signals()
    try:
        args = build_parser().parse_args(argv)
        if args.command is None:
            raise InputError("choose a command: explore, demo, screen or predict (see 'pathfinder --help')")
        code = args.run(args)
        sys.stdout.flush()   # a closed pipe shows here, not at exit
        return code
    except InputError as error:
        print(f"pathfinder: {error.for_command_line()}", file=sys.stderr)
        return 2
    except BrokenPipeError:
        return _end_quietly_on_broken_pipe()
    except KeyboardInterrupt as error:
        print(_stopped_line(error), file=sys.stderr)
        return 128 + (getattr(error, "signum", None) or 2)
    except OSError as error:  # the machine refused (permission, read-only, full disk): not a fault
        if debug:
            raise
        from .outputs.folder import os_error_line
        print(f"pathfinder: {os_error_line(error, doing='use')}", file=sys.stderr)
        return 2
    except Exception as error:  # an internal fault: short message, full detail on request
        if debug:
            raise
        print(f"pathfinder: internal fault ({type(error).__name__}: {error}); "
              "rerun with --debug for the details and please report it", file=sys.stderr)
        return 1
    finally:
        restore_signals()


if __name__ == "__main__":
    sys.exit(main())
