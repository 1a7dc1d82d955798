"""Write a study's tables and run record into an output folder, all or nothing."""

from __future__ import annotations

import json
import os
from pathlib import Path

from .. import __version__
from .folder import output_folder
from .model_file import model_document, save_model
from .record import run_record


def model_of(study) -> dict:
    """The model file of the suggested choice (see choose.nested.recommend)."""
    choice, survey, design = study.chosen, study.survey, study.design
    return model_document(
        family=survey.family, response_name=survey.response_name,
        response_labels=survey.response_labels, terms=design.terms,
        reference_levels=design.reference_levels, intercept=choice.intercept, coef=choice.coef,
        offset_rule=survey.offset_rule, training_frame=survey.frame, training_X=design.X,
        weights=survey.weights,
        pick={"method": choice.method, "rule": choice.rule, "mix": choice.mix,
              "penalty": choice.penalty, "relaxation": choice.relaxation,
              "metric": study.options.metric, "cv_score": choice.inner_score},
        package_version=__version__, theta=getattr(study.family, "theta", None))


def run_notes(study) -> list[str]:
    """Every note of a run, once: how the table was read first, then the study's own."""
    info = study.table_info
    reading = tuple(info.notes) if info is not None else ()
    return list(dict.fromkeys(reading + tuple(study.notes)))


def _where_to_find_it_again(record: dict, study, out, command: str, figures) -> None:
    """What a rerun from this run.json needs beyond the options: the table's path, the figures.

    The path is relative to the output folder, so a project folder can move as
    a whole; the rerun checks the table's SHA-256 (see study_file.py).
    """
    record["output"] = {"figures": figures}
    info = study.table_info
    if info is None or record.get("input") is None or command == "demo":
        return
    table = Path(info.path).resolve()
    try:
        record["input"]["path"] = Path(os.path.relpath(table, Path(out).resolve())).as_posix()
    except ValueError:   # another drive (Windows): only an absolute path finds it
        record["input"]["path"] = table.as_posix()


def write_csv(frame, path: Path) -> None:
    frame.to_csv(path, index=False, float_format="%.10g", lineterminator="\n")


def write_json(data, path: Path) -> None:
    path.write_text(json.dumps(data, indent=2, sort_keys=False, default=str) + "\n", encoding="utf-8")


def write_study(study, out, *, overwrite: bool = False, command: str = "explore", inputs=(),
                report: bool = True, figures: str | None = None) -> Path:
    """Write every table as ``name.csv``, ``model.json``, ``run.json`` and the report.

    ``inputs`` are files the folder must not swallow (see ``check_target``).
    ``report`` writes ``report.html`` (rendered from the tables just written);
    ``figures`` ("png" or "svg") also writes every chart to ``figures/``.
    All of it lands in the folder at once, or none of it does.
    """
    from ..report.html import write_figures, write_report
    with output_folder(out, overwrite=overwrite, inputs=inputs) as folder:
        for name, frame in study.tables.items():
            write_csv(frame, folder / f"{name}.csv")
        save_model(model_of(study), folder / "model.json")
        record = run_record(study, command)
        record["notes"] = run_notes(study)   # with how the table was read (decimal mark, codes)
        _where_to_find_it_again(record, study, out, command, figures)
        write_json(record, folder / "run.json")
        if report:
            write_report(folder)
        if figures:
            write_figures(folder, fmt=figures)
    return Path(out)
