"""Study files checked value by value; paths read from the study file's folder; run.json alone reruns.

The survey is invented (seeded) numbers; the checks are about the command
line, not about a fit.
"""

import json

import numpy as np
import pandas as pd
import pytest

from pathfinder.study_file import read_study_file

from .helpers import run_cli, snapshot, the_one_line

QUICK = 'mixes = [1.0]\nfolds = 3\nnested = false\nstability = false\nsubsets = false\n'


@pytest.fixture()
def survey(tmp_path):
    rng = np.random.default_rng(8)
    frame = pd.DataFrame({f"c{j}": rng.standard_normal(60).round(4) for j in range(4)})
    frame["site"] = [f"s{i}" for i in range(60)]
    frame["cover"] = (frame.c0 - frame.c2 + rng.standard_normal(60)).round(4)
    path = tmp_path / "survey.csv"
    frame.to_csv(path, index=False)
    return path


def _study(tmp_path, body, name="study.toml"):
    path = tmp_path / name
    path.write_text('response = "cover"\nexclude = ["site"]\n' + body, encoding="utf-8")
    return path


@pytest.mark.parametrize("line, words", [
    ('nested = "no"', ["nested must be true or false", "'no'"]),
    ('predictors = "cab"', ["predictors must be a list of column names", "'cab'"]),
    ("folds = 4.7", ["folds must be a whole number", "4.7"]),
    ('folds = "five"', ["folds must be a whole number", "'five'"]),
    ("folds = 1", ["folds must be a whole number of at least 2", "got 1"]),
    ("seed = -3", ["seed must be a whole number of at least 0", "-3"]),
    ("mixes = [1.0, 1.5]", ["mixes must each lie between 0", "1.5"]),
    ('coords = ["x"]', ["coords must be a list of two column names"]),
    ("block_size = 0", ["block_size must be above 0"]),
    ('missing = "skip"', ["missing must be one of 'drop', 'refuse'", "'skip'"]),
    ("groups = 3", ["groups must be text", "got 3"]),
])
def test_a_value_of_the_wrong_type_or_range_is_one_line(survey, tmp_path, line, words):
    _study(tmp_path, f'data = "{survey.name}"\n{line}\n')
    before = snapshot(tmp_path)
    result = run_cli(["explore", "--config", "study.toml", "--out", "out"], cwd=tmp_path)
    assert result.returncode == 2, result.stderr
    message = the_one_line(result.stderr)
    assert "study.toml" in message and "Traceback" not in result.stderr
    for word in words:
        assert word in message, message
    assert snapshot(tmp_path) == before


def test_every_mistake_of_a_file_is_named_at_once(tmp_path):
    path = _study(tmp_path, 'nested = "no"\nfolds = 4.7\nseed = "nine"\n')
    with pytest.raises(Exception) as caught:
        read_study_file(path)
    message = str(caught.value)
    assert "\n" not in message
    assert "nested" in message and "folds" in message and "seed" in message


def test_good_values_keep_their_meaning(tmp_path):
    path = _study(tmp_path, 'folds = 4.0\npredictors = ["c0", "c1"]\nsquares = true\n'
                            'mixes = [1, 0.5]\nnested = false\n')
    settings = read_study_file(path)
    assert settings["folds"] == 4 and isinstance(settings["folds"], int)
    assert settings["predictors"] == ("c0", "c1")
    assert settings["squares"] is True and settings["nested"] is False
    assert settings["mixes"] == (1.0, 0.5)


def test_data_is_read_from_the_study_files_folder(survey, tmp_path):
    project = tmp_path / "project"
    project.mkdir()
    survey.rename(project / "survey.csv")
    _study(project, 'data = "survey.csv"\n' + QUICK)
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    result = run_cli(["explore", "--config", "../project/study.toml", "--out", "out", "--quiet"],
                     cwd=elsewhere)
    assert result.returncode == 0, result.stderr
    assert (elsewhere / "out" / "coefficients.csv").is_file()


def test_run_json_alone_reruns_the_run_with_its_figures(survey, tmp_path):
    first = run_cli(["explore", survey.name, "--response", "cover", "--exclude", "site",
                     "--mix", "1", "--folds", "3", "--no-nested", "--no-stability", "--no-subsets",
                     "--seed", "5", "--figures", "svg", "--out", "first", "--quiet"], cwd=tmp_path)
    assert first.returncode == 0, first.stderr
    again = run_cli(["explore", "--config", "first/run.json", "--out", "again", "--quiet"],
                    cwd=tmp_path)
    assert again.returncode == 0, again.stderr
    for name in ("coefficients.csv", "cv.csv", "folds.csv"):
        assert (tmp_path / "first" / name).read_bytes() == (tmp_path / "again" / name).read_bytes()
    assert sorted(p.name for p in (tmp_path / "again" / "figures").iterdir())
    record = json.loads((tmp_path / "again" / "run.json").read_text(encoding="utf-8"))
    assert record["options"]["seed"] == 5 and record["output"]["figures"] == "svg"


def test_run_json_refuses_a_table_that_changed_since(survey, tmp_path):
    first = run_cli(["explore", survey.name, "--response", "cover", "--exclude", "site",
                     "--mix", "1", "--folds", "3", "--no-nested", "--no-stability", "--no-subsets",
                     "--out", "first", "--quiet"], cwd=tmp_path)
    assert first.returncode == 0, first.stderr
    with open(survey, "a", encoding="utf-8") as handle:
        handle.write("0,0,0,0,s99,1\n")
    again = run_cli(["explore", "--config", "first/run.json", "--out", "again"], cwd=tmp_path)
    assert again.returncode == 2
    message = the_one_line(again.stderr)
    assert "survey.csv" in message and "changed" in message and "DATA" in message


def test_a_table_given_as_data_overrides_the_recorded_one(survey, tmp_path):
    first = run_cli(["explore", survey.name, "--response", "cover", "--exclude", "site",
                     "--mix", "1", "--folds", "3", "--no-nested", "--no-stability", "--no-subsets",
                     "--out", "first", "--quiet"], cwd=tmp_path)
    assert first.returncode == 0, first.stderr
    moved = tmp_path / "moved.csv"
    survey.rename(moved)
    again = run_cli(["explore", "moved.csv", "--config", "first/run.json", "--out", "again",
                     "--quiet"], cwd=tmp_path)
    assert again.returncode == 0, again.stderr
    assert ((tmp_path / "first" / "coefficients.csv").read_bytes()
            == (tmp_path / "again" / "coefficients.csv").read_bytes())
    gone = run_cli(["explore", "--config", "first/run.json", "--out", "third"], cwd=tmp_path)
    assert gone.returncode == 2 and "give the table as DATA" in the_one_line(gone.stderr)
