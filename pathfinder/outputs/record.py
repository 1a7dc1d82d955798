"""The run record (run.json): what was run, on what, with which versions."""

from __future__ import annotations

import platform
from datetime import datetime, timezone
from importlib import metadata

from ..core.families import get_family

PACKAGES = ("pathfinder", "numpy", "scipy", "pandas", "scikit-learn", "numba", "pyarrow")


def package_versions() -> dict:
    out = {"python": platform.python_version()}
    for name in PACKAGES:
        try:
            out[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            out[name] = None
    return out


def run_record(study, command: str) -> dict:
    """A JSON-ready dictionary describing one run."""
    survey, info = study.survey, study.table_info
    dropped_rows = survey.n_read - survey.n
    family = get_family(survey.family)
    record = {
        "command": command,
        "date": datetime.now(timezone.utc).date().isoformat(),
        "options": study.options.to_dict(),
        "seed": study.options.seed,
        "versions": package_versions(),
        "input": None if info is None else {
            "file": info.path.rsplit("/", 1)[-1], "format": info.format, "sha256": info.sha256,
            "rows": info.n_rows, "columns": info.n_columns,
        },
        "rows": {"read": survey.n_read, "used": survey.n, "dropped": dropped_rows,
                 "dropped_for_missing_value_in": dict(survey.dropped_missing)},
        "response": {"column": survey.response_name, "family": survey.family,
                     "family_reason": survey.family_reason,
                     "kind": family.kind, "presence_absence": family.binary,
                     "link": family.link_name,
                     "theta": getattr(study.family, "theta", None),
                     "prediction": family.mean_words("{}"),
                     "labels": list(survey.response_labels) if survey.response_labels else None},
        "predictors": {"kept": list(survey.predictors), "categorical": list(survey.categorical),
                       "dropped": [list(d) for d in survey.dropped_predictors],
                       "terms": list(study.design.names)},
        "offset_rule": survey.offset_rule,
        "paths": [{"method": method, "mix": mix, "penalties": len(fit.penalties),
                   "stop_reason": fit.stop_reason}
                  for (method, mix), fit in study.fits.items()],
        "folds": {"scheme": study.folds.scheme, "count": study.folds.n_folds,
                  "repeats": study.folds.n_repeats},
        "backend": study.backend,
        "stability": None if study.stability is None else {
            "q": int(study.stability.q), "threshold": float(study.stability.threshold),
            "pfer_bound": float(study.stability.pfer_bound), "n_pairs": int(study.stability.n_pairs),
            "mix": float(study.stability.mix), "error_control": study.stability.error_control,
            "stable_terms": list(study.stability.stable_terms)},
        "chosen": {"method": study.chosen.method, "rule": study.chosen.rule,
                   "terms": list(study.chosen.terms)},
        "notes": list(study.notes),
        "warnings": list(study.warnings),
        "timings_seconds": {k: round(v, 3) for k, v in study.timings.items()},
    }
    return record
