"""Study files: every explore option in one TOML file (or a run.json).

Keys are the names of :class:`pathfinder.study.StudyOptions` fields (for
example ``response``, ``mixes``, ``block_size``, ``coords``) plus ``data``,
the survey table. A ``run.json`` written by an earlier run is read through
its ``options`` record, so rerunning with it as the study file reproduces
that run. Options given on the command line override the file.

Example::

    data = "sites.csv"
    response = "present"
    exclude = ["site_id"]
    coords = ["x", "y"]
    block_size = 20000
    mixes = [1.0, 0.5]
    seed = 4
"""

from __future__ import annotations

import json
import tomllib
from dataclasses import fields
from pathlib import Path

from .errors import InputError


def option_names() -> list[str]:
    from .study import StudyOptions
    return [f.name for f in fields(StudyOptions)]


def read_study_file(path) -> dict:
    """The settings of a TOML study file or a run.json, checked key by key."""
    path = Path(path)
    if not path.is_file():
        raise InputError(f"the study file {path} does not exist or is not a file")
    try:
        text = path.read_text(encoding="utf-8")
        if path.suffix.lower() == ".json":
            record = json.loads(text)
            settings = dict(record.get("options", record))
        else:
            settings = tomllib.loads(text)
    except (UnicodeDecodeError, json.JSONDecodeError, tomllib.TOMLDecodeError) as error:
        raise InputError(f"the study file {path} cannot be read ({error}); check its syntax") from None
    known = set(option_names()) | {"data"}
    unknown = sorted(set(settings) - known)
    if unknown:
        raise InputError(f"the study file {path} has unknown setting(s) {', '.join(unknown)}; "
                         f"known settings are: {', '.join(sorted(known))}")
    return {k: (tuple(v) if isinstance(v, list) else v) for k, v in settings.items()}
