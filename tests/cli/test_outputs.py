"""What a successful run leaves behind, and how the output folder is guarded.

``pathfinder explore`` and ``pathfinder demo`` run as real processes; the
interrupted-run checks call ``pathfinder.cli.main`` in this process so that a
Ctrl-C can be injected between two files. The small table is plainly
invented numbers (see helpers.invented_table).
"""

import hashlib
import json
from importlib import metadata

import numpy as np
import pandas as pd
import pytest

import pathfinder
import pathfinder.outputs.write as write_module
from pathfinder import examples
from pathfinder.cli import DEMO_FOLDER, main

from .helpers import (
    csv_text,
    hidden_leftovers,
    invented_table,
    run_cli,
    snapshot,
    the_one_line,
)

COEFFICIENT_HEADER = "method,mix,step,penalty,term,estimate,estimate_std"
DATA = "survey.csv"
DEMO_OUT = "demo-results"
COVER = ["--response", "cover", "--exclude", "site"]
# Runs whose subject is the output folder, not the fit, keep the fit small: lasso only,
# three folds, no nested cross-validation.
FAST = ["--mix", "1", "--folds", "3", "--no-nested"]
# The folder tests of the demo use its quickest scenario; the folder rules do not depend on it.
DEMO_FAST = ["demo", "--response", "continuous", "--quick", "--quiet"]


def _write_survey(folder, name=DATA):
    data = folder / name
    data.write_bytes(csv_text(*invented_table()).encode("utf-8"))
    return data


def _read_record(folder):
    return json.loads((folder / "run.json").read_text(encoding="utf-8"))


@pytest.fixture(scope="module")
def explored(tmp_path_factory):
    """One explore run (lasso, elastic net and ridge; seed 7) on the invented table."""
    folder = tmp_path_factory.mktemp("explore")
    data = _write_survey(folder)
    result = run_cli(["explore", DATA, *COVER, "--mix", "1,0.5,0", "--seed", "7",
                      "--out", "results", "--quiet"], cwd=folder)
    return folder, data, result


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    """One demo run (presence of the moss), without nested cross-validation to save time."""
    folder = tmp_path_factory.mktemp("demo")
    result = run_cli(["demo", "--quick", "--quiet", "--out", DEMO_OUT], cwd=folder)
    return folder, result


# ---------------------------------------------------------------------------
# The files of a run
# ---------------------------------------------------------------------------


def _check_tables(out):
    """The contract's files and coefficient header; returns the two tables."""
    for name in ("coefficients.csv", "path.csv", "run.json"):
        assert (out / name).is_file(), f"{name} is missing from {out}"
    header = (out / "coefficients.csv").read_text(encoding="utf-8").splitlines()[0]
    assert header == COEFFICIENT_HEADER
    return pd.read_csv(out / "coefficients.csv"), pd.read_csv(out / "path.csv")


def _check_path_shape(coefficients, path):
    """Penalties fall as steps rise; step 0 (the largest penalty) has every coefficient zero.

    The zero first step holds for any mix above 0, because the path starts at the smallest
    penalty that removes every term. Ridge (mix 0) never sets a coefficient exactly to zero
    at any finite penalty (a fact of common practice), so its first step is only checked to
    be the largest penalty.
    """
    assert len(coefficients) > 0
    for (method, mix), rows in coefficients.groupby(["method", "mix"]):
        steps = rows.groupby("step")
        assert sorted(steps.groups) == list(range(len(steps))), f"{method}: steps are not 0..K-1"
        if mix > 0:
            first = rows[rows.step == 0]
            assert (first.estimate == 0).all() and (first.estimate_std == 0).all(), method
        penalty = steps.penalty.agg(["min", "max"])
        assert (penalty["min"] == penalty["max"]).all(), f"{method}: one penalty per step"
        assert np.all(np.diff(penalty["min"].to_numpy()) < 0), f"{method}: penalties do not fall"
        last = rows[rows.step == rows.step.max()]
        assert (last.estimate != 0).any(), f"{method}: no term enters the path at all"
        # The path table lists the same penalties, step by step.
        summary = path[(path.method == method) & (path["mix"] == mix)].sort_values("step")
        np.testing.assert_allclose(summary.penalty.to_numpy(), penalty["min"].to_numpy(),
                                   rtol=1e-9)


def test_explore_writes_the_contract_files(explored):
    folder, _, result = explored
    assert result.returncode == 0, result.stderr
    coefficients, path = _check_tables(folder / "results")
    assert set(coefficients.method) == {"lasso", "elastic net", "ridge"}
    assert set(coefficients.term) == {"temperature", "rainfall", "soil_ph"}
    _check_path_shape(coefficients, path)
    assert hidden_leftovers(folder) == []


def test_explore_run_record(explored):
    folder, data, result = explored
    assert result.returncode == 0, result.stderr
    record = _read_record(folder / "results")
    assert record["command"] == "explore"
    assert record["seed"] == 7
    options = record["options"]
    assert options["response"] == "cover"
    assert options["exclude"] == ["site"]
    assert options["mixes"] == [1.0, 0.5, 0.0]
    assert options["seed"] == 7
    assert record["versions"]["pathfinder"] == pathfinder.__version__
    assert record["versions"]["numpy"] == np.__version__
    assert record["versions"]["pandas"] == pd.__version__
    assert record["input"]["file"] == DATA
    assert record["input"]["sha256"] == hashlib.sha256(data.read_bytes()).hexdigest()


