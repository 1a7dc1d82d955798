"""Tests of the fold assignment for cross-validation (pathfinder.choose.folds).

Partition invariants are checked as hypothesis properties; balance is checked
against scikit-learn's StratifiedKFold and GroupKFold; the correlogram is
checked against Moran's I written out from its definition and on invented
spatial fields whose length scale is known.
"""

import warnings

import numpy as np
import pytest
from hypothesis import assume, given
from hypothesis import strategies as st
from sklearn.model_selection import GroupKFold, StratifiedKFold

from pathfinder.choose.folds import (
    Folds,
    autocorrelation_range,
    block_of,
    block_size_advice,
    correlogram,
    fold_notes,
    given_folds,
    grouped_folds,
    make_folds,
    random_folds,
    repeated,
    spatial_block_folds,
    stratified_folds,
)
from pathfinder.errors import InputError

# --------------------------------------------------------------------------
# helpers
# --------------------------------------------------------------------------


def assert_partition(folds: Folds, n: int, k: int) -> None:
    """Every row in exactly one test fold, every fold used, train = the rest."""
    assert folds.fold.shape == (n,)
    assert folds.n_folds == k
    assert set(np.unique(folds.fold)) == set(range(k))
    tested = np.zeros(n, dtype=int)
    for train, test in folds.splits():
        assert test.size > 0
        assert np.intersect1d(train, test).size == 0
        assert np.array_equal(np.union1d(train, test), np.arange(n))
        tested[test] += 1
    assert np.all(tested == 1)


def class_counts(fold, y, k):
    """Sorted per-fold counts of each class: {class: sorted counts}."""
    return {c: sorted(np.bincount(fold[y == c], minlength=k)) for c in np.unique(y)}


def sklearn_folds(splitter, n, y=None, groups=None):
    fold = np.empty(n, dtype=int)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # StratifiedKFold warns about small classes
        for j, (_, test) in enumerate(splitter.split(np.zeros((n, 1)), y, groups)):
            fold[test] = j
    return fold


def not_split(fold, units) -> bool:
    """True when every group (or block) lies in a single fold."""
    pairs = np.unique(np.column_stack([units, fold]), axis=0)
    return pairs.shape[0] == np.unique(units).size


def gaussian_bump_field(rng, n, scale, extent=300.0, n_bumps=400):
    """Invented data for a property check: sites in a square and a smooth field.

    The field is a sum of Gaussian bumps of standard deviation ``scale`` with
    random signs at random centres. Its correlation at distance d is
    exp(-d^2 / (4 scale^2)) (the covariance of a Gaussian kernel with itself),
    so it drops to 0.1 at d = 2 * scale * sqrt(ln 10), about 3 * scale.
    """
    xy = rng.uniform(0.0, extent, (n, 2))
    centres = rng.uniform(-3 * scale, extent + 3 * scale, (n_bumps, 2))
    signs = rng.choice([-1.0, 1.0], n_bumps)
    d2 = ((xy[:, None, :] - centres[None, :, :]) ** 2).sum(-1)
    return xy, np.exp(-d2 / (2 * scale**2)) @ signs


sizes = st.integers(min_value=2, max_value=60)
seeds = st.integers(min_value=0, max_value=2**32 - 1)


@st.composite
def n_and_k(draw):
    n = draw(sizes)
    k = draw(st.integers(min_value=2, max_value=min(n, 12)))
    return n, k


# --------------------------------------------------------------------------
# random folds
# --------------------------------------------------------------------------


@given(n_and_k(), seeds)
def test_random_folds_partition_the_rows(nk, seed):
    n, k = nk
    folds = random_folds(n, k, seed=seed)
    assert_partition(folds, n, k)
    assert folds.scheme == "random"
    sizes_ = np.bincount(folds.fold, minlength=k)
    assert sizes_.max() - sizes_.min() <= 1


