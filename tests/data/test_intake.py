"""Tests of reading a survey table and checking it (pathfinder.data.intake).

Every bad input must stop with one InputError line that names the file or
the column, and the input file must be left exactly as it was.
"""

import math
import os

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from pathfinder.data import intake
from pathfinder.data.intake import Survey, TableInfo, prepare_survey, read_table
from pathfinder.errors import InputError

# A small presence/absence survey written by hand: 14 sites.
SITES = """site,presence,temp,depth,substrate,hours
s01,1,11.2,3.1,sand,2.0
s02,0,9.8,4.0,mud,1.5
s03,1,12.5,2.2,sand,2.5
s04,0,8.1,5.3,rock,1.0
s05,1,13.0,1.9,sand,3.0
s06,0,7.4,6.1,mud,1.0
s07,1,10.9,2.8,rock,2.0
s08,0,9.1,4.4,mud,1.5
s09,1,12.2,2.5,sand,2.5
s10,0,8.8,5.0,rock,1.0
s11,1,11.7,3.3,mud,2.0
s12,0,9.5,4.8,sand,1.5
s13,1,10.4,3.0,rock,2.0
s14,0,8.6,5.6,mud,1.0
"""


def write(tmp_path, text, name="survey.csv"):
    """Write test data (text or bytes) into pytest's temporary folder."""
    path = tmp_path / name
    if isinstance(text, bytes):
        path.write_bytes(text)
    else:
        path.write_text(text, encoding="utf-8")
    return path


def snapshot(path):
    """The file's bytes and modification time, to show it was not touched."""
    return path.read_bytes(), os.stat(path).st_mtime_ns


def fails(call, *args, **kwargs) -> str:
    """Run a call that must raise InputError; return its one-line message."""
    with pytest.raises(InputError) as caught:
        call(*args, **kwargs)
    message = str(caught.value)
    assert "\n" not in message
    return message


def survey_from_file(path, **options):
    frame, _ = read_table(path)
    return prepare_survey(frame, **options)


def edit(text, row, column, value):
    """SITES with one cell replaced (row = 1-based data row, as in the file)."""
    lines = text.splitlines()
    header = lines[0].split(",")
    cells = lines[row].split(",")
    cells[header.index(column)] = value
    lines[row] = ",".join(cells)
    return "\n".join(lines) + "\n"


# ---------------------------------------------------------------------------
# read_table: bad files
# ---------------------------------------------------------------------------


def test_missing_file_names_the_file(tmp_path):
    message = fails(read_table, tmp_path / "nowhere.csv")
    assert "nowhere.csv" in message and "not found" in message


def test_folder_is_refused(tmp_path):
    folder = tmp_path / "surveys"
    folder.mkdir()
    message = fails(read_table, folder)
    assert "surveys" in message and "folder" in message


def test_empty_file(tmp_path):
    path = write(tmp_path, b"", "empty.csv")
    before = snapshot(path)
    message = fails(read_table, path)
    assert "empty.csv" in message and "empty" in message
    assert snapshot(path) == before


def test_blank_file(tmp_path):
    path = write(tmp_path, "\n\n  \n", "blank.csv")
    before = snapshot(path)
    assert "blank.csv" in fails(read_table, path)
    assert snapshot(path) == before


def test_header_only(tmp_path):
    path = write(tmp_path, "site,presence,temp\n", "header.csv")
    before = snapshot(path)
    message = fails(read_table, path)
    assert "header.csv" in message and "no data rows" in message
    assert snapshot(path) == before


def test_duplicate_column_names_are_named(tmp_path):
    path = write(tmp_path, "site,temp,depth,temp\na,1,2,3\n", "dup.csv")
    before = snapshot(path)
    message = fails(read_table, path)
    assert "dup.csv" in message and "'temp'" in message
    assert "'depth'" not in message
    assert snapshot(path) == before


def test_bytes_that_are_not_utf8(tmp_path):
    # "Mühle" written in Latin-1: 0xfc is not valid UTF-8 on its own.
    data = "site,place\ns1,Hof\ns2,Mühle\n".encode("latin-1")
    path = write(tmp_path, data, "latin.csv")
    before = snapshot(path)
    message = fails(read_table, path)
    offset = data.index(b"\xfc")
    assert "latin.csv" in message
    assert "UTF-8" in message
    assert "line 3" in message
    assert f"byte offset {offset}" in message and "0xfc" in message
    assert snapshot(path) == before


