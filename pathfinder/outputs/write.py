"""Write a study's tables and run record into an output folder, all or nothing."""

from __future__ import annotations

import json
from pathlib import Path

from .folder import output_folder
from .record import run_record


def write_csv(frame, path: Path) -> None:
    frame.to_csv(path, index=False, float_format="%.10g", lineterminator="\n")


def write_json(data, path: Path) -> None:
    path.write_text(json.dumps(data, indent=2, sort_keys=False, default=str) + "\n", encoding="utf-8")


def write_study(study, out, *, overwrite: bool = False, command: str = "explore", inputs=()) -> Path:
    """Write every table as ``name.csv`` plus ``run.json``; return the folder.

    ``inputs`` are files the folder must not swallow (see ``check_target``).
    """
    with output_folder(out, overwrite=overwrite, inputs=inputs) as folder:
        for name, frame in study.tables.items():
            write_csv(frame, folder / f"{name}.csv")
        write_json(run_record(study, command), folder / "run.json")
    return Path(out)