def test_random_folds_are_fixed_by_the_seed():
    a = random_folds(100, 5, seed=11)
    b = random_folds(100, 5, seed=11)
    c = random_folds(100, 5, seed=12)
    assert np.array_equal(a.fold, b.fold)
    assert not np.array_equal(a.fold, c.fold)
    # A Generator made from the same number gives the same folds.
    assert np.array_equal(a.fold, random_folds(100, 5, seed=np.random.default_rng(11)).fold)


def test_fold_arrays_cannot_be_changed_afterwards():
    folds = random_folds(20, 4, seed=1)
    with pytest.raises(ValueError):
        folds.fold[0] = 3


# --------------------------------------------------------------------------
# stratified folds
# --------------------------------------------------------------------------


@given(n_and_k(), seeds, st.data())
def test_stratified_folds_keep_class_balance_within_one_site(nk, seed, data):
    n, k = nk
    y = np.array(data.draw(st.lists(st.integers(0, 1), min_size=n, max_size=n)))
    folds = stratified_folds(y, k, seed=seed)
    assert_partition(folds, n, k)
    for c in np.unique(y):
        counts = np.bincount(folds.fold[y == c], minlength=k)
        # Common practice of stratified k-fold: each class is spread over the
        # folds so that counts differ by at most one site.
        assert counts.max() - counts.min() <= 1
    assert np.ptp(np.bincount(folds.fold, minlength=k)) <= 1


@given(n_and_k(), seeds, st.data())
def test_stratified_class_counts_match_scikit_learn(nk, seed, data):
    n, k = nk
    y = np.array(data.draw(st.lists(st.integers(0, 1), min_size=n, max_size=n)))
    # scikit-learn refuses when every class has fewer members than folds.
    assume(np.bincount(y, minlength=2).max() >= k)
    ours = stratified_folds(y, k, seed=seed).fold
    # Reference: scikit-learn StratifiedKFold gives each class floor or ceil
    # of (class size / k) per fold; the sorted per-fold counts must agree.
    theirs = sklearn_folds(StratifiedKFold(k, shuffle=True, random_state=seed % 2**31), n, y)
    assert class_counts(ours, y, k) == class_counts(theirs, y, k)


def test_stratified_folds_accept_labels_that_are_not_numbers():
    y = np.array(["present", "absent", "absent", "absent"] * 10)
    folds = stratified_folds(y, 5, seed=3)
    assert np.all(np.bincount(folds.fold[y == "present"], minlength=5) == 2)


# --------------------------------------------------------------------------
# grouped folds
# --------------------------------------------------------------------------


@st.composite
def grouped_data(draw):
    n = draw(st.integers(min_value=4, max_value=80))
    n_groups = draw(st.integers(min_value=2, max_value=min(n, 20)))
    groups = np.array(draw(st.lists(st.integers(0, n_groups - 1), min_size=n, max_size=n)))
    k = draw(st.integers(min_value=2, max_value=10))
    return groups, k


@given(grouped_data(), seeds)
def test_grouped_folds_never_split_a_group(data, seed):
    groups, k = data
    n_groups = np.unique(groups).size
    assume(n_groups >= 2)
    folds = grouped_folds(groups, k, seed=seed)
    k_used = min(k, n_groups)
    assert_partition(folds, groups.size, k_used)
    # The guarantee of scikit-learn GroupKFold: the same group never appears
    # in two different test folds.
    assert not_split(folds.fold, groups)
    assert np.array_equal(np.unique(groups)[folds.blocks], groups)


@given(grouped_data(), seeds)
def test_grouped_fold_sizes_match_scikit_learn_group_kfold(data, seed):
    groups, k = data
    assume(np.unique(groups).size >= k)
    folds = grouped_folds(groups, k, seed=seed)
    sizes_ = np.bincount(folds.fold, minlength=k)
    # Largest group first into the smallest fold: the spread of fold sizes is
    # never more than the largest group.
    assert sizes_.max() - sizes_.min() <= np.bincount(groups).max()
    # Reference: scikit-learn GroupKFold (shuffle=False) places the largest
    # group in the lightest fold too; how ties are broken does not change the
    # fold sizes, so the sorted sizes must be equal.
    theirs = sklearn_folds(GroupKFold(k), groups.size, groups=groups)
    assert sorted(sizes_) == sorted(np.bincount(theirs, minlength=k))


