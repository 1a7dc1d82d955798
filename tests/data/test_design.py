"""Tests of the design matrix (pathfinder.data.design)."""

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp

from pathfinder.data.design import Design, Term, apply_design, build_design
from pathfinder.errors import InputError


def small_frame():
    """Eight sites written by hand: two numeric predictors and one factor."""
    return pd.DataFrame(
        {
            "temp": [11.0, 9.0, 12.0, 8.0, 13.0, 7.0, 10.0, 10.0],
            "rain": [100.0, 120.0, 90.0, 140.0, 80.0, 150.0, 110.0, 105.0],
            "substrate": ["sand", "mud", "sand", "rock", "sand", "mud", "rock", "sand"],
        }
    )


def test_names_kinds_and_groups():
    design = build_design(small_frame(), ["temp", "rain", "substrate"], ["substrate"])
    assert isinstance(design, Design)
    assert design.names == ["temp", "rain", "substrate=mud", "substrate=rock"]
    assert [term.kind for term in design.terms] == ["numeric", "numeric", "level", "level"]
    assert design.groups() == {"temp": [0], "rain": [1], "substrate": [2, 3]}
    assert design.terms[2].level == "mud" and design.terms[2].sources == ("substrate",)
    assert design.X.dtype == np.float64 and design.X.flags.f_contiguous
    assert design.X.shape == (8, 4)


def test_reference_level_is_the_most_frequent():
    design = build_design(small_frame(), ["substrate"], ["substrate"])
    assert design.reference_levels == {"substrate": "sand"}
    mud = small_frame()["substrate"].eq("mud").to_numpy(float)
    rock = small_frame()["substrate"].eq("rock").to_numpy(float)
    np.testing.assert_array_equal(design.X[:, 0], mud)
    np.testing.assert_array_equal(design.X[:, 1], rock)
    # rows at the reference level have no indicator set
    sand = small_frame()["substrate"].eq("sand").to_numpy()
    assert np.all(design.X[sand] == 0)


def test_reference_level_ties_go_to_alphabetical_order():
    frame = pd.DataFrame({"habitat": ["wood", "heath", "wood", "heath", "bog"]})
    design = build_design(frame, ["habitat"], ["habitat"])
    assert design.reference_levels == {"habitat": "heath"}
    assert design.names == ["habitat=bog", "habitat=wood"]


def test_numeric_columns_are_unchanged():
    frame = small_frame()
    design = build_design(frame, ["rain", "temp"])
    np.testing.assert_array_equal(design.X, frame[["rain", "temp"]].to_numpy())


def test_squares_are_centred_on_the_mean():
    frame = small_frame()
    design = build_design(frame, ["temp", "rain"], squares=["temp"])
    assert design.names == ["temp", "rain", "temp^2"]
    square = design.terms[2]
    assert square.kind == "square" and square.sources == ("temp",)
    assert square.centers == (pytest.approx(frame["temp"].mean()),)
    expected = (frame["temp"] - frame["temp"].mean()) ** 2
    np.testing.assert_allclose(design.X[:, 2], expected, rtol=0, atol=1e-12)


def test_weighted_centres():
    frame = small_frame()
    weights = np.array([1.0, 2.0, 0.0, 1.0, 3.0, 1.0, 1.0, 1.0])
    design = build_design(frame, ["temp", "rain"], squares=True, weights=weights)
    temp_mean = np.sum(weights * frame["temp"]) / weights.sum()
    rain_mean = np.sum(weights * frame["rain"]) / weights.sum()
    assert design.terms[2].centers[0] == pytest.approx(temp_mean)
    assert design.terms[3].centers[0] == pytest.approx(rain_mean)


def test_interactions_are_centred_products():
    frame = small_frame()
    design = build_design(frame, ["temp", "rain", "substrate"], ["substrate"], interactions=True)
    assert design.names[-1] == "temp:rain"
    term = design.terms[-1]
    assert term.kind == "interaction" and term.group == "temp:rain"
    assert term.sources == ("temp", "rain")
    ct, cr = frame["temp"].mean(), frame["rain"].mean()
    assert term.centers == (pytest.approx(ct), pytest.approx(cr))
    np.testing.assert_allclose(
        design.X[:, -1], (frame["temp"] - ct) * (frame["rain"] - cr), rtol=0, atol=1e-9
    )


def test_interaction_pairs_listed_and_repeats_ignored():
    frame = small_frame()
    frame["depth"] = np.linspace(1, 8, 8)
    design = build_design(
        frame, ["temp", "rain", "depth"], interactions=[("temp", "depth"), ("depth", "temp")]
    )
    assert design.names == ["temp", "rain", "depth", "temp:depth"]


def test_centring_removes_most_of_the_collinearity_with_the_square():
    # Common practice: a variable far from zero is almost collinear with its raw
    # square, and centring before squaring removes that.
    x = np.linspace(10.0, 20.0, 41)
    design = build_design(pd.DataFrame({"x": x}), ["x"], squares=True)
    raw = np.corrcoef(x, x**2)[0, 1]
    centred = np.corrcoef(design.X[:, 0], design.X[:, 1])[0, 1]
    assert raw > 0.99
    assert abs(centred) < 1e-8  # symmetric x: the centred square is uncorrelated with x


def test_apply_design_reproduces_the_training_matrix():
    frame = small_frame()
    design = build_design(
        frame, ["temp", "rain", "substrate"], ["substrate"], squares=True, interactions=True
    )
    again = apply_design(design.terms, design.reference_levels, frame)
    assert np.array_equal(again, design.X)


