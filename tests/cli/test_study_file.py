"""Study files (--config): the same run from a TOML file, from the command line and from run.json."""

import json

import numpy as np
import pandas as pd
import pytest

from pathfinder.cli import main

TABLES = ("coefficients.csv", "cv.csv", "picks.csv", "folds.csv", "criteria.csv", "path.csv")


@pytest.fixture()
def survey(tmp_path):
    # Invented table for a property of the command line, not a statistical claim.
    rng = np.random.default_rng(3)
    frame = pd.DataFrame({f"c{j}": rng.standard_normal(80).round(4) for j in range(5)})
    frame["site"] = [f"s{i}" for i in range(80)]
    frame["cover"] = (2 * frame.c0 - frame.c3 + rng.standard_normal(80)).round(4)
    path = tmp_path / "survey.csv"
    frame.to_csv(path, index=False)
    return path


def _run(args, monkeypatch, where):
    monkeypatch.chdir(where)
    assert main(args + ["--quiet"]) == 0


def test_study_file_equals_command_line_and_run_record_reproduces(survey, tmp_path, monkeypatch):
    cli = ["explore", str(survey), "--response", "cover", "--exclude", "site", "--mix", "1,0.5",
           "--folds", "4", "--no-nested", "--seed", "9", "--grid-per-decade", "9"]
    _run(cli + ["--out", "by_options"], monkeypatch, tmp_path)
    (tmp_path / "study.toml").write_text(
        f'data = "{survey.name}"\nresponse = "cover"\nexclude = ["site"]\nmixes = [1.0, 0.5]\n'
        'folds = 4\nnested = false\nseed = 9\ngrid_per_decade = 9\n', encoding="utf-8")
    _run(["explore", "--config", "study.toml", "--out", "by_file"], monkeypatch, tmp_path)
    _run(["explore", str(survey), "--config", "by_options/run.json", "--out", "by_record"],
         monkeypatch, tmp_path)
    for name in TABLES:
        first = (tmp_path / "by_options" / name).read_bytes()
        assert first == (tmp_path / "by_file" / name).read_bytes(), name
        assert first == (tmp_path / "by_record" / name).read_bytes(), name
    record = json.loads((tmp_path / "by_file" / "run.json").read_text())
    assert record["options"]["seed"] == 9 and record["options"]["mixes"] == [1.0, 0.5]


def test_command_line_overrides_the_study_file(survey, tmp_path, monkeypatch):
    (tmp_path / "study.toml").write_text(
        f'data = "{survey.name}"\nresponse = "cover"\nexclude = ["site"]\nmixes = [1.0]\n'
        'folds = 3\nnested = false\nseed = 2\n', encoding="utf-8")
    _run(["explore", "--config", "study.toml", "--seed", "5", "--out", "out"], monkeypatch, tmp_path)
    record = json.loads((tmp_path / "out" / "run.json").read_text())
    assert record["options"]["seed"] == 5 and record["options"]["folds"] == 3


def test_unknown_setting_is_one_clear_line(survey, tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "study.toml").write_text('response = "cover"\nblock_sise = 3\n', encoding="utf-8")
    assert main(["explore", str(survey), "--config", "study.toml", "--out", "out"]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "block_sise" in err
    assert not (tmp_path / "out").exists()
