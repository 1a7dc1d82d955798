"""Study files: every explore option in one TOML file (or a run.json).

Keys are the names of :class:`pathfinder.study.StudyOptions` fields (for
example ``response``, ``mixes``, ``block_size``, ``coords``) plus ``data``,
the survey table, and ``figures`` ("png" or "svg"). A relative ``data`` path
is read from the study file's own folder, so a study file travels with its
table. Options given on the command line override the file.

A ``run.json`` written by an earlier run is read through its ``options``
record; its table is found from the path the run recorded (relative to the
run's folder) and must still have the SHA-256 the run recorded, so rerunning
with ``--config results/run.json`` alone reproduces that run.

Every value is checked for its type and range before anything runs; all the
mistakes of a file are named at once, in one line.

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

import hashlib
import json
import tomllib
from dataclasses import fields
from pathlib import Path

from .errors import InputError

OUTPUT_SETTINGS = {"figures": ("png", "svg")}

# Smallest whole numbers and number ranges the options take (names that are not
# options of this version are simply not checked here).
AT_LEAST = {"folds": 2, "inner_folds": 2, "repeats": 1, "grid_per_decade": 1, "n_pairs": 2,
            "nested_pairs": 2, "seed": 0, "subset_budget": 1, "subset_sizes": 1}
ABOVE_ZERO = ("block_size", "pfer", "grid_decades")
BETWEEN = {"stability_threshold": (0.5, 1.0, "above 0.5 and at most 1")}
CHOICES = {"missing": ("drop", "refuse"), "decimal": (".", ",")}
NUMBER_LISTS = ("mixes",)
PAIRS = ("coords",)


def option_names() -> list[str]:
    from .study import StudyOptions
    return [f.name for f in fields(StudyOptions)]


def _kinds() -> dict:
    """Option name -> the set of value kinds it takes (from StudyOptions' annotations)."""
    from .study import StudyOptions
    kinds = {}
    for f in fields(StudyOptions):
        text = f.type if isinstance(f.type, str) else getattr(f.type, "__name__", str(f.type))
        kinds[f.name] = {part.strip().split("[")[0] for part in text.split("|")}
    kinds["data"] = {"str"}
    kinds["figures"] = {"str", "None"}
    return kinds


def read_study_file(path, *, data_given: bool = False) -> dict:
    """The settings of a TOML study file or a run.json, checked key by key.

    With ``data_given`` (the caller names the table itself) a run.json's
    recorded table is not looked for.
    """
    path = Path(path).expanduser()
    if not path.is_file():
        raise InputError(f"the study file {path} does not exist or is not a file")
    try:
        text = path.read_text(encoding="utf-8")
        if path.suffix.lower() == ".json":
            settings = _from_run_record(json.loads(text), path, data_given)
        else:
            settings = tomllib.loads(text)
            if isinstance(settings.get("data"), str):
                settings["data"] = str(_beside(path, settings["data"]))
    except (UnicodeDecodeError, json.JSONDecodeError, tomllib.TOMLDecodeError) as error:
        detail = " ".join(str(error).split())
        raise InputError(f"the study file {path} cannot be read ({detail}); check its syntax") from None
    except OSError as error:
        raise InputError(f"the study file {path} cannot be read ({error.strerror or error})") from None
    if not isinstance(settings, dict):
        raise InputError(f"the study file {path} holds no settings; see 'pathfinder explore --help'")
    known = set(option_names()) | {"data"} | set(OUTPUT_SETTINGS)
    unknown = sorted(set(settings) - known)
    if unknown:
        raise InputError(f"the study file {path} has unknown setting(s) {', '.join(unknown)}; "
                         f"known settings are: {', '.join(sorted(known))}")
    return check_settings(settings, f"the study file {path}")


def _beside(study_file: Path, name: str) -> Path:
    """A path from a study file, read from the study file's folder unless absolute."""
    given = Path(name).expanduser()
    return given if given.is_absolute() else study_file.parent / given


def _from_run_record(record, path: Path, data_given: bool) -> dict:
    if not isinstance(record, dict):
        return record
    if "options" not in record:
        return record            # a JSON study file: the settings themselves
    settings = dict(record["options"])
    table = None if data_given else _recorded_table(record.get("input"), path)
    if table is not None:
        settings["data"] = table
    figures = (record.get("output") or {}).get("figures")
    if figures:
        settings["figures"] = figures
    return settings


def _recorded_table(recorded, path: Path) -> str | None:
    """The table a run recorded, if it is still there and unchanged."""
    if not isinstance(recorded, dict) or not recorded.get("path"):
        return None
    table = _beside(path, recorded["path"])
    if not table.is_file():
        raise InputError(
            f"the run record {path} names the table {recorded['path']} (from its own folder), "
            "which is not there now; give the table as DATA")
    expected = recorded.get("sha256")
    if expected and _sha256(table) != expected:
        raise InputError(
            f"the table {table} has changed since the run recorded in {path} (its SHA-256 "
            "differs), so the run would not be reproduced; give the table as DATA to use it "
            "as it is now")
    return str(table)


def _sha256(file: Path) -> str:
    digest = hashlib.sha256()
    with open(file, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


# ---------------------------------------------------------------------------
# Types and ranges
# ---------------------------------------------------------------------------


def check_settings(settings: dict, where: str) -> dict:
    """Each value checked for its type and range; every mistake named in one line."""
    kinds = _kinds()
    checked, mistakes = {}, []
    for key, value in settings.items():
        try:
            checked[key] = _check_value(key, value, kinds.get(key, {"str"}))
        except ValueError as problem:
            mistakes.append(str(problem))
    if mistakes:
        raise InputError(f"{where}: {'; '.join(mistakes)}; correct the file")
    return checked


def _shown(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return f"'{value}'"
    if isinstance(value, float):
        return f"{value:g}"
    if isinstance(value, (list, tuple)):
        return "a list"
    if isinstance(value, dict):
        return "a table of settings"
    return str(value)


def _wanted(key: str, kinds: set) -> str:
    words = []
    if "bool" in kinds:
        words.append("true or false")
    if "int" in kinds:
        words.append(f"a whole number{_minimum(key)}")
    elif "float" in kinds:
        words.append("a number")
    if "str" in kinds:
        words.append("one of " + ", ".join(f"'{c}'" for c in _choices(key)) if _choices(key)
                     else "text")
    if "tuple" in kinds:
        if key in NUMBER_LISTS:
            words.append("a list of numbers, such as [1.0, 0.5]")
        elif key in PAIRS:
            words.append('a list of two column names, such as ["x", "y"]')
        else:
            words.append('a list of column names, such as ["a", "b"]')
    return " or ".join(words) if words else "a value"


def _minimum(key: str) -> str:
    return f" of at least {AT_LEAST[key]}" if key in AT_LEAST else ""


def _choices(key: str):
    return CHOICES.get(key) or OUTPUT_SETTINGS.get(key)


def _check_value(key: str, value, kinds: set):
    """The value as the option takes it; ValueError naming the key when it does not fit."""
    def wrong():
        return ValueError(f"{key} must be {_wanted(key, kinds)}, got {_shown(value)}")

    if value is None:
        if "None" in kinds:
            return None
        raise wrong()
    if isinstance(value, bool):
        if "bool" in kinds:
            return value
        raise wrong()
    if isinstance(value, (int, float)):
        if "int" in kinds:
            if isinstance(value, float) and not value.is_integer():
                raise ValueError(f"{key} must be a whole number{_minimum(key)}, got {value:g}")
            return _in_range(key, int(value))
        if "float" in kinds:
            return _in_range(key, float(value))
        raise wrong()
    if isinstance(value, str):
        if "str" not in kinds:
            raise wrong()
        if _choices(key) and value not in _choices(key):
            raise wrong()
        return value
    if isinstance(value, (list, tuple)):
        if "tuple" not in kinds:
            raise wrong()
        return _check_list(key, list(value), wrong)
    raise wrong()


def _check_list(key: str, items: list, wrong) -> tuple:
    if key == "na_values":          # no-data codes: numbers or words, read as text
        if any(isinstance(v, bool) or not isinstance(v, (str, int, float)) for v in items):
            raise wrong()
        return tuple(str(v) for v in items)
    if key in NUMBER_LISTS:
        if not items or any(isinstance(v, bool) or not isinstance(v, (int, float)) for v in items):
            raise wrong()
        if key == "mixes" and any(not 0.0 <= float(v) <= 1.0 for v in items):
            raise ValueError(f"mixes must each lie between 0 (ridge) and 1 (lasso), got "
                             f"{', '.join(f'{float(v):g}' for v in items)}")
        return tuple(float(v) for v in items)
    if any(not isinstance(v, str) or not v.strip() for v in items):
        raise wrong()
    if key in PAIRS and len(items) != 2:
        raise wrong()
    return tuple(items)


def _in_range(key: str, number):
    if key in AT_LEAST and number < AT_LEAST[key]:
        raise ValueError(f"{key} must be a whole number of at least {AT_LEAST[key]}, got {number}")
    if key in ABOVE_ZERO and not number > 0:
        raise ValueError(f"{key} must be above 0, got {number:g}")
    if key in BETWEEN:
        low, high, words = BETWEEN[key]
        inside = low < number <= high
        if not inside:
            raise ValueError(f"{key} must lie {words}, got {number:g}")
    return number
