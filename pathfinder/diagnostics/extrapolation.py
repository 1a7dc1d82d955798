"""Is a new site like the sites that were surveyed? Two plain measures.

A habitat model is only as good as the conditions it was trained on. At a
new site whose covariates lie beyond the sampled conditions the model
extrapolates, and nothing in the prediction itself warns about it. This
module gives the warnings.

``outside_range``
    For each covariate, how far the new value lies beyond the training range
    ``[min, max]``, in units of that range (0.5 = half the range beyond the
    nearest end). Counts the covariates outside and names the worst.

``mess``
    The multivariate environmental similarity surface of Elith, Kearney &
    Phillips (2010, Methods Ecol. Evol. 1:330-342). For covariate ``i`` let
    ``f`` be the percentage of training values smaller than the new value
    ``p`` and ``min``, ``max`` the training range. The similarity is

    * ``f = 0``:        ``(p - min) / (max - min) * 100``
    * ``0 < f <= 50``:  ``2 f``
    * ``50 <= f < 100``: ``2 (100 - f)``
    * ``f = 100``:      ``(max - p) / (max - min) * 100``

    and the MESS of a site is the smallest similarity over its covariates. It
    is 100 at the training median of every covariate, 0 at the edge of the
    training range, and negative outside it, by the distance beyond the range
    as a percentage of the range. A negative MESS marks a novel site. The
    covariate with the smallest similarity is the most dissimilar one.

The training values are summarised by their 101 percentiles (0, 1, ..., 100),
so a model file need not carry the survey. ``f`` is read from that table by
linear interpolation: between two neighbouring percentiles it rises
linearly, and where several percentiles share one value (ties in the
training data) ``f`` at that value is the lowest of them, the share of
training values strictly below it. So ``f`` is 0 at the training minimum,
and 100 at the maximum unless the maximum is shared by several percentiles.
With many training sites this matches counting the training values below
``p`` directly, as the paper does; with few it is a smoothed version of it.

:func:`training_percentiles` makes the table, optionally with observation
weights.
"""

from __future__ import annotations

import numpy as np

N_PERCENTILES = 101  # 0, 1, ..., 100


def training_percentiles(values, weights=None) -> np.ndarray:
    """The 101 percentiles (0..100) of training values, optionally weighted.

    Without weights these are numpy's default (linear) percentiles. With
    weights, rows of zero weight are left out and the sorted values ``x_k``
    with weights ``w_k`` (summing to 1) sit at the cumulative positions
    ``u_k = (W_k - w_k) / (1 - w_last)``, ``W_k`` the running sum; the
    percentile ``q`` is read from ``(u, x)`` by linear interpolation. Equal
    weights give ``u_k = (k - 1) / (n - 1)``, which is the linear rule, so
    the weighted and plain tables agree when the weights are equal. The 0th
    percentile is the smallest value and the 100th the largest.
    """
    x = np.asarray(values, dtype=np.float64).ravel()
    if x.size == 0 or not np.all(np.isfinite(x)):
        raise ValueError("training values must be finite and at least one")
    q = np.arange(N_PERCENTILES, dtype=np.float64)
    if weights is None:
        return np.percentile(x, q)
    w = np.asarray(weights, dtype=np.float64).ravel()
    if w.shape != x.shape or not np.all(np.isfinite(w)) or np.any(w < 0) or not np.any(w > 0):
        raise ValueError("weights must be finite, non-negative, one per value and not all zero")
    keep = w > 0
    order = np.argsort(x[keep], kind="stable")
    x, w = x[keep][order], w[keep][order]
    if x.size == 1:
        return np.full(N_PERCENTILES, x[0])
    w = w / w.sum()
    u = (np.cumsum(w) - w) / (1.0 - w[-1])
    u[-1] = 1.0
    out = np.interp(q / 100.0, u, x)
    out[0], out[-1] = x[0], x[-1]
    return out


def _check_shapes(new_values, ranges, percentiles=None):
    p = np.asarray(new_values, dtype=np.float64)
    if p.ndim != 2:
        raise ValueError("new values must be a table (n sites, m covariates)")
    r = np.asarray(ranges, dtype=np.float64)
    if r.shape != (p.shape[1], 2):
        raise ValueError(f"ranges must be ({p.shape[1]}, 2): one (min, max) per covariate")
    if np.any(r[:, 1] < r[:, 0]):
        raise ValueError("each training range must have min <= max")
    if percentiles is None:
        return p, r, None
    table = np.asarray(percentiles, dtype=np.float64)
    if table.shape != (p.shape[1], N_PERCENTILES):
        raise ValueError(f"percentiles must be ({p.shape[1]}, {N_PERCENTILES})")
    if np.any(np.diff(table, axis=1) < 0):
        raise ValueError("each row of percentiles must be non-decreasing")
    return p, r, table