def test_apply_design_on_new_sites():
    frame = small_frame()
    design = build_design(frame, ["temp", "substrate"], ["substrate"], squares=["temp"])
    new = pd.DataFrame({"substrate": ["rock", "sand"], "temp": [10.0, 14.0], "extra": [1, 2]})
    X = apply_design(design.terms, design.reference_levels, new)
    c = frame["temp"].mean()
    expected = np.array([[10.0, 0.0, 1.0, (10.0 - c) ** 2], [14.0, 0.0, 0.0, (14.0 - c) ** 2]])
    np.testing.assert_allclose(X, expected, rtol=0, atol=1e-12)


def test_unknown_level_is_named():
    design = build_design(small_frame(), ["temp", "substrate"], ["substrate"])
    new = pd.DataFrame({"temp": [10.0, 11.0, 12.0], "substrate": ["mud", "gravel", "sand"]})
    with pytest.raises(InputError) as caught:
        apply_design(design.terms, design.reference_levels, new)
    message = str(caught.value)
    assert "'substrate'" in message and "'gravel'" in message and "data row 2 " in message


def test_unknown_level_allowed_gives_a_row_of_nan():
    design = build_design(small_frame(), ["temp", "substrate"], ["substrate"])
    new = pd.DataFrame({"temp": [10.0, 11.0, np.nan], "substrate": ["mud", "gravel", "sand"]})
    X = apply_design(design.terms, design.reference_levels, new, allow_unknown=True)
    np.testing.assert_array_equal(X[0], [10.0, 1.0, 0.0])
    assert np.all(np.isnan(X[1])) and np.all(np.isnan(X[2]))


def test_missing_column_in_new_table_is_named():
    design = build_design(small_frame(), ["temp", "rain"])
    with pytest.raises(InputError, match="'rain'"):
        apply_design(design.terms, design.reference_levels, small_frame().drop(columns="rain"))


def test_missing_values_refused_when_building():
    frame = small_frame()
    frame.loc[2, "temp"] = np.nan
    with pytest.raises(InputError, match="'temp'.*data row 3 "):
        build_design(frame, ["temp", "rain"])


@pytest.mark.parametrize(
    "options, named",
    [
        ({"squares": ["substrate"]}, "'substrate'"),
        ({"squares": ["tmp"]}, "'tmp'"),
        ({"interactions": [("temp", "substrate")]}, "'substrate'"),
        ({"interactions": [("temp", "temp")]}, "temp"),
    ],
)
def test_bad_squares_and_interactions(options, named):
    with pytest.raises(InputError) as caught:
        build_design(small_frame(), ["temp", "rain", "substrate"], ["substrate"], **options)
    assert named in str(caught.value)


def test_clashing_names_are_refused():
    frame = small_frame()
    frame["temp^2"] = frame["temp"] ** 2
    with pytest.raises(InputError, match="temp\\^2"):
        build_design(frame, ["temp", "temp^2"], squares=["temp"])


def test_single_level_factor_gives_no_columns():
    frame = small_frame().assign(region="north")
    design = build_design(frame, ["temp", "region"], ["region"])
    assert design.names == ["temp"] and design.reference_levels["region"] == "north"


def test_terms_are_plain_records():
    term = Term("temp^2", "square", ("temp",), group="temp^2", centers=(10.0,))
    assert term == Term("temp^2", "square", ("temp",), group="temp^2", centers=(10.0,))
    with pytest.raises(AttributeError):
        term.name = "other"


@st.composite
def survey_frames(draw):
    """Random frames: 1-4 numeric columns and 0-2 factors, 3-30 rows."""
    n = draw(st.integers(min_value=3, max_value=30))
    n_numeric = draw(st.integers(min_value=1, max_value=4))
    n_factor = draw(st.integers(min_value=0, max_value=2))
    floats = st.floats(min_value=-1e4, max_value=1e4, allow_nan=False, width=64)
    columns = {}
    for k in range(n_numeric):
        columns[f"x{k}"] = draw(hnp.arrays(np.float64, n, elements=floats))
    for k in range(n_factor):
        levels = st.sampled_from(["a", "b", "c", "d"])
        columns[f"f{k}"] = draw(st.lists(levels, min_size=n, max_size=n))
    frame = pd.DataFrame(columns)
    factors = [f"f{k}" for k in range(n_factor)]
    squares = draw(st.booleans())
    interactions = draw(st.booleans())
    return frame, factors, squares, interactions


@settings(deadline=None)
@given(survey_frames(), st.randoms(use_true_random=False))
def test_apply_design_reproduces_any_training_matrix(case, random):
    frame, factors, squares, interactions = case
    predictors = list(frame.columns)
    design = build_design(frame, predictors, factors, squares=squares, interactions=interactions)
    assert np.array_equal(
        apply_design(design.terms, design.reference_levels, frame), design.X, equal_nan=False
    )
    # every row sets at most one indicator of each factor, none at the reference level
    for factor, columns in design.groups().items():
        if factor in factors:
            block = design.X[:, columns]
            assert set(np.unique(block)) <= {0.0, 1.0}
            assert np.all(block.sum(axis=1) <= 1)
            at_reference = frame[factor].to_numpy() == design.reference_levels[factor]
            assert np.all(block.sum(axis=1)[~at_reference] == 1)
    # new rows in another order give the same rows of the matrix
    order = list(range(len(frame)))
    random.shuffle(order)
    shuffled = apply_design(design.terms, design.reference_levels, frame.iloc[order])
    assert np.array_equal(shuffled, design.X[order])