def test_grouped_folds_balance_presences_when_given():
    # Twenty regions of ten sites; five regions hold all the presences.
    groups = np.repeat(np.arange(20), 10)
    y = np.isin(groups, [0, 1, 2, 3, 4]).astype(int)
    with_y = grouped_folds(groups, 5, seed=4, y=y)
    assert np.array_equal(np.bincount(with_y.fold, weights=y, minlength=5), np.full(5, 10))
    assert np.array_equal(np.bincount(with_y.fold, minlength=5), np.full(5, 40))
    assert not any("no presences" in note for note in with_y.notes)


def test_grouped_folds_take_any_labels_and_are_fixed_by_the_seed():
    rng = np.random.default_rng(5)
    groups = rng.choice(["north", "south", "east", "west", "coast", "hills"], 90)
    a = grouped_folds(groups, 3, seed=8)
    b = grouped_folds(groups, 3, seed=8)
    assert np.array_equal(a.fold, b.fold)
    assert not_split(a.fold, groups)
    assert a.scheme == "grouped"


def test_fewer_groups_than_folds_reduces_the_folds_with_a_note():
    groups = np.repeat(["a", "b", "c"], [10, 12, 8])
    folds = grouped_folds(groups, 10, seed=1)
    assert folds.n_folds == 3
    assert_partition(folds, 30, 3)
    assert any("only 3 groups for 10 folds" in note for note in folds.notes)


def test_a_single_group_is_refused_with_one_line():
    with pytest.raises(InputError) as caught:
        grouped_folds(["a"] * 12, 4, seed=1)
    assert "one group" in str(caught.value) and "\n" not in str(caught.value)


# --------------------------------------------------------------------------
# spatial blocks
# --------------------------------------------------------------------------


@st.composite
def site_coordinates(draw):
    n = draw(st.integers(min_value=4, max_value=80))
    coordinate = st.floats(min_value=-500, max_value=500, allow_nan=False)
    xy = np.array(draw(st.lists(st.tuples(coordinate, coordinate), min_size=n, max_size=n)))
    size = draw(st.floats(min_value=5, max_value=400))
    return xy, size


@given(site_coordinates(), seeds, st.integers(min_value=2, max_value=8))
def test_spatial_blocks_follow_the_grid_and_are_never_split(data, seed, k):
    xy, size = data
    cells = np.floor(xy / size).astype(np.int64)
    _, cell_code = np.unique(cells, axis=0, return_inverse=True)
    cell_code = cell_code.reshape(-1)
    assume(cell_code.max() >= 1)  # at least two blocks
    folds = spatial_block_folds(xy, size, k, seed=seed)
    # Sites share a block exactly when they share the cell
    # (floor(x / size), floor(y / size)).
    assert np.array_equal(folds.blocks, cell_code)
    assert np.array_equal(block_of(xy, size), cell_code)
    assert not_split(folds.fold, folds.blocks)
    k_used = min(k, cell_code.max() + 1)
    assert_partition(folds, xy.shape[0], k_used)
    sizes_ = np.bincount(folds.fold, minlength=k_used)
    assert sizes_.max() - sizes_.min() <= np.bincount(cell_code).max()
    # Same balance as scikit-learn GroupKFold with the blocks as groups.
    theirs = sklearn_folds(GroupKFold(k_used), xy.shape[0], groups=cell_code)
    assert sorted(sizes_) == sorted(np.bincount(theirs, minlength=k_used))


def test_block_of_worked_by_hand():
    xy = np.array([[0.0, 0.0], [9.9, 9.9], [10.0, 0.0], [-0.1, 5.0], [25.0, 31.0]])
    # cells: (0,0) (0,0) (1,0) (-1,0) (2,3); sorted: (-1,0) (0,0) (1,0) (2,3)
    assert block_of(xy, 10.0).tolist() == [1, 1, 2, 0, 3]


