"""Shared pieces for the command-line tests: a real process, an invented table, a folder snapshot.

The command line is run as a separate Python process (``python -m
pathfinder.cli``), so exit codes, standard output and standard error are the
ones a user sees. The tables are plainly invented numbers, used only to reach
the error paths and to check the shape of the outputs.
"""

import subprocess
import sys
from pathlib import Path

import numpy as np

HEADER = ["site", "temperature", "rainfall", "soil_ph", "cover"]
N_ROWS = 30


def run_cli(args, cwd, timeout=120) -> subprocess.CompletedProcess:
    """Run ``pathfinder ARGS`` in ``cwd`` as a user would, capturing both streams."""
    return subprocess.run(
        [sys.executable, "-m", "pathfinder.cli", *[str(a) for a in args]],
        cwd=cwd, capture_output=True, text=True, encoding="utf-8", errors="replace",
        timeout=timeout,
    )


def invented_table(n=N_ROWS, seed=2024):
    """Header and rows (text cells) of an invented survey with a continuous response.

    ``cover`` rises with ``temperature`` and falls with ``rainfall`` so that the
    lasso path has terms to bring in; ``soil_ph`` is noise.
    """
    rng = np.random.default_rng(seed)
    temperature = rng.normal(10.0, 2.0, n)
    rainfall = rng.normal(800.0, 60.0, n)
    soil_ph = rng.normal(6.0, 0.5, n)
    cover = 5.0 + 1.5 * temperature - 0.02 * (rainfall - 800.0) + rng.normal(0.0, 1.0, n)
    rows = [
        [f"s{i + 1}", f"{temperature[i]:.3f}", f"{rainfall[i]:.1f}", f"{soil_ph[i]:.2f}",
         f"{cover[i]:.3f}"]
        for i in range(n)
    ]
    return list(HEADER), rows


def replace_column(header, rows, name, values, new_name=None):
    """A copy of the table with column ``name`` holding ``values`` (and renamed if asked)."""
    j = header.index(name)
    header = list(header)
    if new_name is not None:
        header[j] = new_name
    rows = [list(row) for row in rows]
    for row, value in zip(rows, values):
        row[j] = str(value)
    return header, rows


def set_cells(header, rows, name, indices, value):
    """A copy of the table with column ``name`` set to ``value`` in data rows ``indices``.

    ``indices`` count data rows from 0 (the header is not a data row).
    """
    j = header.index(name)
    rows = [list(row) for row in rows]
    for index in indices:
        rows[index][j] = str(value)
    return header, rows


def csv_text(header, rows, delimiter=","):
    return "\n".join(delimiter.join(cells) for cells in [header, *rows]) + "\n"


def data_row(index):
    """How a message names data row ``index`` (0-based): "data row N", counted from 1 below the header."""
    return f"data row {index + 1} "


def snapshot(folder: Path) -> dict:
    """Every file and folder under ``folder``: relative path -> bytes (None for a folder)."""
    return {
        path.relative_to(folder).as_posix(): (None if path.is_dir() else path.read_bytes())
        for path in sorted(folder.rglob("*"))
    }


def hidden_leftovers(folder: Path) -> list:
    """Hidden temporary folders an output step might leave behind in ``folder``."""
    return sorted(p.name for p in folder.rglob(".*") if "partial" in p.name or "replaced" in p.name)


def the_one_line(stderr: str) -> str:
    """Standard error must be exactly one non-empty line; return it."""
    lines = stderr.strip().splitlines()
    assert len(lines) == 1, f"expected one line on standard error, got {len(lines)}:\n{stderr}"
    assert lines[0].strip(), "the error line is blank"
    return lines[0]
