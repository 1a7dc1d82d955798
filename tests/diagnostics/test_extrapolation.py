"""Tests of the extrapolation measures (pathfinder.diagnostics.extrapolation).

MESS follows Elith, Kearney & Phillips (2010) The art of modelling
range-shifting species. Methods Ecol. Evol. 1:330-342: for each variable, f is
the percentage of reference (training) points with a value below the new
value p; the similarity is (p - min)/(max - min)*100 when f = 0, 2f when
0 < f <= 50, 2(100 - f) when 50 <= f < 100, (max - p)/(max - min)*100 when
f = 100; MESS is the minimum over variables.
"""

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp

from pathfinder.diagnostics.extrapolation import (
    mess,
    outside_range,
    percent_below,
    training_percentiles,
)


def table_of(training):
    """Percentiles and ranges of training columns (n, m)."""
    training = np.asarray(training, dtype=float)
    percentiles = np.array([training_percentiles(col) for col in training.T])
    ranges = np.column_stack([training.min(axis=0), training.max(axis=0)])
    return percentiles, ranges


def elith_similarity(p, reference):
    """The definition of Elith et al. (2010), computed from the raw training values."""
    reference = np.asarray(reference, dtype=float)
    low, high = reference.min(), reference.max()
    f = 100.0 * np.mean(reference < p)
    if f == 0:
        return (p - low) / (high - low) * 100
    if f <= 50:
        return 2 * f
    if f < 100:
        return 2 * (100 - f)
    return (high - p) / (high - low) * 100


# Training values 0, 1, ..., 100: the q-th percentile is q itself, so the
# percentage f of training values below a new value p is p, worked by hand.
EVEN = np.arange(101.0)[:, None]


def test_mess_hand_worked_on_one_variable():
    # Elith et al. (2010) MESS definition, worked by hand for training 0..100
    # (min 0, max 100, f = p):
    #   p = 50 (median): f = 50 -> 2 * 50 = 100
    #   p = 25: f = 25 -> 2 * 25 = 50;   p = 80: f = 80 -> 2 * (100 - 80) = 40
    #   p = 0 (min): f = 0 -> (0 - 0)/100 * 100 = 0;  p = 100 (max) -> 0
    #   p = -10: f = 0 -> (-10 - 0)/100 * 100 = -10
    #   p = 120: f = 100 -> (100 - 120)/100 * 100 = -20
    percentiles, ranges = table_of(EVEN)
    new = np.array([[50.0], [25.0], [80.0], [0.0], [100.0], [-10.0], [120.0]])
    scores, worst = mess(new, percentiles, ranges)
    np.testing.assert_allclose(scores, [100, 50, 40, 0, 0, -10, -20], atol=1e-12)
    assert list(worst) == [0] * 7


def test_mess_below_the_minimum_is_proportional_to_the_distance_over_the_range():
    # Elith et al. (2010): f = 0 -> (p - min) / (max - min) * 100.
    training = np.array([[2.0], [4.0], [5.0], [10.0]])  # min 2, range 8
    percentiles, ranges = table_of(training)
    new = np.array([[2.0 - 1.0], [2.0 - 4.0], [2.0 - 8.0]])
    scores, _ = mess(new, percentiles, ranges)
    np.testing.assert_allclose(scores, [-12.5, -50.0, -100.0], atol=1e-12)


def test_mess_is_the_smallest_similarity_and_names_that_variable():
    # Two variables, each trained on 0..100 (second one scaled by 10):
    # site 1: similarities 100 (p = 50) and 2 * 30 = 60 (p = 300) -> 60, variable 1
    # site 2: 2 * 10 = 20 (p = 10) and 100 (p = 500) -> 20, variable 0
    # site 3: 100 (p = 50) and, below the minimum 0 of a range of 1000,
    #         (-100 - 0) / 1000 * 100 = -10 -> -10, variable 1
    training = np.column_stack([np.arange(101.0), 10 * np.arange(101.0)])
    percentiles, ranges = table_of(training)
    new = np.array([[50.0, 300.0], [10.0, 500.0], [50.0, -100.0]])
    scores, worst = mess(new, percentiles, ranges)
    np.testing.assert_allclose(scores, [60.0, 20.0, -10.0], atol=1e-12)
    assert list(worst) == [1, 0, 1]


def test_mess_from_percentiles_matches_the_definition_on_a_large_sample():
    # With many training sites, reading f from the 101 percentiles agrees with
    # counting training values below p as Elith et al. (2010) define it.
    rng = np.random.default_rng(11)
    reference = rng.gamma(2.0, 3.0, size=20001)
    percentiles, ranges = table_of(reference[:, None])
    probes = np.concatenate([np.quantile(reference, [0.03, 0.2, 0.5, 0.77, 0.99]),
                             [reference.min() - 2.0, reference.max() + 5.0]])
    scores, _ = mess(probes[:, None], percentiles, ranges)
    expected = [elith_similarity(p, reference) for p in probes]
    np.testing.assert_allclose(scores, expected, atol=0.1)


