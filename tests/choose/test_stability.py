"""Stability selection: the error bound, the halves, the frequencies and every backend.

References: Meinshausen & Buhlmann (2010), Stability selection, JRSS-B
72:417-473 (the bound of Theorem 1); Shah & Samworth (2013), Variable
selection with error control, JRSS-B 75:55-80 (complementary pairs; their
Theorem 1 gives the same bound for pairs). All data here are invented.
"""

import math

import numpy as np
import pandas as pd
import pytest
from hypothesis import example, given
from hypothesis import strategies as st

from pathfinder.choose.problem import Problem
from pathfinder.choose.stability import (
    bootstrap_samples, complementary_pairs, default_q, pmb_bound, stability_selection,
    threshold_for_pfer)
from pathfinder.diagnostics.collinearity import correlation_clusters, correlation_matrix
from pathfinder.errors import InputError
from pathfinder.parallel import Backend, run_tasks

from ..core.helpers import correlated_design, make_response


def _problem(X, y, family="gaussian", **extra):
    return Problem(np.asfortranarray(X), y, family, tuple(f"x{j}" for j in range(X.shape[1])),
                   **extra)


def _known_truth(family="gaussian", seed=11):
    """n = 400, p = 60, AR(0.6) predictors, six true terms spread along the chain."""
    rng = np.random.default_rng(seed)
    X = correlated_design(rng, 400, 60, rho=0.6)
    coef = np.zeros(60)
    true = [0, 10, 20, 30, 40, 50]
    coef[true] = [1.0, -1.0, 0.8, -0.8, 0.7, -0.7]
    y = make_response(rng, X, family, coef)
    return _problem(X, y, family), {f"x{j}" for j in true}


# --------------------------------------------------------------------------
# The bound
# --------------------------------------------------------------------------


@pytest.mark.parametrize("q, threshold, p, expected", [
    (10, 0.9, 1000, 0.125),        # 100 / (0.8 * 1000)
    (7, 0.75, 60, 49 / 30),        # 49 / (0.5 * 60)
    (5, 0.6, 50, 2.5),             # 25 / (0.2 * 50)
    (3, 1.0, 9, 1.0),              # 9 / (1 * 9)
])
def test_bound_is_q_squared_over_2pi_minus_1_times_p(q, threshold, p, expected):
    # Meinshausen & Buhlmann (2010), Theorem 1: E(V) <= q^2 / ((2 pi - 1) p); values by hand.
    assert pmb_bound(q, threshold, p) == pytest.approx(expected, rel=1e-12)
    # The threshold that meets a target is the one that gives it back.
    if expected >= q * q / p:
        assert threshold_for_pfer(q, expected, p) == pytest.approx(threshold, rel=1e-12)


def test_threshold_for_an_unreachable_target_is_one_and_a_threshold_needs_more_than_half():
    assert threshold_for_pfer(10, 0.01, 100) == 1.0    # needs 5.5 by the formula
    assert 0.5 < threshold_for_pfer(1, 1e6, 100) < 0.5 + 1e-6
    with pytest.raises(InputError, match="above 0.5"):
        pmb_bound(5, 0.5, 50)
    assert default_q(60) == math.ceil(math.sqrt(48)) and default_q(1) == 1


# --------------------------------------------------------------------------
# Error control and power on invented data
# --------------------------------------------------------------------------


def test_pure_noise_calls_no_more_terms_stable_than_the_bound_on_average():
    # Response independent of the predictors: every stable term is a false one, so
    # the mean count over runs estimates E(V), bounded by Meinshausen & Buhlmann
    # (2010, Theorem 1) and Shah & Samworth (2013, Theorem 1).
    rng = np.random.default_rng(2024)
    counts, bounds = [], []
    for run in range(20):
        X = rng.standard_normal((200, 50))
        y = rng.standard_normal(200)
        result = stability_selection(_problem(X, y), n_pairs=25, seed=run)
        counts.append(int(result.stable.sum()))
        bounds.append(result.pfer_bound)
    assert len(set(bounds)) == 1    # q and threshold fixed, so the same bound every run
    assert np.mean(counts) <= bounds[0]


def test_known_truth_is_recovered_with_few_false_terms():
    problem, truth = _known_truth("gaussian")
    result = stability_selection(problem, n_pairs=50, seed=3)
    stable = set(result.stable_terms)
    assert len(stable & truth) >= 5
    assert len(stable - truth) <= 2
    assert result.pfer_bound == pytest.approx(pmb_bound(result.q, 0.75, 60))


def test_a_target_pfer_sets_the_threshold_through_the_bound():
    problem, _ = _known_truth("gaussian")
    result = stability_selection(problem, n_pairs=10, pfer=2.0, seed=3)
    assert result.pfer_bound == pytest.approx(2.0)
    assert result.threshold == pytest.approx(0.5 * (1 + result.q ** 2 / (60 * 2.0)))


# --------------------------------------------------------------------------
# Halves
# --------------------------------------------------------------------------


