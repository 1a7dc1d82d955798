"""Correlations, correlation clusters, variance inflation factors and the heat-map order.

References: statsmodels ``variance_inflation_factor`` (VIF), statsmodels
``DescrStatsW.corrcoef`` and numpy ``corrcoef`` (correlations), scipy
``connected_components`` (clusters). The 0.7 threshold is the working value
of Dormann et al. (2013), Ecography 36:27-46. Data are invented.
"""

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from scipy.sparse import csr_matrix
from scipy.sparse.csgraph import connected_components
from statsmodels.stats.outliers_influence import variance_inflation_factor
from statsmodels.stats.weightstats import DescrStatsW
from statsmodels.tools import add_constant

from pathfinder.diagnostics.collinearity import (
    cluster_order, correlation_clusters, correlation_matrix, variance_inflation)
from pathfinder.errors import InputError

from ..core.helpers import correlated_design


def _design(seed=0, n=300, p=8, rho=0.6):
    return correlated_design(np.random.default_rng(seed), n, p, rho)


def test_correlations_equal_numpy_and_weighted_statsmodels():
    X = _design()
    # Reference: numpy.corrcoef (columns as variables).
    assert np.allclose(correlation_matrix(X), np.corrcoef(X, rowvar=False), atol=1e-12)
    w = np.random.default_rng(1).uniform(0.2, 3.0, X.shape[0])
    # Reference: statsmodels DescrStatsW(X, weights).corrcoef, the weighted Pearson correlation.
    assert np.allclose(correlation_matrix(X, w), DescrStatsW(X, weights=w).corrcoef, atol=1e-12)


def test_correlations_of_a_column_without_spread_are_missing():
    X = _design(p=4)
    X[:, 2] = 3.5
    R = correlation_matrix(X)
    assert np.isnan(R[2, [0, 1, 3]]).all() and np.isnan(R[[0, 1, 3], 2]).all()
    assert np.allclose(np.diag(R), 1.0)


def test_vif_equals_statsmodels():
    X = _design(seed=2, p=10, rho=0.8)
    exog = add_constant(X)  # statsmodels regresses each column on all others, constant included
    # Reference: statsmodels.stats.outliers_influence.variance_inflation_factor.
    expected = [variance_inflation_factor(exog, j + 1) for j in range(X.shape[1])]
    assert np.allclose(variance_inflation(X), expected, rtol=1e-8)
    assert variance_inflation(X).min() > 1.0  # AR(0.8) terms are all inflated


@pytest.mark.filterwarnings("ignore::UserWarning")  # statsmodels warns of the rank deficiency
def test_vif_is_infinite_for_exact_collinearity_and_finite_elsewhere():
    X = _design(seed=3, p=5, rho=0.3)
    X[:, 2] = X[:, 0] + 2 * X[:, 1]
    vif = variance_inflation(X)
    assert np.isinf(vif[[0, 1, 2]]).all()
    exog = add_constant(X)
    # Reference: statsmodels variance_inflation_factor (its least squares handle the
    # rank-deficient regressors of the two terms outside the dependence).
    for j in (3, 4):
        assert vif[j] == pytest.approx(variance_inflation_factor(exog, j + 1), rel=1e-6)


def test_vif_of_a_column_without_spread_is_infinite():
    X = _design(seed=4, p=3)
    X[:, 1] = 1.0
    vif = variance_inflation(X)
    assert np.isinf(vif[1]) and np.isfinite(vif[[0, 2]]).all()


def _random_correlations(seed, p):
    rng = np.random.default_rng(seed)
    factors = rng.standard_normal((60, 2))
    X = factors @ rng.standard_normal((2, p)) + rng.uniform(0.2, 2.0, p) * rng.standard_normal((60, p))
    return correlation_matrix(X)


@given(seed=st.integers(0, 10_000), p=st.integers(1, 25), threshold=st.floats(0.05, 1.0))
def test_every_pair_in_a_cluster_moves_together(seed, p, threshold):
    R = _random_correlations(seed, p)
    ids = correlation_clusters(R, threshold)
    # Complete linkage (a standard hierarchical-clustering rule): within a
    # cluster every pair has |r| >= threshold ...
    same = ids[:, None] == ids[None, :]
    assert np.all(np.abs(np.nan_to_num(R))[same] >= threshold - 1e-9)
    # ... so clusters never exceed the connected components of |r| >= threshold
    # (scipy.sparse.csgraph.connected_components, the single-linkage bound).
    _, ref = connected_components(csr_matrix(np.abs(R) >= threshold), directed=False)
    assert np.all((ref[:, None] == ref[None, :])[same])
    first_seen = list(dict.fromkeys(ids.tolist()))
    assert first_seen == list(range(1, ids.max() + 1))


def test_threshold_is_respected_and_chains_do_not_join():
    # a-b at 0.85 and b-c at 0.8, but a-c only 0.64: a and c do not stand in
    # for each other, so c is not in a's cluster at 0.7.
    R = np.array([[1.0, 0.85, 0.64, 0.1],
                  [0.85, 1.0, 0.8, 0.0],
                  [0.64, 0.8, 1.0, -0.69],
                  [0.1, 0.0, -0.69, 1.0]])
    assert correlation_clusters(R, 0.7).tolist() == [1, 1, 2, 3]
    assert correlation_clusters(R, 0.85).tolist() == [1, 1, 2, 3]     # |r| equal to the threshold links
    assert correlation_clusters(R, 0.86).tolist() == [1, 2, 3, 4]
    assert correlation_clusters(R, 0.6).tolist() == [1, 1, 2, 2]      # c joins d, its closer partner
    assert correlation_clusters(R, 0.05).tolist() == [1, 1, 2, 2]     # b and d never move together
    with pytest.raises(InputError, match="threshold"):
        correlation_clusters(R, 0.0)


def test_cluster_order_keeps_correlated_families_together():
    rng = np.random.default_rng(5)
    n = 400
    a, b = rng.standard_normal(n), rng.standard_normal(n)
    columns = [a + 0.3 * rng.standard_normal(n) for _ in range(3)]
    columns += [b + 0.3 * rng.standard_normal(n) for _ in range(3)]
    shuffle = rng.permutation(6)
    X = np.column_stack(columns)[:, shuffle]
    family = (shuffle >= 3).astype(int)    # which family each shuffled column came from
    order = cluster_order(correlation_matrix(X))
    assert sorted(order) == list(range(6))
    seen = family[order]
    assert np.count_nonzero(np.diff(seen)) == 1   # one family, then the other


def test_bad_input_gives_one_line():
    with pytest.raises(InputError, match="two dimensions"):
        correlation_matrix(np.arange(5.0))
    X = _design(p=3)
    X[4, 1] = np.nan
    with pytest.raises(InputError, match="first at row 4"):
        variance_inflation(X)
    with pytest.raises(InputError, match="one weight per site"):
        correlation_matrix(_design(p=3), weights=np.ones(3))
