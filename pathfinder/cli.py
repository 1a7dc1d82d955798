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

from . import __version__
from .errors import InputError

DEMO_FOLDER = "pathfinder-demo"
DEMO_CHOICES = {"presence": "binomial", "count": "poisson", "continuous": "gaussian"}


class _Parser(argparse.ArgumentParser):
    """argparse, but a usage error is one line and exit status 2."""

    def error(self, message):
        raise InputError(f"{message} (see '{self.prog} --help')")


def _names(text):
    return tuple(part.strip() for part in text.split(",") if part.strip())


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


def _add_table_options(p):
    p.add_argument("data", help="the survey table: a CSV file (any common delimiter) or a Parquet file")
    p.add_argument("--response", required=True, metavar="COL", help="the column to model")
    p.add_argument("--family", default="auto", choices=["auto", "gaussian", "binomial", "poisson"],
                   help="binomial for presence/absence, poisson for counts, gaussian for a "
                        "continuous measure; auto picks one from the response and says why")
    p.add_argument("--predictors", type=_names, metavar="A,B,..",
                   help="predictor columns (default: every column with no other role)")
    p.add_argument("--exclude", type=_names, default=(), metavar="A,B,..",
                   help="columns to leave out of the predictors (site labels, notes)")
    p.add_argument("--categorical", type=_names, default=(), metavar="A,B,..",
                   help="number-coded columns to treat as classes (e.g. a habitat code)")
    p.add_argument("--effort", metavar="COL", help="survey effort (positive); its log becomes the offset")
    p.add_argument("--offset", metavar="COL", help="a column added to the linear predictor as is")
    p.add_argument("--weights", metavar="COL", help="observation weights (non-negative)")
    p.add_argument("--coords", type=_coords, metavar="XCOL,YCOL", help="site coordinates")
    p.add_argument("--groups", metavar="COL", help="a grouping column (site, region, year)")
    p.add_argument("--missing", choices=["drop", "refuse"], default="drop",
                   help="rows with missing values: drop and count them (default) or stop")
    p.add_argument("--decimal", choices=[".", ","], help="decimal mark of the CSV (',' for decimal commas)")
    p.add_argument("--delimiter", help="field delimiter of the CSV (default: detected)")


def _add_model_options(p):
    p.add_argument("--squares", nargs="?", const=True, default=False, type=_names, metavar="A,B,..",
                   help="add centred squared terms (unimodal responses): for all numeric "
                        "predictors, or those listed")
    p.add_argument("--interactions", action="store_true",
                   help="add every pairwise interaction of numeric predictors (centred)")
    p.add_argument("--mix", type=_numbers, default=(1.0,), metavar="M1,M2,..",
                   help="lasso-to-ridge mix values: 1 lasso, 0 ridge, between: elastic net (default 1)")
    p.add_argument("--penalties", type=int, default=100, metavar="N", help="penalties on the path (default 100)")
    p.add_argument("--penalty-ratio", type=float, metavar="R",
                   help="smallest penalty as a fraction of the largest (default 1e-4, or 1e-2 when "
                        "there are more terms than rows)")
    p.add_argument("--seed", type=int, default=1, help="seed for every random choice (default 1)")