@given(n=st.integers(2, 300), seed=st.integers(0, 2**32 - 1))
def test_pairs_are_disjoint_halves(n, seed):
    pairs = complementary_pairs(n, 5, seed=seed)
    assert len(pairs) == 5
    for first, second in pairs:
        assert len(first) == len(second) == n // 2
        assert np.intersect1d(first, second).size == 0
        assert np.all(np.diff(first) > 0) and np.all(np.diff(second) > 0)
        assert first.min() >= 0 and max(first.max(), second.max()) < n


@given(present=st.lists(st.booleans(), min_size=4, max_size=200), seed=st.integers(0, 10**6))
def test_stratified_halves_keep_the_share_of_presences(present, seed):
    y = np.array(present, dtype=int)
    for first, second in complementary_pairs(y.size, 4, seed=seed, strata=y):
        for half in (first, second):
            assert len(half) == y.size // 2
            for cls in (0, 1):
                assert abs(np.sum(y[half] == cls) - np.sum(y == cls) / 2) <= 1


@given(sizes=st.lists(st.integers(1, 30), min_size=2, max_size=40), seed=st.integers(0, 10**6),
       stratify=st.booleans())
# Found by hypothesis: two one-row units of different classes, both dealt to one
# half (every choice ties), so the other half had no unit to swap with.
@example(sizes=[1, 1], seed=171, stratify=True)
def test_groups_and_blocks_are_never_split(sizes, seed, stratify):
    rng = np.random.default_rng(seed)
    units = np.repeat(np.arange(len(sizes)) * 7 + 3, sizes)   # labels need not be 0..m-1
    units = units[rng.permutation(units.size)]
    strata = rng.integers(0, 2, units.size) if stratify else None
    for first, second in complementary_pairs(units.size, 3, seed=seed, strata=strata, units=units):
        assert np.intersect1d(first, second).size == 0
        assert first.size + second.size == units.size
        assert first.size and second.size
        assert np.intersect1d(units[first], units[second]).size == 0
        if not stratify:
            # Balanced as whole units allow: off by less than the largest unit.
            assert abs(first.size - second.size) <= max(sizes)


def test_same_seed_same_halves_and_bootstrap_keeps_units_whole():
    a = complementary_pairs(101, 4, seed=9)
    b = complementary_pairs(101, 4, seed=np.random.default_rng(9))
    assert all(np.array_equal(x, y) for pa, pb in zip(a, b) for x, y in zip(pa, pb))
    units = np.repeat(np.arange(10), 5)
    for sample in bootstrap_samples(50, 6, seed=1, units=units):
        counts = np.bincount(units[sample], minlength=10)
        assert np.all(counts % 5 == 0)      # a unit enters whole, possibly more than once
    plain = bootstrap_samples(50, 3, seed=1)
    assert all(len(s) == 50 for s in plain)


# --------------------------------------------------------------------------
# Same seed, same table, on every backend
# --------------------------------------------------------------------------


@pytest.fixture(scope="module")
def dask_client():
    distributed = pytest.importorskip("dask.distributed")
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, host="127.0.0.1",
                                       dashboard_address=None)
    client = distributed.Client(cluster, set_as_default=False)
    client.wait_for_workers(2, timeout=60)
    yield client
    client.close()
    cluster.close()


def test_same_seed_same_table_on_every_backend(dask_client):
    rng = np.random.default_rng(4)
    X = correlated_design(rng, 300, 20, rho=0.5)
    coef = np.zeros(20)
    coef[[1, 7, 13]] = [0.9, -0.7, 0.6]
    y = make_response(rng, X, "binomial", coef)
    problem = _problem(X, y, "binomial")
    options = dict(n_pairs=8, strata=y, seed=21)
    here = stability_selection(problem, **options)
    tables = {"here": here.table()}
    for label, backend in [("2 local processes", Backend(jobs=2)),
                           ("dask", Backend(cluster=dask_client))]:
        result = stability_selection(
            problem, run=lambda fn, tasks, shared, b=backend: run_tasks(fn, tasks, shared, b),
            **options)
        tables[label] = result.table()
        assert np.array_equal(result.frequencies, here.frequencies), label
    for label, table in tables.items():
        pd.testing.assert_frame_equal(table, tables["here"], check_exact=True, obj=label)
    # A different seed draws different halves.
    other = stability_selection(problem, n_pairs=8, strata=y, seed=22)
    assert not np.array_equal(other.frequencies, here.frequencies)


# --------------------------------------------------------------------------
# Factors and correlated families
# --------------------------------------------------------------------------


def _direct_any_frequency(problem, grid, region_steps, members, pairs):
    """Recomputed by hand: share of halves selecting any of ``members``, max over the region."""
    hits = []
    for pair in pairs:
        for rows in pair:
            fit = problem.fit(rows=rows, penalties=grid, mix=1.0, tol=1e-5)
            chosen = np.zeros((len(grid), len(members)), dtype=bool)
            chosen[:len(fit.penalties)] = fit.coef[:, members] != 0
            chosen[len(fit.penalties):] = chosen[len(fit.penalties) - 1]
            hits.append(chosen.any(axis=1))
    return np.mean(hits, axis=0)[:region_steps].max()


