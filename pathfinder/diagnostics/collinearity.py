"""How strongly the predictors move together.

Survey covariates come in families: temperature with elevation, nutrients with
land use, one soil measure with the next. A penalised path picks one member of
such a family more or less at random, so the selection of any single member
is unstable even when the family as a whole clearly matters. This module
gives the plain figures an ecologist checks before trusting a selection:

* :func:`correlation_matrix`   Pearson correlations, optionally weighted;
* :func:`correlation_clusters` families of predictors linked by strong
  correlations (|r| at or above a threshold; Dormann et al. 2013, Ecography
  36:27-46, use |r| > 0.7 as a working threshold);
* :func:`variance_inflation`   the variance inflation factor of each term;
* :func:`cluster_order`        an order of the terms that puts correlated ones
  side by side, for a heat map.

All functions are pure: arrays in, arrays out.
"""

from __future__ import annotations

import numpy as np
from scipy.cluster.hierarchy import fcluster, leaves_list, linkage
from scipy.spatial.distance import squareform

from ..defaults import CORRELATION_THRESHOLD
from ..errors import InputError

# Eigenvalues of the correlation matrix below this fraction of the largest are
# treated as exact zeros: a variance inflation factor above about 1e10 is an
# exact linear dependence blurred by rounding, and is reported as infinite.
COLLINEAR_TOL = 1e-10
# Rows of X read at a time when forming the correlations (bounds the memory
# used for the centred copy).
ROW_BLOCK = 65_536


def _matrix(X) -> np.ndarray:
    array = np.asarray(X)
    if array.ndim != 2:
        raise InputError(
            f"the predictors must be a table of sites by terms (two dimensions), "
            f"not shape {array.shape}")
    try:
        array = array.astype(float, copy=False)
    except (TypeError, ValueError):
        raise InputError("the predictors must be numbers; check the columns for text") from None
    if array.shape[0] < 2:
        raise InputError(f"correlations need at least 2 sites, got {array.shape[0]}")
    bad = np.flatnonzero(~np.isfinite(array).all(axis=1))
    if bad.size:
        raise InputError(
            f"the predictors have missing or infinite values in {bad.size} row(s) "
            f"(first at row {bad[0]}); fill them in or drop those sites")
    return array


def _weights(weights, n: int) -> np.ndarray:
    if weights is None:
        return np.full(n, 1.0)
    w = np.asarray(weights, dtype=float).ravel()
    if w.shape[0] != n:
        raise InputError(f"there are {w.shape[0]} weights for {n} sites; give one weight per site")
    if not np.all(np.isfinite(w)) or np.any(w < 0) or w.sum() <= 0:
        raise InputError("weights must be finite, non-negative and not all zero")
    return w * (n / w.sum())


def _square(R) -> np.ndarray:
    R = np.asarray(R, dtype=float)
    if R.ndim != 2 or R.shape[0] != R.shape[1]:
        raise InputError(f"a correlation matrix must be square, not shape {R.shape}")
    return R


def correlation_matrix(X, weights=None) -> np.ndarray:
    """Pearson correlation of every pair of columns of X, (p, p).

    With ``weights`` each site counts in proportion to its weight (weighted
    means and covariances). A column with no spread has no correlation with
    anything: its off-diagonal entries are NaN. The diagonal is 1.
    """
    return _correlations(X, weights)[0]


def _correlations(X, weights):
    """The correlation matrix and which columns have no spread."""
    X = _matrix(X)
    n, p = X.shape
    w = _weights(weights, n)
    mean = w @ X / n
    cov = np.zeros((p, p))
    for start in range(0, n, ROW_BLOCK):
        block = X[start:start + ROW_BLOCK] - mean
        cov += (block * w[start:start + ROW_BLOCK, None]).T @ block
    sd = np.sqrt(np.clip(np.diag(cov), 0.0, None))
    constant = sd <= 1e-12 * np.maximum(np.abs(mean), 1.0) * np.sqrt(n)
    with np.errstate(invalid="ignore", divide="ignore"):
        R = cov / np.outer(sd, sd)
    R[constant, :] = np.nan
    R[:, constant] = np.nan
    R = np.clip((R + R.T) / 2, -1.0, 1.0)
    np.fill_diagonal(R, 1.0)
    return R, constant