def test_ties_in_training_give_the_share_strictly_below():
    # 30 % of training values are 0 (a variable with many zeros): at p = 0 the
    # share below is 0, so f = 0 and the similarity is 0 (Elith et al. 2010);
    # the value 1 (the maximum, shared by the upper 70 %) has 30 % below it,
    # so its similarity is 2 * 30 = 60.
    training = np.array([0.0] * 30 + [1.0] * 70)[:, None]
    percentiles, ranges = table_of(training)
    f = percent_below(np.array([0.0, 1.0]), percentiles[0])
    assert f[0] == 0.0
    assert f[1] == pytest.approx(30.0, abs=1.0)
    scores, _ = mess(np.array([[0.0], [1.0]]), percentiles, ranges)
    assert scores[0] == 0.0
    assert scores[1] == pytest.approx(60.0, abs=2.0)


def test_missing_values_give_no_score():
    percentiles, ranges = table_of(np.column_stack([np.arange(101.0), np.arange(101.0)]))
    scores, worst = mess(np.array([[np.nan, 50.0], [50.0, 50.0]]), percentiles, ranges)
    assert np.isnan(scores[0]) and worst[0] == -1
    assert scores[1] == 100.0


def test_no_covariates_give_no_score():
    scores, worst = mess(np.empty((3, 0)), np.empty((0, 101)), np.empty((0, 2)))
    assert np.all(np.isnan(scores)) and np.all(worst == -1)
    count, extreme, distance = outside_range(np.empty((3, 0)), np.empty((0, 2)))
    assert list(count) == [0, 0, 0] and list(extreme) == [-1, -1, -1]


def test_outside_range_counts_and_distances():
    ranges = np.array([[0.0, 10.0], [100.0, 200.0], [-1.0, 1.0]])
    new = np.array([
        [5.0, 150.0, 0.0],     # inside everywhere
        [-5.0, 150.0, 0.0],    # first 5 below: 0.5 of its range of 10
        [12.0, 350.0, 0.0],    # first 0.2 above, second 1.5 above -> worst is the second
        [15.0, 50.0, 3.0],     # 0.5, 0.5, 1.0 beyond -> three outside, worst the third
        [10.0, 100.0, np.nan],  # on the edges (inside), missing value not counted
    ])
    count, extreme, distance = outside_range(new, ranges)
    assert list(count) == [0, 1, 2, 3, 0]
    assert list(extreme) == [-1, 0, 1, 2, -1]
    np.testing.assert_allclose(distance, [0.0, 0.5, 1.5, 1.0, 0.0])


def test_plain_percentiles_are_numpy_linear_percentiles():
    # Reference: numpy.percentile with its default (linear) method.
    values = np.random.default_rng(2).normal(size=37)
    np.testing.assert_allclose(training_percentiles(values),
                               np.percentile(values, np.arange(101)), rtol=0, atol=0)


def test_equal_weights_give_the_plain_percentiles_and_zero_weights_drop_rows():
    # Reference: numpy.percentile (linear) of the rows with positive weight.
    values = np.random.default_rng(4).uniform(size=25)
    np.testing.assert_allclose(training_percentiles(values, np.full(25, 3.0)),
                               np.percentile(values, np.arange(101)), atol=1e-12)
    weights = np.ones(25)
    weights[[3, 7]] = 0.0
    np.testing.assert_allclose(training_percentiles(values, weights),
                               np.percentile(np.delete(values, [3, 7]), np.arange(101)),
                               atol=1e-12)


def test_heavier_weights_pull_the_median_towards_their_values():
    values = np.array([0.0, 1.0, 2.0, 3.0, 4.0])
    plain = training_percentiles(values)[50]
    heavy_low = training_percentiles(values, [10.0, 10.0, 1.0, 1.0, 1.0])[50]
    assert plain == 2.0
    assert heavy_low < plain
    table = training_percentiles(values, [10.0, 10.0, 1.0, 1.0, 1.0])
    assert table[0] == 0.0 and table[-1] == 4.0 and np.all(np.diff(table) >= 0)


finite = st.floats(-1e3, 1e3, allow_nan=False)


@given(hnp.arrays(np.float64, st.tuples(st.integers(2, 40), st.integers(1, 3)), elements=finite),
       hnp.arrays(np.float64, st.tuples(st.integers(1, 10), st.just(3)), elements=finite))
def test_mess_is_negative_exactly_outside_the_training_range(training, new):
    new = new[:, : training.shape[1]]
    percentiles, ranges = table_of(training)
    spread = ranges[:, 1] > ranges[:, 0]
    if not spread.all():
        return  # a constant covariate is dropped before any model sees it
    scores, worst = mess(new, percentiles, ranges)
    count, extreme, _ = outside_range(new, ranges)
    assert np.all(scores <= 100.0 + 1e-9)
    np.testing.assert_array_equal(scores < 0, count > 0)
    # the covariate setting a negative MESS is outside the range
    for i in np.flatnonzero(scores < 0):
        j = worst[i]
        assert new[i, j] < ranges[j, 0] or new[i, j] > ranges[j, 1]
