"""The corpus of bad inputs (tests/cli/bad_inputs/cases.toml): each gets its one line.

Every case runs ``pathfinder`` as a real process in a fresh folder and checks
the contract: exit status 2, one line on standard error holding the expected
fragments in the command line's own spelling, no traceback, nothing on
standard output, the inputs unchanged and nothing left behind.
"""

import re
import shutil
import tomllib
from pathlib import Path

import pytest

from .helpers import hidden_leftovers, run_cli, snapshot, the_one_line

CORPUS = Path(__file__).parent / "bad_inputs"
CASES = tomllib.loads((CORPUS / "cases.toml").read_text(encoding="utf-8"))["case"]
PYTHON_SPELLING = re.compile(r"\b[a-z_]+=['(\[]|\bmax_levels\b")


@pytest.mark.parametrize("case", CASES, ids=[case["name"] for case in CASES])
def test_each_bad_input_gets_its_one_line(tmp_path, case):
    for name in case.get("files", []):
        shutil.copy(CORPUS / name, tmp_path / name)
    for name, text in case.get("write", {}).items():
        (tmp_path / name).write_text(text.lstrip(), encoding="utf-8")
    before = snapshot(tmp_path)

    result = run_cli(case["args"], cwd=tmp_path)

    assert result.returncode == 2, result.stderr
    line = the_one_line(result.stderr)
    assert line.startswith("pathfinder: ") and "Traceback" not in result.stderr
    for fragment in case["expect"]:
        assert fragment in line, f"{fragment!r} is not in: {line}"
    for fragment in case.get("absent", []):
        assert fragment not in line, f"{fragment!r} should not be in: {line}"
    assert not PYTHON_SPELLING.search(line), f"Python spelling in a command-line message: {line}"
    assert result.stdout == ""
    assert snapshot(tmp_path) == before
    assert hidden_leftovers(tmp_path) == []


def test_every_corpus_file_is_used():
    named = {name for case in CASES for name in case.get("files", [])}
    present = {p.name for p in CORPUS.iterdir() if p.suffix == ".csv"}
    assert named == present