def correlation_clusters(R, threshold: float = CORRELATION_THRESHOLD) -> np.ndarray:
    """A cluster number for every term: families whose members all move together.

    Complete-linkage clustering of the distance 1 - |r|, cut at
    1 - ``threshold``: every pair of terms in a cluster has an absolute
    correlation of at least ``threshold``, so the members of a cluster can
    stand in for one another. (Single linkage would chain a-b and b-c into one
    family even when a and c hardly move together; on survey covariates that
    makes one giant cluster.) Clusters are numbered 1, 2, ... in the order
    their first term appears; a term close to no other is a cluster of its
    own. NaN correlations (a column without spread) count as 0.
    """
    R = _square(R)
    threshold = float(threshold)
    if not 0.0 < threshold <= 1.0:
        raise InputError(
            f"the correlation threshold must lie above 0 and at most 1, got {threshold:g}; "
            f"{CORRELATION_THRESHOLD} is a common working value")
    p = R.shape[0]
    if p == 1:
        return np.ones(1, dtype=np.int64)
    distance = 1.0 - np.abs(np.nan_to_num(R, nan=0.0))
    np.fill_diagonal(distance, 0.0)
    tree = linkage(squareform(distance, checks=False), method="complete")
    labels = fcluster(tree, t=1.0 - threshold + 1e-12, criterion="distance")
    renumber = {label: k + 1 for k, label in enumerate(dict.fromkeys(labels.tolist()))}
    return np.array([renumber[label] for label in labels], dtype=np.int64)


def variance_inflation(X, weights=None) -> np.ndarray:
    """The variance inflation factor of each column of X, (p,).

    ``VIF_j = 1 / (1 - R_j^2)``, where ``R_j^2`` is the share of the variance
    of column j explained by a linear regression (with intercept) on all the
    other columns; it is the j-th diagonal entry of the inverse of the
    correlation matrix. It is infinite for a column that is an exact linear
    combination of others (or has no spread at all). When some columns are
    exactly collinear the others still get their finite VIF: the diagonal of
    the pseudo-inverse, which equals ``1 / (1 - R_j^2)`` for every column
    outside the dependence.
    """
    R, constant = _correlations(X, weights)
    p = R.shape[0]
    vif = np.full(p, np.inf)
    spread = ~constant
    if not spread.any():
        return vif
    values, vectors = np.linalg.eigh(R[np.ix_(spread, spread)])
    null = values <= COLLINEAR_TOL * values.max()
    in_dependence = (vectors[:, null] ** 2).sum(axis=1) > COLLINEAR_TOL
    keep = vectors[:, ~null]
    finite = (keep ** 2 / values[~null]).sum(axis=1)
    finite[in_dependence] = np.inf
    vif[spread] = finite
    return vif


def cluster_order(R) -> list[int]:
    """Term positions ordered so that correlated terms sit side by side.

    Average-linkage hierarchical clustering of the distance ``1 - |r|``
    (scipy.cluster.hierarchy), read off as the order of the tree's leaves:
    the rows and columns of a correlation heat map in this order show the
    families of predictors as blocks. NaN correlations count as 0.
    """
    R = _square(R)
    p = R.shape[0]
    if p <= 2:
        return list(range(p))
    distance = 1.0 - np.abs(np.nan_to_num(R, nan=0.0))
    distance = np.clip((distance + distance.T) / 2, 0.0, 1.0)
    np.fill_diagonal(distance, 0.0)
    tree = linkage(squareform(distance, checks=False), method="average")
    return [int(j) for j in leaves_list(tree)]