def test_spatial_blocks_balance_presences_when_given():
    rng = np.random.default_rng(21)
    xy = rng.uniform(0, 100, (400, 2))
    y = (xy[:, 0] > 70).astype(int)  # presences only in the east
    folds = spatial_block_folds(xy, 10, 5, seed=2, y=y)
    presences = np.bincount(folds.fold, weights=y, minlength=5)
    assert presences.min() > 0
    assert presences.max() - presences.min() <= np.bincount(folds.blocks, weights=y).max()
    assert np.ptp(np.bincount(folds.fold, minlength=5)) <= np.bincount(folds.blocks).max()


def test_one_block_is_refused_with_what_to_do():
    xy = np.random.default_rng(0).uniform(0, 50, (30, 2))
    with pytest.raises(InputError) as caught:
        spatial_block_folds(xy, 1000, 5, seed=1)
    message = str(caught.value)
    assert "one block" in message and "smaller than 1000" in message and "\n" not in message


# --------------------------------------------------------------------------
# given folds and repeats
# --------------------------------------------------------------------------


def test_given_folds_map_labels_in_sorted_order():
    folds = given_folds(["spring", "autumn", "winter", "autumn", "spring", "winter"])
    assert folds.fold.tolist() == [1, 0, 2, 0, 1, 2]
    assert folds.n_folds == 3 and folds.scheme == "given"
    years = given_folds(np.array([2012, 2005, 2012, 2009]))
    assert years.fold.tolist() == [2, 0, 2, 1]


@given(st.lists(st.integers(-5, 5), min_size=2, max_size=60))
def test_given_folds_keep_equal_labels_together_and_in_order(labels):
    labels = np.array(labels)
    assume(np.unique(labels).size >= 2)
    folds = given_folds(labels)
    assert_partition(folds, labels.size, np.unique(labels).size)
    same_label = labels[:, None] == labels[None, :]
    assert np.array_equal(same_label, folds.fold[:, None] == folds.fold[None, :])
    earlier = labels[:, None] < labels[None, :]
    assert np.array_equal(earlier, folds.fold[:, None] < folds.fold[None, :])


def test_given_folds_refuse_missing_labels_and_a_single_fold():
    with pytest.raises(InputError, match="missing"):
        given_folds([1.0, 2.0, np.nan])
    with pytest.raises(InputError, match="single fold"):
        given_folds(["a", "a", "a"])


def make_grouped(seed):
    groups = np.repeat(np.arange(12), 5)
    return grouped_folds(groups, 4, seed=seed)


def test_repeats_differ_and_are_fixed_by_the_seed():
    a = repeated(make_grouped, 4, seed=9)
    b = repeated(make_grouped, 4, seed=9)
    assert a.repeats.shape == (4, 60) and a.n_repeats == 4
    assert np.array_equal(a.repeats, b.repeats)
    assert np.array_equal(a.fold, a.repeats[0])
    assert len({tuple(row) for row in a.repeats}) == 4
    # Each repeat comes from its own child seed.
    children = np.random.SeedSequence(9).spawn(4)
    for r, child in enumerate(children):
        expected = make_grouped(np.random.default_rng(child)).fold
        assert np.array_equal(a.repeats[r], expected)
    for r in range(4):
        assert not_split(a.repeats[r], np.repeat(np.arange(12), 5))
        train, test = a.splits(repeat=r)[0]
        assert np.array_equal(np.sort(np.concatenate([train, test])), np.arange(60))


def test_repeated_folds_as_a_table():
    folds = make_folds(10, k=2, repeats=3, seed=4)
    table = folds.to_frame()
    assert list(table.columns) == ["row", "fold", "repeat"]
    assert len(table) == 30
    assert table["row"].tolist() == list(range(10)) * 3
    assert np.array_equal(table["fold"].to_numpy().reshape(3, 10), folds.repeats)
    single = random_folds(10, 2, seed=4).to_frame()
    assert list(single.columns) == ["row", "fold"] and single["row"].tolist() == list(range(10))
    with pytest.raises(InputError):
        folds.splits(repeat=3)


# --------------------------------------------------------------------------
# notes
# --------------------------------------------------------------------------


