"""Memory: a path never copies X more than once, and a fold never copies it whole.

Measured with tracemalloc (numpy reports its allocations to it). The
documented budget: no copy of X for Gaussian paths with uniform weights, nor
for binomial and Poisson paths on long tables held column by column (X is
standardised on the fly); one standardised copy otherwise; and for a fit on
a subset of rows at most one copy of that subset.
"""

import tracemalloc

import numpy as np
import pytest

from pathfinder import fit_path
from pathfinder.core import path as path_module
from pathfinder.choose.problem import Problem

N, P = 200_000, 50


@pytest.fixture(scope="module")
def data():
    rng = np.random.default_rng(0)
    X = np.empty((N, P), order="F")
    for j in range(P):
        X[:, j] = rng.standard_normal(N)
    eta = X[:, :4] @ np.array([0.5, -0.4, 0.3, 0.2])
    y = (rng.random(N) < 1 / (1 + np.exp(-eta))).astype(float)
    fit_path(X[:500], y[:500], family="binomial", n_penalties=3)   # compile outside the measurement
    return X, y


def _peak(fn):
    tracemalloc.start()
    try:
        fn()
        return tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


def test_binomial_path_on_a_long_column_ordered_table_copies_nothing_big(data):
    X, y = data
    peak = _peak(lambda: fit_path(X, y, family="binomial", n_penalties=20))
    assert peak < 0.3 * X.nbytes          # vectors and a sample of rows, no copy of X


def test_binomial_path_on_a_row_ordered_table_holds_at_most_one_copy_of_x(data):
    X, y = data
    Xc = np.ascontiguousarray(X)
    peak = _peak(lambda: fit_path(Xc, y, family="binomial", n_penalties=20))
    assert peak < 1.3 * X.nbytes          # one standardised copy plus vectors, never two
    assert peak > 0.9 * X.nbytes          # ... and the copy is really made (the check can fail)


def test_gaussian_path_with_uniform_weights_copies_nothing_big(data):
    X, y = data
    peak = _peak(lambda: fit_path(X, X[:, 0] + y, n_penalties=20))
    assert peak < 0.3 * X.nbytes          # no n x n matrix, no copy of X


def test_a_fold_fit_on_a_long_column_ordered_table_copies_nothing_big(data, monkeypatch):
    # folds whose copy would take more than SUBSET_COPY_BYTES are read in place
    monkeypatch.setattr(path_module, "SUBSET_COPY_BYTES", 8 * 2**20)
    X, y = data
    problem = Problem(X, y, "binomial", tuple(f"x{j}" for j in range(P)))
    rows = np.arange(0, N, 4)             # a quarter of the rows, read where they are
    peak = _peak(lambda: problem.fit(rows=rows, n_penalties=10))
    assert peak < 0.1 * X.nbytes


def test_a_fold_fit_on_a_row_ordered_table_copies_only_its_own_rows(data):
    X, y = data
    Xc = np.ascontiguousarray(X)
    rows = np.arange(0, N, 4)
    peak = _peak(lambda: fit_path(Xc, y, family="binomial", rows=rows, n_penalties=10))
    assert 0.2 * X.nbytes < peak < 0.45 * X.nbytes   # the quarter, copied once