def test_demo_writes_the_contract_files(demo):
    folder, result = demo
    assert result.returncode == 0, result.stderr
    out = folder / DEMO_OUT
    coefficients, path = _check_tables(out)
    _check_path_shape(coefficients, path)
    record = _read_record(out)
    assert record["command"] == "demo"
    assert record["seed"] == 1
    assert record["options"]["response"] == "bellmoss_found"
    assert record["versions"]["pathfinder"] == pathfinder.__version__


def test_demo_run_record_names_the_bundled_table(demo):
    folder, result = demo
    assert result.returncode == 0, result.stderr
    with examples.table_file() as table:
        bundled = table.read_bytes()
    record = _read_record(folder / DEMO_OUT)
    assert record["input"] is not None, "run.json does not say which table the demo read"
    assert record["input"]["sha256"] == hashlib.sha256(bundled).hexdigest()


def test_decimal_commas_give_the_same_coefficients(tmp_path):
    header, rows = invented_table()
    plain = tmp_path / "dots.csv"
    plain.write_text(csv_text(header, rows), encoding="utf-8")
    commas = tmp_path / "commas.csv"
    commas.write_text(csv_text(header, rows, delimiter=";").replace(".", ","), encoding="utf-8")
    assert plain.read_bytes() != commas.read_bytes()

    first = run_cli(["explore", plain.name, *COVER, *FAST, "--out", "dots", "--quiet"],
                    cwd=tmp_path)
    second = run_cli(["explore", commas.name, *COVER, *FAST, "--decimal", ",", "--out", "commas",
                      "--quiet"], cwd=tmp_path)

    assert first.returncode == 0, first.stderr
    assert second.returncode == 0, second.stderr
    written = (tmp_path / "dots" / "coefficients.csv").read_bytes()
    assert (tmp_path / "commas" / "coefficients.csv").read_bytes() == written
    assert len(written.splitlines()) > 1
    assert _read_record(tmp_path / "commas")["options"]["decimal"] == ","


# ---------------------------------------------------------------------------
# The output folder: complete or absent, never replaced by accident
# ---------------------------------------------------------------------------


def _earlier_results(folder):
    out = folder / "results"
    (out / "maps").mkdir(parents=True)
    (out / "notes.txt").write_text("field notes, week 3\n", encoding="utf-8")
    (out / "maps" / "plot.svg").write_text("<svg/>\n", encoding="utf-8")
    return out


def test_non_empty_out_is_refused_and_left_alone(tmp_path):
    _write_survey(tmp_path)
    out = _earlier_results(tmp_path)
    before = snapshot(tmp_path)

    result = run_cli(["explore", DATA, *COVER, *FAST, "--out", "results"], cwd=tmp_path)

    assert result.returncode == 2
    line = the_one_line(result.stderr)
    assert line.startswith("pathfinder:") and "results" in line and "--overwrite" in line
    assert "Traceback" not in result.stderr
    assert snapshot(tmp_path) == before
    assert sorted(p.name for p in out.iterdir()) == ["maps", "notes.txt"]
    assert hidden_leftovers(tmp_path) == []


def test_overwrite_replaces_the_folder(tmp_path):
    _write_survey(tmp_path)
    out = _earlier_results(tmp_path)

    result = run_cli(["explore", DATA, *COVER, *FAST, "--out", "results", "--overwrite", "--quiet"],
                     cwd=tmp_path)

    assert result.returncode == 0, result.stderr
    assert not (out / "notes.txt").exists() and not (out / "maps").exists()
    _check_tables(out)
    assert hidden_leftovers(tmp_path) == []


def _interrupt_after_first_file(monkeypatch):
    """Make the second table write raise KeyboardInterrupt; return the files written."""
    real = write_module.write_csv
    written = []

    def write_then_interrupt(frame, path):
        if written:
            raise KeyboardInterrupt
        real(frame, path)
        written.append(path)

    monkeypatch.setattr(write_module, "write_csv", write_then_interrupt)
    return written


def test_interrupted_run_leaves_no_output(tmp_path, monkeypatch, capsys):
    data = _write_survey(tmp_path)
    target = tmp_path / "results"
    written = _interrupt_after_first_file(monkeypatch)

    code = main(["explore", str(data), *COVER, *FAST, "--out", str(target), "--quiet"])

    assert code == 130
    assert len(written) == 1, "the interrupt should come after one file was written"
    assert target not in written[0].parents, "files must be written aside, not into the target"
    assert not written[0].exists()
    assert not target.exists()
    assert list(tmp_path.glob(".results.*")) == []
    assert hidden_leftovers(tmp_path) == []
    assert the_one_line(capsys.readouterr().err).startswith("pathfinder:")