def _add_output_options(p, default_out=None):
    p.add_argument("--out", default=default_out, metavar="DIR", required=default_out is None,
                   help="output folder (written completely or not at all)")
    p.add_argument("--overwrite", action="store_true", help="replace a non-empty output folder")
    p.add_argument("--quiet", action="store_true", help="print nothing but errors")
    p.add_argument("--json", action="store_true", help="print a machine-readable summary on standard output")
    p.add_argument("--debug", action="store_true", help="show the full traceback of an internal fault")


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="pathfinder", description=(
        "Choose predictors for habitat models that you can defend: penalised regression "
        "paths, honest cross-validation, stability and subset selection."))
    parser.add_argument("--version", action="version", version=f"pathfinder {__version__}")
    commands = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)

    explore = commands.add_parser(
        "explore", help="analyse a survey table", formatter_class=argparse.RawDescriptionHelpFormatter,
        description="Fit lasso, elastic-net or ridge paths to a survey table and write the tables.",
        epilog="examples:\n"
               "  pathfinder explore sites.csv --response present --out results\n"
               "  pathfinder explore counts.csv --response n_birds --effort minutes "
               "--exclude site_id --mix 1,0.5 --out results")
    _add_table_options(explore)
    _add_model_options(explore)
    _add_output_options(explore)
    explore.set_defaults(run=run_explore)

    demo = commands.add_parser(
        "demo", help="run the analysis on the bundled invented survey",
        description="Explore the bundled invented survey (the Carrow bell-moss).",
        epilog="example:\n  pathfinder demo --response count --out demo-counts",
        formatter_class=argparse.RawDescriptionHelpFormatter)
    demo.add_argument("--response", choices=list(DEMO_CHOICES), default="presence",
                      help="which of the three responses to model (default presence)")
    demo.add_argument("--seed", type=int, default=1)
    _add_output_options(demo, default_out=DEMO_FOLDER)
    demo.set_defaults(run=run_demo)
    return parser


def _options_from(args):
    from .study import StudyOptions
    return StudyOptions(
        response=args.response, family=args.family, predictors=args.predictors,
        exclude=tuple(args.exclude), categorical=tuple(args.categorical), effort=args.effort,
        offset=args.offset, weights=args.weights, coords=args.coords, groups=args.groups,
        missing=args.missing, decimal=args.decimal, delimiter=args.delimiter,
        squares=args.squares, interactions=args.interactions, mixes=tuple(args.mix),
        n_penalties=args.penalties, penalty_ratio=args.penalty_ratio, seed=args.seed)


def run_explore(args) -> int:
    from .outputs.folder import check_target
    from .study import explore
    check_target(args.out)
    data = Path(args.data)
    study = explore(data, _options_from(args))
    return _finish(study, args, command="explore")


def run_demo(args) -> int:
    from .examples import COORDS, DEMO_RESPONSES, EFFORT, GROUPS, SITE_LABELS, load_demo
    from .study import StudyOptions, explore
    family = DEMO_CHOICES[args.response]
    response = DEMO_RESPONSES[family]
    others = tuple(c for f, c in DEMO_RESPONSES.items() if f != family)
    # Effort is an offset for the count; for the other responses it is not a predictor either.
    options = StudyOptions(
        response=response, family=family,
        exclude=others + tuple(SITE_LABELS) + (() if family == "poisson" else (EFFORT,)),
        effort=EFFORT if family == "poisson" else None, coords=tuple(COORDS), groups=GROUPS,
        seed=args.seed)
    args.overwrite = args.overwrite or _is_earlier_demo(Path(args.out))
    study = explore(load_demo(), options)
    return _finish(study, args, command="demo")


def _is_earlier_demo(folder: Path) -> bool:
    """A folder written by an earlier demo run may be replaced without --overwrite."""
    try:
        return json.loads((folder / "run.json").read_text(encoding="utf-8")).get("command") == "demo"
    except (OSError, ValueError):
        return False


def _finish(study, args, *, command) -> int:
    from .outputs.write import write_study
    from .report.terminal import print_summary
    out = write_study(study, args.out, overwrite=args.overwrite, command=command)
    if args.json:
        from .report.terminal import summary_dict
        print(json.dumps(summary_dict(study, out)))
    elif not args.quiet:
        print_summary(study, out)
    return 0


def main(argv=None) -> int:
    argv = sys.argv[1:] if argv is None else list(argv)
    debug = "--debug" in argv
    try:
        args = build_parser().parse_args(argv)
        if args.command is None:
            build_parser().print_help()
            return 2
        return args.run(args)
    except InputError as error:
        print(f"pathfinder: {error.message}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("pathfinder: interrupted; no output folder was written", file=sys.stderr)
        return 130
    except Exception as error:  # an internal fault: short message, full detail on request
        if debug:
            raise
        print(f"pathfinder: internal fault ({type(error).__name__}: {error}); "
              "rerun with --debug for the details and please report it", file=sys.stderr)
        return 1


if __name__ == "__main__":
    sys.exit(main())
