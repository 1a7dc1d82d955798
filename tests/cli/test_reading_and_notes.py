"""What a run says about how it read the table, and the notes it prints.

Every table here is invented numbers (seeded), written the way spreadsheets
export them; the checks are about reading and telling, not about a fit.
"""

import json

import numpy as np
import pandas as pd
import pytest

from .helpers import run_cli, the_one_line

FAST = ["--mix", "1", "--folds", "3", "--no-nested", "--no-subsets"]


def _survey(n=60, seed=6, code_rows=()):
    rng = np.random.default_rng(seed)
    elevation = rng.uniform(1200, 2400, n)
    ph = rng.uniform(4.5, 7.5, n)
    frame = pd.DataFrame({"site": [f"s{i}" for i in range(n)], "elevation": elevation, "ph": ph,
                          "present": (rng.uniform(size=n)
                                      < 1 / (1 + np.exp(-(ph - 6) - (elevation - 1800) / 200))).astype(int)})
    frame["elevation_text"] = [("-9999" if i in code_rows else f"{v:.1f}") for i, v in enumerate(elevation)]
    return frame


def _semicolon_grouped(folder):
    """Decimal commas, and points grouping the thousands of the elevation (1.234,5)."""
    frame = _survey()
    lines = ["site;elevation;ph;present"]
    for row in frame.itertuples():
        whole, fraction = f"{row.elevation:.1f}".split(".")
        lines.append(f"{row.site};{int(whole):,}".replace(",", ".") + f",{fraction};"
                     f"{row.ph:.2f}".replace(".", ",") + f";{row.present}")
    path = folder / "grouped.csv"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path, frame


def test_explore_tells_how_numbers_were_read_in_terminal_record_and_report(tmp_path):
    path, frame = _semicolon_grouped(tmp_path)
    result = run_cli(["explore", path.name, "--response", "present", "--exclude", "site", *FAST,
                      "--out", "results"], cwd=tmp_path)
    assert result.returncode == 0, result.stderr
    record = json.loads((tmp_path / "results" / "run.json").read_text(encoding="utf-8"))
    reading = [n for n in record["notes"] if n.startswith("numbers:") or "digit grouping" in n]
    assert len(reading) == 2 and "decimal comma" in reading[0] + reading[1]
    for note in reading:
        assert f"note: {note}" in " ".join(result.stdout.split())
    report = (tmp_path / "results" / "report.html").read_text(encoding="utf-8")
    assert "decimal comma" in report
    # and the numbers are the ones written: thousands, not decimals
    coefficients = pd.read_csv(tmp_path / "results" / "chosen.csv")
    assert len(coefficients) >= 1
    sites = pd.read_csv(tmp_path / "results" / "sites.csv")
    assert len(sites) == len(frame)


def test_every_note_of_a_run_reaches_the_terminal(tmp_path):
    frame = _survey()
    frame.drop(columns="elevation_text").to_csv(tmp_path / "survey.csv", index=False)
    result = run_cli(["explore", "survey.csv", "--response", "present", "--exclude", "site", *FAST,
                      "--out", "results"], cwd=tmp_path)
    assert result.returncode == 0, result.stderr
    record = json.loads((tmp_path / "results" / "run.json").read_text(encoding="utf-8"))
    shown = " ".join(result.stdout.split())
    notes = [n for n in record["notes"] if n != record["response"]["family_reason"]]
    assert any("stable" in n for n in notes)          # stability selection's error control
    for note in notes:
        assert " ".join(note.split()) in shown, note


def test_json_summary_carries_the_notes(tmp_path):
    frame = _survey()
    frame.drop(columns="elevation_text").to_csv(tmp_path / "survey.csv", index=False)
    result = run_cli(["explore", "survey.csv", "--response", "present", "--exclude", "site", *FAST,
                      "--out", "results", "--json"], cwd=tmp_path)
    assert result.returncode == 0, result.stderr
    summary = json.loads(result.stdout)
    assert any(n.startswith("numbers:") for n in summary["notes"])


def _with_codes(folder):
    frame = _survey(code_rows=(3, 11, 19, 27))
    frame = frame.drop(columns="elevation").rename(columns={"elevation_text": "elevation"})
    frame.to_csv(folder / "coded.csv", index=False)
    return frame


def test_screen_flags_a_no_data_code_and_reads_it_as_missing_when_told(tmp_path):
    _with_codes(tmp_path)
    flagged = run_cli(["screen", "coded.csv", "--response", "present", "--exclude", "site"], cwd=tmp_path)
    assert flagged.returncode == 0, flagged.stderr
    text = " ".join(flagged.stdout.split())
    assert "elevation" in text and "-9999 in 4 rows" in text and "--na-values -9999" in text
    told = run_cli(["screen", "coded.csv", "--response", "present", "--exclude", "site",
                    "--na-values", "-9999", "--json"], cwd=tmp_path)
    assert told.returncode == 0, told.stderr
    summary = json.loads(told.stdout)
    assert not any("-9999 in" in w for w in summary["warnings"])
    assert any("4 of 60 rows left out for missing values" in w for w in summary["warnings"])
    assert any("no-data code(s) -9999 read as missing in 4 cells" in n for n in summary["notes"])


def test_explore_flags_a_no_data_code_in_its_warnings(tmp_path):
    _with_codes(tmp_path)
    result = run_cli(["explore", "coded.csv", "--response", "present", "--exclude", "site", *FAST,
                      "--out", "results", "--quiet"], cwd=tmp_path)
    assert result.returncode == 0, result.stderr
    record = json.loads((tmp_path / "results" / "run.json").read_text(encoding="utf-8"))
    assert any("'elevation'" in w and "-9999" in w for w in record["warnings"])


@pytest.fixture(scope="module")
def model(tmp_path_factory):
    folder = tmp_path_factory.mktemp("model")
    _survey().drop(columns="elevation_text").to_csv(folder / "survey.csv", index=False)
    done = run_cli(["explore", "survey.csv", "--response", "present", "--exclude", "site",
                    "--predictors", "elevation,ph", *FAST, "--no-stability", "--out", "results",
                    "--quiet"], cwd=folder)
    assert done.returncode == 0, done.stderr
    return folder


def test_predict_refuses_to_overwrite_a_file_unless_told(model):
    _with_codes(model)
    out = model / "predictions.csv"
    out.write_text("my earlier predictions\n", encoding="utf-8")
    refused = run_cli(["predict", "results/model.json", "coded.csv", "--out", "predictions.csv"],
                      cwd=model)
    assert refused.returncode == 2
    line = the_one_line(refused.stderr)
    assert "predictions.csv" in line and "--overwrite" in line
    assert out.read_text(encoding="utf-8") == "my earlier predictions\n"
    done = run_cli(["predict", "results/model.json", "coded.csv", "--out", "predictions.csv",
                    "--overwrite", "--na-values", "-9999"], cwd=model)
    assert done.returncode == 0, done.stderr
    table = pd.read_csv(out, keep_default_na=False)
    coded = table.index.isin([3, 11, 19, 27])               # the rows written as -9999
    assert (table.loc[coded, "elevation"] == "").all()       # read (and written back) as missing
    assert (table.loc[coded, "prediction"] == "").all()
    assert (table.loc[coded, "reason"] == "missing value in elevation").all()
    assert "read as missing in 4 cells" in done.stderr and "56 of 60 sites predicted" in done.stderr