def test_notes_name_a_fold_without_presences():
    y = np.zeros(40, dtype=int)
    y[:2] = 1  # two presences, five folds: three folds cannot hold one
    folds = stratified_folds(y, 5, seed=1)
    empty = [j for j in range(5) if y[folds.fold == j].sum() == 0]
    assert len(empty) == 3
    notes = [note for note in folds.notes if "no presences" in note]
    assert len(notes) == 1
    for j in empty:
        assert str(j) in notes[0]


def test_notes_for_absences_and_small_folds():
    fold = np.array([0, 0, 0, 1, 1, 1, 1, 1, 1, 2, 2, 2, 2, 2, 2])
    y = np.array([1, 1, 1, 1, 0, 0, 0, 0, 0, 1, 0, 1, 0, 1, 0])
    notes = fold_notes(fold, 3, y)
    assert any(note.startswith("fold 0 holds only 3 sites") for note in notes)
    assert any(note.startswith("fold 0 has no absences") for note in notes)
    assert not any("no presences" in note for note in notes)
    assert fold_notes(np.repeat([0, 1], 6), 2, np.tile([0, 1], 6)) == ()


def test_no_notes_when_the_response_has_one_class():
    # Without any presence the absent presences are not a fold's fault.
    assert fold_notes(np.repeat([0, 1], 6), 2, np.zeros(12)) == ()


# --------------------------------------------------------------------------
# choosing a scheme
# --------------------------------------------------------------------------


def test_make_folds_prefers_a_fold_column_then_blocks_then_groups():
    rng = np.random.default_rng(3)
    n = 120
    xy = rng.uniform(0, 100, (n, 2))
    groups = rng.integers(0, 8, n)
    labels = np.tile([1, 2, 3], 40)
    y = (rng.random(n) < 0.3).astype(int)
    given = make_folds(n, k=5, y=y, groups=groups, coords=xy, block_size=20, fold_labels=labels,
                       seed=1)
    assert given.scheme == "given" and given.n_folds == 3
    assert any("fold column was given" in note for note in given.notes)
    blocks = make_folds(n, k=5, y=y, groups=groups, coords=xy, block_size=20, seed=1)
    assert blocks.scheme == "spatial blocks"
    assert not_split(blocks.fold, block_of(xy, 20))
    grouped = make_folds(n, k=5, y=y, groups=groups, seed=1)
    assert grouped.scheme == "grouped" and not_split(grouped.fold, groups)
    assert make_folds(n, k=5, y=y, family="binomial", seed=1).scheme == "stratified"
    assert make_folds(n, k=5, y=y, seed=1).scheme == "stratified"  # 0/1 response
    assert make_folds(n, k=5, y=y, family="gaussian", seed=1).scheme == "random"
    assert make_folds(n, k=5, seed=1).scheme == "random"


def test_make_folds_matches_the_scheme_it_chose():
    n = 50
    assert np.array_equal(make_folds(n, k=5, seed=6).fold, random_folds(n, 5, seed=6).fold)
    y = np.tile([0, 0, 0, 1, 1], 10)
    assert np.array_equal(
        make_folds(n, k=5, y=y, family="binomial", seed=6).fold,
        stratified_folds(y, 5, seed=6).fold,
    )
    # The block-size check beside the folds leaves the random stream alone.
    rng = np.random.default_rng(2)
    xy = rng.uniform(0, 100, (n, 2))
    made = make_folds(n, k=4, y=y, coords=xy, block_size=25, seed=np.random.default_rng(8))
    direct = spatial_block_folds(xy, 25, 4, seed=np.random.default_rng(8), y=y)
    assert np.array_equal(made.fold, direct.fold)