def test_a_factor_counts_as_selected_when_any_level_is_and_clusters_cover_members():
    rng = np.random.default_rng(8)
    n = 300
    X = correlated_design(rng, n, 8, rho=0.3)
    X[:, 1] = X[:, 0] + 0.3 * rng.standard_normal(n)          # a correlated twin of x0
    habitat = rng.integers(0, 4, n)                            # a 4-level factor, level 0 reference
    levels = np.column_stack([(habitat == k).astype(float) for k in (1, 2, 3)])
    X = np.column_stack([X, levels])
    names = tuple(f"x{j}" for j in range(8)) + ("habitat=b", "habitat=c", "habitat=d")
    groups = [f"x{j}" for j in range(8)] + ["habitat"] * 3
    y = 0.5 * X[:, 0] + 0.4 * X[:, 4] + 0.9 * (habitat == 2) + 0.9 * (habitat == 3) \
        + rng.standard_normal(n)
    problem = Problem(np.asfortranarray(X), y, "gaussian", names)
    result = stability_selection(problem, n_pairs=10, term_groups=groups, seed=5)
    table = result.table().set_index("term")

    # Any level selected: at least each level's own frequency, exactly the joint share.
    factor = [8, 9, 10]
    pairs = complementary_pairs(n, 10, seed=5)
    direct = _direct_any_frequency(problem, result.penalties, result.region_steps, factor, pairs)
    assert result.group_frequency["habitat"] == pytest.approx(direct)
    # Here the halves pick different levels, so the factor is more stable than any level.
    assert result.group_frequency["habitat"] > table.loc[list(names[8:]), "selection_frequency"].max()
    assert (table.loc[list(names[8:]), "group"] == "habitat").all()
    assert table.loc["x3", "group_frequency"] == table.loc["x3", "selection_frequency"]

    # Correlated families: the clusters of the design, and any member selected.
    expected = correlation_clusters(correlation_matrix(X), 0.7)
    assert np.array_equal(result.clusters, expected)
    assert result.clusters[0] == result.clusters[1]
    twins = [0, 1]
    assert result.cluster_frequency[0] == pytest.approx(
        _direct_any_frequency(problem, result.penalties, result.region_steps, twins, pairs))
    assert np.all(result.cluster_frequency >= result.max_frequency)
    # The twins share the selections between them: the pair is more stable than either.
    assert result.cluster_frequency[0] > result.max_frequency[twins].max()


def test_tables_and_always_kept_terms():
    problem, _ = _known_truth("gaussian")
    weights = np.ones(60)
    weights[59] = 0.0
    kept = Problem(problem.X, problem.y, "gaussian", problem.names, term_weights=weights)
    result = stability_selection(kept, n_pairs=5, seed=1)
    table = result.table()
    assert list(table.columns[:7]) == ["term", "selection_frequency", "stable", "cluster",
                                       "cluster_frequency", "group", "group_frequency"]
    assert table.selection_frequency.is_monotonic_decreasing
    assert "x59" not in result.stable_terms          # always kept, never called stable
    assert result.pfer_bound == pytest.approx(pmb_bound(result.q, 0.75, 59))
    assert any("always kept" in note for note in result.notes)
    path = result.path_table()
    assert len(path) == len(result.penalties) * 60
    assert path.in_region.sum() == result.region_steps * 60
    top = path[path.in_region].groupby("term").frequency.max()
    assert np.allclose(top.loc[list(problem.names)], result.max_frequency)


@pytest.mark.parametrize("options, message", [
    (dict(threshold=0.5), "above 0.5"),
    (dict(threshold=0.8, pfer=1.0), "give one of the two"),
    (dict(q=61), "at most 60"),
    (dict(n_pairs=0), "number of pairs"),
    (dict(mix=0.0), "ridge"),
    (dict(seed=None), "needs a seed"),
    (dict(term_groups=["a"] * 3), "one group name per term"),
])
def test_bad_options_give_one_line(options, message):
    problem, _ = _known_truth("gaussian")
    options = {"seed": 1, "n_pairs": 2, **options}
    with pytest.raises(InputError, match=message):
        stability_selection(problem, **options)


def test_halves_travel_as_bit_masks_and_come_back_as_the_same_rows():
    from pathfinder.choose.stability import PackedRows, complementary_pairs

    n = 10_001
    first, second = complementary_pairs(n, 1, seed=3)[0]
    for half in (first, second):
        packed = PackedRows.of(half, n)
        assert np.array_equal(packed.positions(), np.sort(half))
        assert packed.bits.nbytes <= n // 8 + 1          # one bit a site
    assert not np.intersect1d(PackedRows.of(first, n).positions(),
                              PackedRows.of(second, n).positions()).size
