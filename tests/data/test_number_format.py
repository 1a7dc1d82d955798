"""Decimal marks and digit grouping (pathfinder.data.number_format, through read_table).

A fact of common practice: digit grouping writes groups of exactly three
digits (1,234,567 or 1.234.567), and a group never starts a number with 0.
The tables are small invented files, written the ways spreadsheets export.
"""

import numpy as np
import pandas as pd
import pytest
from hypothesis import given
from hypothesis import strategies as st

from pathfinder.data.intake import read_table
from pathfinder.data.number_format import NumberStyle, column_marks, read_grouped
from pathfinder.errors import InputError


def _read(tmp_path, text, **options):
    path = tmp_path / "t.csv"
    path.write_text(text, encoding="utf-8")
    return read_table(path, **options)


def _refusal(tmp_path, text, **options):
    with pytest.raises(InputError) as caught:
        _read(tmp_path, text, **options)
    return caught.value


def _number_note(info):
    notes = [note for note in info.notes if note.startswith("numbers:")]
    assert len(notes) == 1, info.notes
    return notes[0]


@pytest.mark.parametrize("value, proves, both_ways", [
    ("12,5", {","}, None), ("0,545", {","}, None), ("1234,5", {","}, None),
    ("1,234,567", {"."}, None), ("1,234.5", {"."}, None), ("1.234,5", {","}, None),
    ("1.234.567", {","}, None), ("0.35", {"."}, None), ("2,545", set(), ","),
    ("2.452", set(), "."), ("-13,100", set(), ","), ("17", set(), None),
])
def test_one_value_proves_a_mark_or_reads_both_ways(value, proves, both_ways):
    marks = column_marks("x", pd.Series([value]))
    assert marks.numbers and set(marks.decimal) == proves and marks.both_ways == both_ways


def test_a_comma_in_a_comma_file_groups_digits_when_points_are_the_decimals(tmp_path):
    frame, info = _read(tmp_path, 'area,ph\n"2,545",6.52\n"13,100",7\n')
    assert frame["area"].tolist() == [2545.0, 13100.0]
    assert "decimal point" in _number_note(info) and "'ph'" in _number_note(info)
    assert any("digit grouping read in column(s) 'area'" in note for note in info.notes)


def test_a_comma_that_reads_both_ways_is_refused_with_both_readings(tmp_path):
    error = _refusal(tmp_path, 'area,n\n"2,545",1\n"13,100",2\n')
    assert "'area'" in error.message and "2.545" in error.message and "2545" in error.message
    assert "decimal=','" in error.message and "decimal='.'" in error.message
    assert "--decimal , for 2.545" in error.for_command_line()
    assert "--decimal . for 2545" in error.for_command_line()


def test_a_semicolon_file_of_comma_groups_is_refused_not_read_as_decimals(tmp_path):
    error = _refusal(tmp_path, "area;n\n2,452;1\n13,100;2\n")
    assert "2.452" in error.message and "2452" in error.message


def test_a_point_that_reads_both_ways_is_refused(tmp_path):
    error = _refusal(tmp_path, "area,n\n2.452,1\n13.100,2\n")
    assert "'area'" in error.message and "2.452" in error.message and "2452" in error.message


def test_the_decimal_mark_given_settles_both_readings(tmp_path):
    text = "area;n\n2,452;1\n13,100;2\n"
    as_decimals, info = _read(tmp_path, text, decimal=",")
    assert as_decimals["area"].tolist() == [2.452, 13.1]
    assert "as given" in _number_note(info)
    as_groups, _ = _read(tmp_path, text, decimal=".")
    assert as_groups["area"].tolist() == [2452.0, 13100.0]


def test_point_groups_in_a_decimal_comma_file(tmp_path):
    frame, info = _read(tmp_path, "area;ph\n2.452;6,5\n13.100;7,25\n1.234,5;7\n")
    assert frame["area"].tolist() == [2452.0, 13100.0, 1234.5]
    assert frame["ph"].tolist() == [6.5, 7.25, 7.0]
    assert "decimal comma" in _number_note(info)


def test_two_decimal_marks_in_one_file_are_refused(tmp_path):
    error = _refusal(tmp_path, "a;b\n2.5;1,5\n3.25;2,25\n")
    assert "mixes decimal marks" in error.message and "'a'" in error.message and "'b'" in error.message


def test_groups_of_other_sizes_are_not_numbers(tmp_path):
    # 1,23 is a decimal comma, never a group: in a point file the column stays text
    frame, _ = _read(tmp_path, 'a,b\n"1,23",0.5\n"4,56",1.5\n', decimal=".")
    assert frame["a"].tolist() == ["1,23", "4,56"]


def test_every_file_says_its_decimal_mark(tmp_path):
    _, plain = _read(tmp_path, "a,b\n1,2\n3,4\n")
    assert "no number in the file shows another" in _number_note(plain)
    _, detected = _read(tmp_path, "a;b\n1,5;2\n3;4\n")
    assert "decimal comma" in _number_note(detected) and "'a'" in _number_note(detected)


@given(st.lists(st.floats(min_value=-1e9, max_value=1e9, allow_nan=False).map(lambda v: round(v, 2)),
                min_size=1, max_size=20),
       st.sampled_from([(".", ","), (",", ".")]))
def test_grouped_numbers_read_back_as_written(values, style):
    decimal, grouping = style
    def written(v):
        text = f"{abs(v):,.2f}".replace(",", "\0").replace(".", decimal).replace("\0", grouping)
        return ("-" if v < 0 else "") + text
    texts = pd.Series([written(v) for v in values], dtype="str")
    read = read_grouped(texts, NumberStyle(decimal, grouping, "given"))
    assert read is not None
    np.testing.assert_allclose(read.to_numpy(), values, rtol=0, atol=1e-9)