def test_ragged_rows_are_refused(tmp_path):
    path = write(tmp_path, "a,b\n1,2\n3,4,5\n6,7\n", "ragged.csv")
    before = snapshot(path)
    message = fails(read_table, path)
    assert "ragged.csv" in message and "line 3" in message
    assert snapshot(path) == before


def test_every_row_longer_than_header_is_refused(tmp_path):
    # pandas would otherwise drop the last field of every row, or use the first as an index.
    path = write(tmp_path, "a,b\n1,2,9\n3,4,5\n", "long.csv")
    message = fails(read_table, path)
    assert "long.csv" in message and "more fields than the header" in message


def test_broken_parquet(tmp_path):
    path = write(tmp_path, b"PAR1 this is not really parquet", "broken.parquet")
    before = snapshot(path)
    message = fails(read_table, path)
    assert "broken.parquet" in message and "Parquet" in message
    assert snapshot(path) == before


def test_unknown_requested_column_is_named(tmp_path):
    path = write(tmp_path, SITES)
    message = fails(read_table, path, columns=["temp", "dpeth"])
    assert "'dpeth'" in message and "did you mean 'depth'" in message


def test_decimal_same_as_delimiter_is_refused(tmp_path):
    path = write(tmp_path, SITES)
    assert "decimal" in fails(read_table, path, decimal=",", delimiter=",")


# ---------------------------------------------------------------------------
# read_table: good files
# ---------------------------------------------------------------------------


def test_comma_file_and_table_info(tmp_path):
    import hashlib

    path = write(tmp_path, SITES)
    before = snapshot(path)
    frame, info = read_table(path)
    assert isinstance(info, TableInfo)
    assert info.format == "csv" and info.delimiter == "," and info.decimal == "."
    assert (info.n_rows, info.n_columns) == (14, 6)
    assert info.sha256 == hashlib.sha256(path.read_bytes()).hexdigest()
    assert info.path == str(path)
    assert list(frame.columns) == ["site", "presence", "temp", "depth", "substrate", "hours"]
    assert frame["temp"].iloc[2] == 12.5
    assert snapshot(path) == before


def test_semicolon_file_with_decimal_commas(tmp_path):
    text = "site;temp;depth\ns1;11,25;3\ns2;9,5;4,75\ns3;-0,125;1\n"
    path = write(tmp_path, text)
    before = snapshot(path)
    frame, info = read_table(path, decimal=",")
    assert info.delimiter == ";" and info.decimal == ","
    assert frame["temp"].tolist() == [11.25, 9.5, -0.125]
    assert frame["depth"].tolist() == [3.0, 4.75, 1.0]
    assert snapshot(path) == before


def test_decimal_commas_detected_when_not_given(tmp_path):
    path = write(tmp_path, "site;temp\ns1;11,25\ns2;9\ns3;7,5\n")
    frame, info = read_table(path)
    assert info.decimal == ","
    assert frame["temp"].tolist() == [11.25, 9.0, 7.5]
    assert any("decimal comma" in note and "detected" in note for note in info.notes)


def test_byte_order_mark_is_not_part_of_the_first_name(tmp_path):
    path = write(tmp_path, b"\xef\xbb\xbf" + SITES.encode("utf-8"))
    frame, info = read_table(path)
    assert frame.columns[0] == "site"
    assert info.n_rows == 14


def test_tab_delimiter_detected(tmp_path):
    path = write(tmp_path, SITES.replace(",", "\t"), "survey.txt")
    frame, info = read_table(path)
    assert info.delimiter == "\t"
    assert frame.shape == (14, 6)


def test_pipe_delimiter_detected(tmp_path):
    path = write(tmp_path, SITES.replace(",", "|"))
    frame, info = read_table(path)
    assert info.delimiter == "|"
    assert frame["depth"].iloc[0] == 3.1