def test_make_folds_is_deterministic_for_every_scheme():
    rng = np.random.default_rng(13)
    n = 90
    xy = rng.uniform(0, 60, (n, 2))
    y = (rng.random(n) < 0.4).astype(int)
    groups = rng.integers(0, 15, n)
    for options in (
        {}, {"y": y}, {"groups": groups, "y": y}, {"coords": xy, "block_size": 12, "y": y},
        {"repeats": 3, "groups": groups},
    ):
        first = make_folds(n, k=5, seed=21, **options)
        again = make_folds(n, k=5, seed=21, **options)
        assert np.array_equal(first.fold, again.fold)
        assert first.notes == again.notes
        other = make_folds(n, k=5, seed=22, **options)
        assert not np.array_equal(first.fold, other.fold)


def test_make_folds_reduces_k_for_few_blocks_and_refuses_one():
    xy = np.array([[x, y] for x in (5.0, 15.0, 25.0) for y in (1.0, 2.0, 3.0, 4.0)])
    folds = make_folds(12, k=10, coords=xy, block_size=10, seed=1)
    assert folds.n_folds == 3
    assert any("only 3 blocks for 10 folds" in note for note in folds.notes)
    with pytest.raises(InputError) as caught:
        make_folds(12, k=10, coords=xy, block_size=100, seed=1)
    assert "\n" not in str(caught.value)


@pytest.mark.parametrize(
    "call, words",
    [
        (lambda: make_folds(10, k=3, seed=None), "seed"),
        (lambda: make_folds(10, k=1, seed=1), "at least 2 folds"),
        (lambda: make_folds(4, k=5, seed=1), "at most 4 folds"),
        (lambda: make_folds(10, k=2, groups=[1, 2, 3], seed=1), "has 3 values"),
        (lambda: make_folds(10, k=2, block_size=5, seed=1), "without coordinates"),
        (lambda: make_folds(3, k=2, coords=[[0, 0], [1, np.nan], [2, 2]], block_size=1, seed=1),
         "row 1"),
        (lambda: make_folds(3, k=2, y=[0, 1, -1], family="binomial", seed=1), "negative"),
        (lambda: make_folds(4, k=2, groups=["a", None, "b", "b"], seed=1), "missing"),
        (lambda: make_folds(4, k=2, repeats=0, seed=1), "repeats"),
        (lambda: spatial_block_folds([[0, 0], [5, 5]], -3, 2, seed=1), "positive"),
    ],
)
def test_bad_input_gives_one_clear_line(call, words):
    with pytest.raises(InputError) as caught:
        call()
    message = str(caught.value)
    assert words in message and "\n" not in message


# --------------------------------------------------------------------------
# the correlogram and the block size
# --------------------------------------------------------------------------


def test_moran_i_by_distance_class_matches_its_definition():
    # Moran's I for one distance class with 0/1 weights w_ij (Moran 1950,
    # Biometrika 37:17-23; as written in Legendre & Legendre 2012, Numerical
    # Ecology, chapter 13): I = (n / W) * sum_ij w_ij z_i z_j / sum_i z_i^2,
    # z the centred values and W the sum of the weights.
    rng = np.random.default_rng(17)
    n = 60
    xy = rng.uniform(0, 50, (n, 2))
    values = xy[:, 0] * 0.1 + rng.normal(size=n)
    gram = correlogram(xy, values, n_bins=6, seed=1)
    d = np.hypot(*(xy[:, None, :] - xy[None, :, :]).transpose(2, 0, 1))
    z = values - values.mean()
    off_diagonal = ~np.eye(n, dtype=bool)
    for c in range(6):
        low, high = c * gram.width, (c + 1) * gram.width
        w = off_diagonal & (d >= low) & ((d < high) if c < 5 else (d <= high))
        expected = (n / w.sum()) * (z @ w @ z) / (z @ z)
        assert gram.moran_i[c] == pytest.approx(expected, rel=1e-9, abs=1e-12)
        assert gram.n_pairs[c] == w.sum() // 2


