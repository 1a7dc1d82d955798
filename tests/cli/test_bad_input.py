"""Bad input at the command line, as a user meets it.

Every case runs ``pathfinder`` as a real process and checks the contract:
exit status 2, exactly one line on standard error that starts with
"pathfinder:", names the file, column or row concerned and holds no
traceback; nothing on standard output; the input file byte for byte as it
was; and no output folder, finished or half-written, left behind.

The tables are plainly invented numbers (about 30 rows) built to reach each
error path.
"""

import json

import pytest

from .helpers import (
    csv_text,
    data_row,
    hidden_leftovers,
    invented_table,
    replace_column,
    run_cli,
    set_cells,
    snapshot,
    the_one_line,
)

OUT = "results"
DATA = "survey.csv"


def _table(header_rows=None):
    header, rows = header_rows or invented_table()
    return csv_text(header, rows).encode("utf-8")


def _response(values, name):
    """The invented table with the response column replaced by ``values`` under ``name``."""
    header, rows = invented_table()
    return replace_column(header, rows, "cover", values, new_name=name)


def _cell(name, index, value):
    return set_cells(*invented_table(), name, [index], value)


def _blank_response(n_blank):
    return set_cells(*invented_table(), "cover", range(n_blank), "")


def _not_utf8():
    header, rows = set_cells(*invented_table(), "site", [3], "Mühlbach")
    return csv_text(header, rows).encode("latin-1")  # ü is byte 0xfc: not UTF-8


def _duplicate_names():
    header, rows = invented_table()
    header = ["site", "temperature", "temperature", "soil_ph", "cover"]
    return csv_text(header, rows).encode("utf-8")


EXPLORE = ["explore", DATA, "--out", OUT]
COVER = ["--response", "cover", "--exclude", "site"]

# (id, files to write: name -> bytes, or None for a folder; arguments; words the line must hold)
CASES = [
    ("empty file", {DATA: b""}, EXPLORE + COVER, [DATA]),
    ("header only", {DATA: b"site,temperature,rainfall,soil_ph,cover\n"}, EXPLORE + COVER, [DATA]),
    ("text in a numeric column", {DATA: _table(_cell("temperature", 4, "warm"))},
     EXPLORE + COVER, ["temperature", data_row(4), "warm"]),
    # 21 blank responses leave 9 usable rows, one short of the 10 a fit needs.
    ("missing responses leave fewer than 10 rows", {DATA: _table(_blank_response(21))},
     EXPLORE + COVER, ["cover"]),
    ("three response levels for binomial",
     {DATA: _table(_response([2 if i == 9 else i % 2 for i in range(30)], "found"))},
     EXPLORE + ["--response", "found", "--exclude", "site", "--family", "binomial"],
     ["found", data_row(9)]),
    ("no presences for binomial", {DATA: _table(_response([0] * 30, "found"))},
     EXPLORE + ["--response", "found", "--exclude", "site", "--family", "binomial"], ["found"]),
    ("negative count for poisson",
     {DATA: _table(_response([-2 if i == 7 else i % 5 for i in range(30)], "clumps"))},
     EXPLORE + ["--response", "clumps", "--exclude", "site", "--family", "poisson"],
     ["clumps", data_row(7)]),
    ("infinite predictor", {DATA: _table(_cell("rainfall", 12, "inf"))},
     EXPLORE + COVER, ["rainfall", data_row(12)]),
    ("duplicate column names", {DATA: _duplicate_names()}, EXPLORE + COVER,
     [DATA, "temperature"]),
    ("not UTF-8", {DATA: _not_utf8()}, EXPLORE + COVER, [DATA, "UTF-8"]),
    ("a folder as the data", {"survey_folder": None},
     ["explore", "survey_folder", "--out", OUT] + COVER, ["survey_folder"]),
    ("missing file", {}, ["explore", "no_such_survey.csv", "--out", OUT] + COVER,
     ["no_such_survey.csv"]),
    ("unknown --response", {DATA: _table()},
     EXPLORE + ["--response", "abundance", "--exclude", "site"], ["abundance"]),
    ("unknown in --predictors", {DATA: _table()},
     EXPLORE + ["--response", "cover", "--predictors", "temperature,rain_mm"], ["rain_mm"]),
    ("unknown in --exclude", {DATA: _table()},
     EXPLORE + ["--response", "cover", "--exclude", "site,site_code"], ["site_code"]),
    ("unknown option", {DATA: _table()}, EXPLORE + COVER + ["--bogus"], ["--bogus"]),
    ("--response not given", {DATA: _table()}, EXPLORE + ["--exclude", "site"], ["--response"]),
    ("unknown family", {DATA: _table()}, EXPLORE + COVER + ["--family", "normal"], ["normal"]),
    ("--mix 1.5", {DATA: _table()}, EXPLORE + COVER + ["--mix", "1.5"], ["1.5"]),
    ("--mix not a number", {DATA: _table()}, EXPLORE + COVER + ["--mix", "lots"], ["lots"]),
]


@pytest.mark.parametrize("files, args, words", [c[1:] for c in CASES], ids=[c[0] for c in CASES])
def test_bad_input_gets_one_line_and_exit_2(tmp_path, files, args, words):
    for name, content in files.items():
        if content is None:
            (tmp_path / name).mkdir()
        else:
            (tmp_path / name).write_bytes(content)
    before = snapshot(tmp_path)

    result = run_cli(args, cwd=tmp_path)

    assert result.returncode == 2, result.stderr
    line = the_one_line(result.stderr)
    assert line.startswith("pathfinder:")
    assert "Traceback" not in result.stderr
    for word in words:
        assert word in line, f"the error line does not name {word!r}: {line}"
    assert result.stdout == ""
    # The input is untouched and nothing was written: no output, no hidden partial folder.
    assert snapshot(tmp_path) == before
    assert not (tmp_path / OUT).exists()
    assert hidden_leftovers(tmp_path) == []


def test_a_few_missing_responses_are_dropped_and_counted(tmp_path):
    blank = [3, 10, 20]
    header, rows = set_cells(*invented_table(), "cover", blank, "")
    data = tmp_path / DATA
    data.write_bytes(csv_text(header, rows).encode("utf-8"))
    original = data.read_bytes()

    result = run_cli(EXPLORE + COVER + ["--mix", "1", "--folds", "3", "--no-nested", "--quiet"],
                     cwd=tmp_path)

    assert result.returncode == 0, result.stderr
    assert data.read_bytes() == original
    record = json.loads((tmp_path / OUT / "run.json").read_text(encoding="utf-8"))
    assert record["rows"]["read"] == 30
    assert record["rows"]["used"] == 30 - len(blank)
    assert record["rows"]["dropped"] == len(blank)
    assert record["rows"]["dropped_for_missing_value_in"] == {"cover": len(blank)}


def test_no_command_is_a_usage_error_with_one_line(tmp_path):
    result = run_cli([], cwd=tmp_path)
    assert result.returncode == 2
    assert the_one_line(result.stderr).startswith("pathfinder:")