def test_interrupted_overwrite_keeps_the_earlier_folder(tmp_path, monkeypatch, capsys):
    data = _write_survey(tmp_path)
    target = _earlier_results(tmp_path)
    before = snapshot(tmp_path)
    written = _interrupt_after_first_file(monkeypatch)

    code = main(["explore", str(data), *COVER, *FAST, "--out", str(target), "--overwrite",
                 "--quiet"])

    assert code == 130
    assert len(written) == 1
    assert snapshot(tmp_path) == before
    assert list(tmp_path.glob(".results.*")) == []
    capsys.readouterr()


def test_overwrite_never_deletes_the_input(tmp_path):
    survey = tmp_path / "survey"
    survey.mkdir()
    data = _write_survey(survey)
    original = data.read_bytes()

    run_cli(["explore", "survey/" + DATA, *COVER, *FAST, "--out", "survey", "--overwrite",
             "--quiet"],
            cwd=tmp_path)

    assert data.is_file() and data.read_bytes() == original


def test_out_as_the_current_folder(tmp_path):
    _write_survey(tmp_path)
    here = tmp_path / "results"
    here.mkdir()

    result = run_cli(["explore", "../" + DATA, *COVER, *FAST, "--out", ".", "--quiet"], cwd=here)

    assert result.returncode in (0, 2), result.stderr
    assert "Traceback" not in result.stderr
    assert hidden_leftovers(tmp_path) == []


# ---------------------------------------------------------------------------
# The demo and its default folder
# ---------------------------------------------------------------------------


def test_demo_twice_replaces_its_own_output(tmp_path):
    first = run_cli(DEMO_FAST, cwd=tmp_path)
    assert first.returncode == 0, first.stderr
    coefficients = tmp_path / DEMO_FOLDER / "coefficients.csv"
    fresh = coefficients.read_bytes()
    coefficients.write_bytes(fresh + b"a line the second run must not keep\n")

    second = run_cli(DEMO_FAST, cwd=tmp_path)

    assert second.returncode == 0, second.stderr
    assert coefficients.read_bytes() == fresh
    assert hidden_leftovers(tmp_path) == []


def test_demo_refuses_a_folder_with_other_content(tmp_path):
    other = tmp_path / DEMO_FOLDER
    other.mkdir()
    (other / "thesis.txt").write_text("chapter 2\n", encoding="utf-8")
    before = snapshot(tmp_path)

    result = run_cli(DEMO_FAST, cwd=tmp_path)

    assert result.returncode == 2
    line = the_one_line(result.stderr)
    assert line.startswith("pathfinder:") and DEMO_FOLDER in line and "--overwrite" in line
    assert snapshot(tmp_path) == before
    assert hidden_leftovers(tmp_path) == []


def test_demo_keeps_files_added_to_its_folder(tmp_path):
    first = run_cli(DEMO_FAST, cwd=tmp_path)
    assert first.returncode == 0, first.stderr
    notes = tmp_path / DEMO_FOLDER / "my_notes.txt"
    notes.write_text("compare with the 2019 survey\n", encoding="utf-8")

    run_cli(DEMO_FAST, cwd=tmp_path)

    assert notes.is_file()


def test_non_empty_out_is_refused_before_any_fitting(tmp_path, monkeypatch, capsys):
    data = _write_survey(tmp_path)
    target = _earlier_results(tmp_path)

    def fit_started(*args, **kwargs):
        raise RuntimeError("the analysis started before the output folder was checked")

    monkeypatch.setattr("pathfinder.study.explore", fit_started)
    code = main(["explore", str(data), *COVER, *FAST, "--out", str(target), "--quiet"])

    assert code == 2
    assert "--overwrite" in the_one_line(capsys.readouterr().err)


# ---------------------------------------------------------------------------
# What is printed
# ---------------------------------------------------------------------------


def test_json_prints_one_object(tmp_path):
    _write_survey(tmp_path)
    result = run_cli(["explore", DATA, *COVER, *FAST, "--out", "results", "--json"], cwd=tmp_path)
    assert result.returncode == 0, result.stderr
    assert len(result.stdout.strip().splitlines()) == 1
    summary = json.loads(result.stdout)
    assert isinstance(summary, dict)
    assert summary["rows_used"] == 30
    assert summary["output"] == "results"


def test_quiet_prints_nothing(tmp_path):
    _write_survey(tmp_path)
    result = run_cli(["explore", DATA, *COVER, *FAST, "--out", "results", "--quiet"], cwd=tmp_path)
    assert result.returncode == 0, result.stderr
    assert result.stdout == ""
    assert result.stderr == ""  # nothing but errors, and there are none
    assert (tmp_path / "results" / "coefficients.csv").is_file()


def test_version(tmp_path):
    result = run_cli(["--version"], cwd=tmp_path)
    assert result.returncode == 0
    assert result.stdout.strip() == f"pathfinder {pathfinder.__version__}"
    assert pathfinder.__version__ == metadata.version("pathfinder")


def test_explore_help_shows_examples(tmp_path):
    result = run_cli(["explore", "--help"], cwd=tmp_path)
    assert result.returncode == 0
    assert "examples:" in result.stdout
    examples = result.stdout.split("examples:", 1)[1]
    assert "pathfinder explore " in examples and "--response" in examples