@pytest.mark.parametrize("seed", [0, 1, 2, 3])
def test_range_of_a_smooth_field_is_found_and_noise_has_none(seed):
    # Invented data for a property check (see gaussian_bump_field).
    scale = 20.0
    rng = np.random.default_rng(seed)
    xy, field = gaussian_bump_field(rng, 500, scale)
    found = autocorrelation_range(xy, field, seed=seed)
    true_range = 2 * scale * np.sqrt(np.log(10))  # about 61 units
    # Within a factor of 2 of the known distance (which is about 3 * scale);
    # a finite square of sites biases the estimate a little downward.
    assert found is not None
    assert true_range / 2 < found < true_range * 2
    noise = autocorrelation_range(xy, rng.normal(size=500), seed=seed)
    width = correlogram(xy, field, seed=seed).width
    assert noise is None or noise < 1.5 * width


def test_range_from_sampled_pairs_is_deterministic_and_close():
    # Invented data for a property check: 2,500 sites, about 3.1 million pairs.
    rng = np.random.default_rng(40)
    xy, field = gaussian_bump_field(rng, 2500, 20.0, n_bumps=300)
    full = autocorrelation_range(xy, field, max_pairs=4_000_000, seed=1)
    sampled = autocorrelation_range(xy, field, max_pairs=100_000, seed=1)
    assert sampled == autocorrelation_range(xy, field, max_pairs=100_000, seed=1)
    assert sampled == pytest.approx(full, rel=0.2)
    gram = correlogram(xy, field, max_pairs=100_000, seed=1)
    assert gram.n_pairs.sum() <= 100_000


def test_no_range_for_constant_or_too_few_values():
    xy = np.random.default_rng(0).uniform(0, 10, (30, 2))
    assert autocorrelation_range(xy, np.ones(30), seed=1) is None
    assert autocorrelation_range(xy[:2], np.array([1.0, 2.0]), seed=1) is None


def test_block_size_advice_speaks_only_when_blocks_are_too_small():
    # Invented data for a property check (see gaussian_bump_field).
    rng = np.random.default_rng(5)
    xy, field = gaussian_bump_field(rng, 400, 20.0)
    distance = autocorrelation_range(xy, field, seed=3)
    advice = block_size_advice(xy, field, 10, seed=3)
    assert advice is not None and "\n" not in advice
    assert "blocks of 10 coordinate units" in advice and "Moran's I" in advice
    suggested = float(advice.split("at least ")[1].split()[0])
    assert distance <= suggested < distance * 1.1
    assert block_size_advice(xy, field, distance * 1.01, seed=3) is None
    assert block_size_advice(xy, rng.normal(size=400), 5, seed=3) is None


def test_make_folds_passes_the_block_advice_on():
    rng = np.random.default_rng(6)
    xy, field = gaussian_bump_field(rng, 300, 20.0)
    y = (field > np.median(field)).astype(int)
    small = make_folds(300, k=5, y=y, coords=xy, block_size=5, seed=2)
    assert any("smaller than the distance" in note for note in small.notes)
    no_blocks = make_folds(300, k=5, y=y, coords=xy, seed=2)
    assert no_blocks.scheme == "stratified"
    assert any("without a block size" in note for note in no_blocks.notes)


def test_fewer_presences_than_folds_reduce_the_folds_and_say_so():
    """A rare species (9 presences in 200 sites): every fold must hold a presence (common
    practice for stratified cross-validation of presence/absence data)."""
    from pathfinder.choose.folds import make_folds

    y = np.zeros(200)
    y[:9] = 1
    folds = make_folds(200, k=10, y=y, family="binomial", seed=3)
    assert folds.n_folds == 9
    assert all(y[test].sum() >= 1 for _, test in folds.splits())
    assert any("only 9 presences" in note for note in folds.notes)


def test_the_uneven_fold_note_numbers_folds_from_one_and_says_they_count_equally():
    """Folds are numbered from 1 in folds.csv; the note must use the same numbering and say
    that the CV mean weighs every fold alike (our convention, DEVELOPERS.md)."""
    from pathfinder.choose.folds import grouped_folds

    groups = np.repeat(np.arange(4), [60, 10, 10, 10])
    folds = grouped_folds(groups, 4, seed=1)
    note = next(n for n in folds.notes if "uneven" in n)
    big = int(np.argmax(np.bincount(folds.fold))) + 1
    assert f"fold {big} holds 60 sites" in note and "counts equally" in note