def test_quoted_text_with_commas_does_not_fool_detection(tmp_path):
    text = 'site;note;temp\ns1;"wet, muddy";11\ns2;"dry, sandy, warm";12\n'
    frame, info = read_table(write(tmp_path, text))
    assert info.delimiter == ";"
    assert frame["note"].tolist() == ["wet, muddy", "dry, sandy, warm"]


def test_csv_columns_limit(tmp_path):
    frame, info = read_table(write(tmp_path, SITES), columns=["temp", "presence"])
    assert list(frame.columns) == ["temp", "presence"]
    assert info.n_columns == 2


def test_trailing_delimiter_column_is_left_out_with_a_note(tmp_path):
    text = "a,b,\n1,2,\n3,4,\n"
    frame, info = read_table(write(tmp_path, text))
    assert list(frame.columns) == ["a", "b"]
    assert any("no name" in note for note in info.notes)


def test_parquet_round_trip(tmp_path):
    original = pd.DataFrame(
        {
            "temp": [11.2, 9.8, 12.5],
            "count": [3, 0, 7],
            "substrate": ["sand", "mud", "sand"],
        }
    )
    path = tmp_path / "survey.parquet"
    original.to_parquet(path)
    before = snapshot(path)
    frame, info = read_table(path)
    assert info.format == "parquet" and info.delimiter is None
    assert (info.n_rows, info.n_columns) == (3, 3)
    pd.testing.assert_frame_equal(frame, original, check_dtype=False)
    assert frame["count"].tolist() == [3, 0, 7]
    assert snapshot(path) == before


def test_parquet_reads_only_the_requested_columns(tmp_path, monkeypatch):
    original = pd.DataFrame({"a": [1.0, 2.0], "b": [3.0, 4.0], "c": ["x", "y"]})
    path = tmp_path / "survey.pq"
    original.to_parquet(path)
    asked = []
    real = pd.read_parquet

    def spy(where, columns=None, **kwargs):
        asked.append(columns)
        return real(where, columns=columns, **kwargs)

    monkeypatch.setattr(intake.pd, "read_parquet", spy)
    frame, info = read_table(path, columns=["c", "a"])
    assert asked == [["c", "a"]]  # the reader itself was told the columns
    assert list(frame.columns) == ["c", "a"]
    assert frame["a"].tolist() == [1.0, 2.0]
    assert info.n_columns == 2


def test_parquet_with_no_rows(tmp_path):
    path = tmp_path / "none.parquet"
    pd.DataFrame({"a": pd.Series([], dtype=float)}).to_parquet(path)
    assert "none.parquet" in fails(read_table, path)