def percent_below(new_values, percentiles) -> np.ndarray:
    """``f``: the percentage of training values below each new value (0..100).

    Read from one covariate's 101 percentiles as described in the module
    notes; NaN where the new value is missing.
    """
    table = np.asarray(percentiles, dtype=np.float64)
    p = np.asarray(new_values, dtype=np.float64)
    j = np.searchsorted(table, p, side="left")  # first percentile >= p
    f = np.where(j == 0, 0.0, 100.0)
    inside = (j > 0) & (j < N_PERCENTILES)
    jj = j[inside]
    upper, lower = table[jj], table[jj - 1]
    step = np.where(upper > lower, upper - lower, 1.0)
    f[inside] = np.where(upper == p[inside], jj, jj - 1 + (p[inside] - lower) / step)
    f[np.isnan(p)] = np.nan
    return f


def similarity(new_values, percentiles, low, high) -> np.ndarray:
    """Elith et al. (2010) similarity of new values of one covariate (n,)."""
    p = np.asarray(new_values, dtype=np.float64)
    f = percent_below(p, percentiles)
    span = high - low
    if span > 0:
        below, above = (p - low) / span * 100.0, (high - p) / span * 100.0
    else:  # no spread in training: only that very value is not novel
        below = np.where(p == low, 0.0, -np.inf)
        above = np.where(p == high, 0.0, -np.inf)
    return np.select(
        [np.isnan(f), f == 0, f <= 50, f < 100],
        [np.nan, below, 2.0 * f, 2.0 * (100.0 - f)],
        default=above,
    )


def mess(new_values, percentiles, ranges) -> tuple[np.ndarray, np.ndarray]:
    """MESS of each new site and the index of its most dissimilar covariate.

    ``new_values`` (n, m) holds the covariates of n new sites, ``percentiles``
    (m, 101) the training percentiles of each covariate and ``ranges`` (m, 2)
    its training (min, max). Returns ``(scores (n,), most_dissimilar (n,))``.
    A site with a missing value gets a NaN score and index -1, and so does
    every site when there are no covariates (m = 0). A covariate with no
    spread in training (min = max) scores 0 at that value and -inf elsewhere.
    """
    p, r, table = _check_shapes(new_values, ranges, percentiles)
    n, m = p.shape
    if m == 0:
        return np.full(n, np.nan), np.full(n, -1, dtype=np.int64)
    each = np.column_stack([similarity(p[:, i], table[i], r[i, 0], r[i, 1]) for i in range(m)])
    missing = np.isnan(each).any(axis=1)
    filled = np.where(np.isnan(each), np.inf, each)
    worst = np.argmin(filled, axis=1).astype(np.int64)
    scores = filled[np.arange(n), worst]
    scores[missing] = np.nan
    worst[missing] = -1
    return scores, worst


def outside_range(new_values, ranges) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """How many covariates of each new site lie outside the training range.

    Returns ``(count (n,), most_extreme (n,), distance (n,))``: the number of
    covariates beyond their training (min, max); the index of the one
    farthest beyond (-1 when none is); and that distance in units of its
    training range (0 when none is). Missing values are not counted. A
    covariate with no spread in training (min = max) is infinitely far out
    at any other value.
    """
    p, r, _ = _check_shapes(new_values, ranges)
    n, m = p.shape
    if m == 0:
        return np.zeros(n, dtype=np.int64), np.full(n, -1, dtype=np.int64), np.zeros(n)
    low, high = r[:, 0], r[:, 1]
    span = high - low
    beyond = np.fmax(np.fmax(low - p, p - high), 0.0)  # NaN (missing) -> 0
    with np.errstate(divide="ignore", invalid="ignore"):
        distance = np.where(beyond > 0, beyond / np.where(span > 0, span, 0.0), 0.0)
    count = (distance > 0).sum(axis=1).astype(np.int64)
    worst = np.argmax(distance, axis=1).astype(np.int64)
    farthest = distance[np.arange(n), worst]
    worst[count == 0] = -1
    return count, worst, farthest