@settings(suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(
    values=st.lists(
        st.tuples(
            st.floats(allow_nan=False, allow_infinity=False, width=64),
            st.floats(min_value=-1e6, max_value=1e6, allow_nan=False),
        ),
        min_size=1,
        max_size=20,
    ),
    style=st.sampled_from([(",", "."), (";", ","), ("\t", "."), ("|", ","), (";", ".")]),
)
def test_numbers_survive_writing_and_reading_in_any_style(tmp_path, values, style):
    delimiter, decimal = style
    original = pd.DataFrame(values, columns=["first", "second"])
    path = tmp_path / "numbers.csv"
    original.to_csv(path, sep=delimiter, decimal=decimal, index=False)
    frame, info = read_table(path, decimal=decimal)
    assert info.delimiter == delimiter
    np.testing.assert_array_equal(frame.to_numpy(dtype=float), original.to_numpy())


# ---------------------------------------------------------------------------
# prepare_survey: bad input, each from a file that must stay unchanged
# ---------------------------------------------------------------------------


def test_text_in_a_numeric_column(tmp_path):
    text = edit(edit(SITES, 3, "depth", "deep"), 7, "depth", "n.d.")
    path = write(tmp_path, text)
    before = snapshot(path)
    message = fails(survey_from_file, path, response="presence", exclude=["site"])
    assert "'depth'" in message
    # positions 2 and 6 are data rows 3 and 7, counted from 1 below the header
    assert "data rows 3, 7" in message and "counted from 1 below the header" in message
    assert "'deep'" in message and "'n.d.'" in message
    assert snapshot(path) == before


def test_decimal_comma_hint_for_a_column_read_as_text(tmp_path):
    frame = pd.DataFrame({"y": [0, 1] * 6, "temp": ["11,5", "9,25"] * 6})
    message = fails(prepare_survey, frame, response="y")
    assert "'temp'" in message and "decimal=','" in message


def test_infinite_values(tmp_path):
    path = write(tmp_path, edit(SITES, 5, "temp", "inf"))
    before = snapshot(path)
    message = fails(survey_from_file, path, response="presence", exclude=["site"])
    assert "'temp'" in message and "infinite" in message and "data row 5 " in message
    assert snapshot(path) == before


def test_missing_response_values_are_dropped_and_counted(tmp_path):
    text = edit(edit(SITES, 2, "presence", ""), 9, "presence", "NA")
    text = edit(text, 4, "depth", "")
    path = write(tmp_path, text)
    before = snapshot(path)
    survey = survey_from_file(path, response="presence", exclude=["site"])
    assert survey.dropped_missing == {"presence": 2, "depth": 1}
    assert survey.n_read == 14 and len(survey.response) == 11
    np.testing.assert_array_equal(survey.rows, [0, 2, 4, 5, 6, 7, 9, 10, 11, 12, 13])
    assert len(survey.frame) == 11
    assert any("3 of 14 rows" in w and "presence 2" in w for w in survey.warnings)
    assert snapshot(path) == before


def test_three_response_levels_for_binomial(tmp_path):
    text = SITES.replace(",1,", ",present,").replace(",0,", ",absent,")
    text = edit(text, 4, "presence", "unsure")
    path = write(tmp_path, text)
    before = snapshot(path)
    message = fails(
        survey_from_file, path, response="presence", family="binomial", exclude=["site"]
    )
    assert "'presence'" in message and "3 different labels" in message and "'unsure'" in message
    assert snapshot(path) == before


def test_no_presences(tmp_path):
    path = write(tmp_path, SITES.replace(",1,", ",0,"))
    before = snapshot(path)
    message = fails(
        survey_from_file, path, response="presence", family="binomial", exclude=["site"]
    )
    assert "'presence'" in message and "no presences" in message
    assert snapshot(path) == before


def test_no_absences_among_labels():
    frame = pd.DataFrame({"seen": ["yes"] * 12, "temp": np.arange(12.0)})
    message = fails(prepare_survey, frame, response="seen")
    assert "'seen'" in message and "no absences" in message


def test_negative_counts_for_poisson(tmp_path):
    path = write(tmp_path, edit(SITES, 6, "presence", "-2"))
    before = snapshot(path)
    message = fails(
        survey_from_file, path, response="presence", family="poisson", exclude=["site"]
    )
    assert "'presence'" in message and "negative" in message and "data row 6 " in message
    assert snapshot(path) == before


def test_fractional_counts_for_poisson(tmp_path):
    path = write(tmp_path, edit(SITES, 2, "presence", "2.5"))
    before = snapshot(path)
    message = fails(
        survey_from_file, path, response="presence", family="poisson", exclude=["site"]
    )
    assert "'presence'" in message and "2.5" in message and "data row 2 " in message
    assert snapshot(path) == before


def test_response_with_no_variation(tmp_path):
    path = write(tmp_path, SITES.replace(",1,", ",4,").replace(",0,", ",4,"))
    before = snapshot(path)
    message = fails(survey_from_file, path, response="presence", exclude=["site"])
    assert "'presence'" in message and "every usable row" in message
    assert snapshot(path) == before


def test_unknown_column_suggests_a_close_name(tmp_path):
    path = write(tmp_path, SITES)
    before = snapshot(path)
    message = fails(survey_from_file, path, response="presense", exclude=["site"])
    assert "'presense'" in message and "did you mean 'presence'" in message
    message = fails(survey_from_file, path, response="presence", predictors=["temp", "dept"])
    assert "'dept'" in message and "'depth'" in message
    assert snapshot(path) == before


def test_fewer_than_ten_usable_rows(tmp_path):
    text = SITES
    for row in (1, 2, 3):
        text = edit(text, row, "temp", "")
    for row in (6, 9):
        text = edit(text, row, "presence", "")
    path = write(tmp_path, text)
    before = snapshot(path)
    message = fails(survey_from_file, path, response="presence", exclude=["site"])
    assert "only 9 of 14 rows" in message
    assert "'temp' in 3" in message and "'presence' in 2" in message
    assert snapshot(path) == before


def test_zero_effort(tmp_path):
    path = write(tmp_path, edit(SITES, 10, "hours", "0"))
    before = snapshot(path)
    message = fails(
        survey_from_file, path, response="presence", effort="hours", exclude=["site"]
    )
    assert "'hours'" in message and "positive" in message and "data row 10 " in message
    assert snapshot(path) == before


def test_missing_refused(tmp_path):
    text = edit(edit(SITES, 2, "temp", ""), 5, "substrate", "")
    path = write(tmp_path, text)
    before = snapshot(path)
    message = fails(
        survey_from_file, path, response="presence", exclude=["site"], missing="refuse"
    )
    assert "'temp'" in message and "data row 2" in message
    assert "'substrate'" in message and "data row 5" in message
    assert snapshot(path) == before


def test_too_many_text_levels_suggests_exclude(tmp_path):
    path = write(tmp_path, SITES)
    message = fails(survey_from_file, path, response="presence", max_levels=5)
    assert "'site'" in message and "exclude" in message


def test_effort_and_offset_together_are_refused():
    frame = pd.DataFrame({"y": [0, 1] * 6, "x": np.arange(12.0), "e": 1.0, "o": 0.0})
    message = fails(prepare_survey, frame, response="y", effort="e", offset="o")
    assert "'e'" in message and "'o'" in message


def test_negative_weights():
    frame = pd.DataFrame({"y": [0, 1] * 6, "x": np.arange(12.0), "w": [1.0] * 11 + [-1.0]})
    message = fails(prepare_survey, frame, response="y", weights="w")
    assert "'w'" in message and "data row 12 " in message


def test_text_response_for_gaussian():
    frame = pd.DataFrame({"y": ["a", "b"] * 6, "x": np.arange(12.0)})
    message = fails(prepare_survey, frame, response="y", family="gaussian")
    assert "'y'" in message and "numbers" in message


def test_other_values_for_binomial():
    frame = pd.DataFrame({"y": [0, 1, 2] * 4, "x": np.arange(12.0)})
    message = fails(prepare_survey, frame, response="y", family="binomial")
    assert "'y'" in message and "data rows 3, 6, 9, 12 " in message


def test_predictor_that_is_also_the_response():
    frame = pd.DataFrame({"y": [0, 1] * 6, "x": np.arange(12.0)})
    assert "'y'" in fails(prepare_survey, frame, response="y", predictors=["x", "y"])


# ---------------------------------------------------------------------------
# prepare_survey: what it builds
# ---------------------------------------------------------------------------


def test_survey_from_the_sites_table(tmp_path):
    survey = survey_from_file(
        write(tmp_path, SITES), response="presence", exclude=["site"], effort="hours"
    )
    assert isinstance(survey, Survey)
    assert survey.family == "binomial"
    assert survey.predictors == ("temp", "depth", "substrate")
    assert survey.categorical == ("substrate",)
    assert survey.frame["temp"].dtype == np.float64
    assert survey.frame["substrate"].tolist()[:3] == ["sand", "mud", "sand"]
    np.testing.assert_array_equal(survey.response, [1, 0] * 7)
    assert survey.response.dtype == np.float64
    assert survey.offset_rule == {"kind": "effort", "column": "hours", "transform": "log"}
    hours = np.array([2.0, 1.5, 2.5, 1.0, 3.0, 1.0, 2.0, 1.5, 2.5, 1.0, 2.0, 1.5, 2.0, 1.0])
    np.testing.assert_allclose(survey.offset, np.log(hours))
    assert any("log(hours)" in note for note in survey.notes)
    assert survey.dropped_missing == {} and survey.warnings == ()


def test_offset_column_used_as_given():
    frame = pd.DataFrame(
        {"y": np.arange(12) % 4, "x": np.arange(12.0), "o": np.linspace(-1, 1, 12)}
    )
    survey = prepare_survey(frame, response="y", offset="o")
    np.testing.assert_array_equal(survey.offset, frame["o"].to_numpy())
    assert survey.offset_rule == {"kind": "offset", "column": "o"}
    assert survey.predictors == ("x",)


def test_auto_family_choices():
    x = np.arange(12.0)
    cases = [
        ([0, 1] * 6, "binomial"),
        ([True, False] * 6, "binomial"),
        (["absent", "present"] * 6, "binomial"),
        ([0, 1, 2, 5, 0, 3, 1, 0, 7, 2, 1, 0], "poisson"),
        ([0.5, 1.2, 3.3, 2.0] * 3, "gaussian"),
        ([-1, 0, 2, 3] * 3, "gaussian"),
        ([1, 2] * 6, "gaussian"),
    ]
    for y, expected in cases:
        survey = prepare_survey(pd.DataFrame({"y": y, "x": x}), response="y")
        assert survey.family == expected, (y, survey.family_reason)
        assert survey.family_reason.startswith(expected + ":")
        assert survey.notes[0] == survey.family_reason


def test_explicit_family_is_kept_and_checked():
    frame = pd.DataFrame({"y": [0, 1] * 6, "x": np.arange(12.0)})
    survey = prepare_survey(frame, response="y", family="poisson")
    assert survey.family == "poisson" and "chosen by you" in survey.family_reason


def test_two_level_label_mapping():
    x = np.arange(12.0)
    survey = prepare_survey(pd.DataFrame({"y": ["present", "absent"] * 6, "x": x}), response="y")
    assert survey.response_labels == ("absent", "present")
    np.testing.assert_array_equal(survey.response, [1, 0] * 6)
    assert any("'present' is coded 1" in note for note in survey.notes)

    # "no" reads as absence even though it sorts after "maybe"
    survey = prepare_survey(pd.DataFrame({"y": ["no", "maybe"] * 6, "x": x}), response="y")
    assert survey.response_labels == ("no", "maybe")

    # labels with no meaning: alphabetical, and the note says how to choose otherwise
    survey = prepare_survey(pd.DataFrame({"y": ["beta", "alpha"] * 6, "x": x}), response="y")
    assert survey.response_labels == ("alpha", "beta")
    np.testing.assert_array_equal(survey.response, [1, 0] * 6)
    assert any("alphabetical" in note for note in survey.notes)


def test_constant_and_duplicate_predictors_are_dropped_with_warnings():
    rng = np.random.default_rng(7)
    frame = pd.DataFrame(
        {
            "y": rng.normal(size=15),
            "temp": rng.normal(size=15),
            "same": 4.0,
            "temp_copy": None,
            "habitat": ["wood"] * 15,
            "rain": rng.normal(size=15),
        }
    )
    frame["temp_copy"] = frame["temp"]
    survey = prepare_survey(frame, response="y")
    assert survey.predictors == ("temp", "rain")
    dropped = dict(survey.dropped_predictors)
    assert set(dropped) == {"same", "temp_copy", "habitat"}
    assert dropped["same"].startswith("constant")
    assert "'temp'" in dropped["temp_copy"]
    assert sum("dropped" in w for w in survey.warnings) == 3
    assert list(survey.frame.columns) == ["temp", "rain"]


def test_predictor_constant_only_after_dropping_rows():
    frame = pd.DataFrame(
        {"y": np.arange(12) % 3, "x": np.arange(12.0), "z": [1.0] * 11 + [2.0]}
    )
    frame.loc[11, "x"] = np.nan
    survey = prepare_survey(frame, response="y")
    assert survey.predictors == ("x",)
    assert dict(survey.dropped_predictors)["z"].startswith("constant")


def test_text_numbers_read_as_numbers():
    frame = pd.DataFrame({"y": [0, 1] * 6, "x": [" 1.5", "2", "3e1", "-4"] * 3})
    survey = prepare_survey(frame, response="y")
    assert survey.categorical == ()
    np.testing.assert_array_equal(survey.frame["x"], [1.5, 2.0, 30.0, -4.0] * 3)


def test_numeric_codes_forced_categorical():
    frame = pd.DataFrame({"y": [0, 1] * 6, "habitat": [1, 2, 3] * 4, "x": np.arange(12.0)})
    survey = prepare_survey(frame, response="y", categorical=["habitat"])
    assert survey.categorical == ("habitat",)
    assert sorted(set(survey.frame["habitat"])) == ["1", "2", "3"]


def test_predictors_in_table_order_and_exclude():
    a = np.arange(12.0)
    frame = pd.DataFrame({"y": [0, 1] * 6, "a": a, "b": a**2, "c": 1.0 / (1 + a)})
    survey = prepare_survey(frame, response="y", predictors=["c", "a", "b"], exclude=["b"])
    assert survey.predictors == ("a", "c")


def test_coords_and_groups_kept():
    rng = np.random.default_rng(3)
    frame = pd.DataFrame(
        {
            "y": rng.normal(size=12),
            "x": rng.normal(size=12),
            "east": np.arange(12.0),
            "north": np.arange(12.0)[::-1],
            "river": ["upper", "lower", "delta"] * 4,
        }
    )
    frame.loc[4, "river"] = None
    survey = prepare_survey(frame, response="y", coords=("east", "north"), groups="river")
    assert survey.predictors == ("x",)
    assert survey.coord_names == ("east", "north")
    assert survey.coords.shape == (11, 2)
    np.testing.assert_array_equal(survey.coords[:, 0], np.delete(np.arange(12.0), 4))
    assert survey.group_name == "river"
    assert list(survey.groups[:5]) == ["upper", "lower", "delta", "upper", "delta"]
    assert survey.dropped_missing == {"river": 1}


def test_weights_kept_for_usable_rows():
    frame = pd.DataFrame({"y": [0, 1] * 6, "x": np.arange(12.0), "w": np.arange(1.0, 13.0)})
    survey = prepare_survey(frame, response="y", weights="w")
    np.testing.assert_array_equal(survey.weights, np.arange(1.0, 13.0))


def test_true_false_text_from_a_file_with_gaps(tmp_path):
    text = SITES.replace(",1,", ",TRUE,").replace(",0,", ",FALSE,")
    text = edit(text, 12, "presence", "")
    survey = survey_from_file(write(tmp_path, text), response="presence", exclude=["site"])
    assert survey.family == "binomial"
    assert survey.dropped_missing == {"presence": 1}
    np.testing.assert_array_equal(survey.response, [1, 0] * 5 + [1, 1, 0])


def test_describe_rows_counts_data_rows_from_1_below_the_header_as_the_tables_do():
    # folds.csv and sites.csv number their `row` column the same way (DEVELOPERS.md)
    assert intake.describe_rows([0]) == "data row 1 (counted from 1 below the header)"
    assert intake.describe_rows(range(8), limit=3).startswith("data rows 1, 2, 3 and 5 more")


@settings(deadline=None)
@given(
    counts=st.lists(st.integers(min_value=0, max_value=50), min_size=10, max_size=40),
    gaps=st.sets(st.integers(min_value=0, max_value=39), max_size=6),
)
def test_dropped_rows_are_counted_and_the_rest_kept_in_order(counts, gaps):
    n = len(counts)
    gaps = {g for g in gaps if g < n}
    x = np.arange(n, dtype=float)
    x[list(gaps)] = np.nan
    frame = pd.DataFrame({"y": counts, "x": x})
    if n - len(gaps) < 10 or len(set(np.delete(counts, list(gaps)))) < 2:
        with pytest.raises(InputError):
            prepare_survey(frame, response="y", family="poisson")
        return
    survey = prepare_survey(frame, response="y", family="poisson")
    assert survey.dropped_missing == ({"x": len(gaps)} if gaps else {})
    assert sorted(set(survey.rows) | gaps) == list(range(n))
    np.testing.assert_array_equal(survey.response, np.asarray(counts, float)[survey.rows])
    np.testing.assert_array_equal(survey.frame["x"], survey.rows.astype(float))
    assert not any(math.isnan(v) for v in survey.frame["x"])


def test_parquet_saved_index_comes_back_as_a_column(tmp_path):
    original = pd.DataFrame({"temp": [11.2, 9.8]}, index=pd.Index(["s01", "s02"], name="site"))
    path = tmp_path / "indexed.parquet"
    original.to_parquet(path)
    frame, info = read_table(path)
    assert list(frame.columns) == ["site", "temp"]
    assert frame["site"].tolist() == ["s01", "s02"]
    assert info.n_columns == 2


# ---------------------------------------------------------------------------
# No-data codes, suspected codes and numbers too large to compute with
# ---------------------------------------------------------------------------


def _elevations(code_rows=(2, 9, 15, 21), code="-9999"):
    rng = np.random.default_rng(4)
    rows = ["site,elevation,slope,present"]
    for i in range(30):
        elevation = code if i in code_rows else f"{rng.uniform(120, 1480):.1f}"
        rows.append(f"s{i},{elevation},{rng.uniform(0, 30):.1f},{i % 2}")
    return "\n".join(rows) + "\n"


def test_no_data_codes_are_read_as_missing_and_counted(tmp_path):
    path = write(tmp_path, _elevations())
    frame, info = read_table(path, na_values=["-9999"])
    assert frame["elevation"].isna().sum() == 4 and frame["elevation"].min() > 100
    assert any("-9999" in note and "4 cells" in note and "elevation 4" in note for note in info.notes)
    survey = prepare_survey(frame, response="present", exclude=["site"])
    assert survey.n == 26 and survey.dropped_missing == {"elevation": 4}


def test_text_codes_and_codes_written_as_decimals(tmp_path):
    lines = _elevations(code="n.d.").splitlines()
    site, _, slope, present = lines[5].split(",")           # data row 5: a code written -9999.0
    lines[5] = ",".join([site, "-9999.0", slope, present])
    frame, info = read_table(write(tmp_path, "\n".join(lines) + "\n"), na_values=["n.d.", -9999])
    assert frame["elevation"].isna().sum() == 5
    survey = prepare_survey(frame, response="present", exclude=["site"])
    assert survey.frame["elevation"].min() > 100 and survey.dropped_missing == {"elevation": 5}


def test_a_code_found_nowhere_is_said(tmp_path):
    _, info = read_table(write(tmp_path, _elevations(code_rows=())), na_values=["-9999"])
    assert any("no cell holds one" in note for note in info.notes)


def test_a_repeated_far_extreme_is_flagged_as_a_suspected_code(tmp_path):
    survey = prepare_survey(read_table(write(tmp_path, _elevations()))[0], response="present",
                            exclude=["site"])
    flagged = [w for w in survey.warnings if "'elevation'" in w]
    assert len(flagged) == 1
    assert "-9999 in 4 rows" in flagged[0] and "na_values=['-9999']" in flagged[0]
    assert survey.n == 30          # only said: the values are still used


def test_ordinary_extremes_are_not_flagged():
    rng = np.random.default_rng(2)
    counts = np.concatenate([np.zeros(20), rng.integers(1, 40, 40)])   # many zeros, then a spread
    frame = pd.DataFrame({"y": rng.normal(size=60), "count": counts,
                          "binary": np.tile([0, 1], 30), "x": rng.normal(size=60)})
    survey = prepare_survey(frame, response="y")
    assert not any("no-data" in w or "missing data" in w for w in survey.warnings)


def test_a_number_too_large_to_compute_with_names_the_column():
    frame = pd.DataFrame({"y": np.arange(20.0), "x": np.r_[np.arange(19.0), 1e300]})
    message = fails(prepare_survey, frame, response="y")
    assert "'x'" in message and "too large" in message and "data row 20 " in message


def test_a_fold_column_is_a_role_whose_gaps_are_counted_or_refused_by_data_row():
    frame = pd.DataFrame({"y": np.arange(20.0), "x": np.sin(np.arange(20.0)),
                          "fold": [1, 2, 3, 4] * 5})
    frame["fold"] = frame["fold"].astype(object)
    frame.loc[3, "fold"] = None
    survey = prepare_survey(frame, response="y", fold_column="fold")
    assert survey.predictors == ("x",)
    assert survey.dropped_missing == {"fold": 1} and len(survey.fold_labels) == 19
    assert survey.fold_labels.tolist() == [f for i, f in enumerate([1, 2, 3, 4] * 5) if i != 3]
    message = fails(prepare_survey, frame, response="y", fold_column="fold", missing="refuse")
    assert "'fold' data row 4" in message
