"""Response curves of a chosen model, and where the data behind them lie.

A response curve shows the model's prediction (on the response scale) as one
predictor runs across its observed range while every other predictor is held
at a typical value: its median for numbers, its most common class for
factors. Squares and interactions follow the varied predictor through the
recorded terms, so a hump-shaped (unimodal) response shows as a hump. The rug
is a sample of the observed values, so a reader sees where the curve rests on
data and where it is drawn through empty space.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..core.families import get_family
from ..data.design import apply_design

POINTS = 60
RUG_MAX = 400


def typical_row(frame: pd.DataFrame, categorical) -> dict:
    """Median of every numeric column, most common class of every factor."""
    row = {}
    for name in frame.columns:
        if name in categorical:
            row[name] = frame[name].astype(str).value_counts().index[0]
        else:
            row[name] = float(np.median(frame[name].to_numpy(dtype=float)))
    return row


def response_curves(frame, categorical, terms, reference_levels, intercept, coef, family,
                    *, seed=0, points=POINTS):
    """Curves for every numeric source column of a term with a non-zero coefficient.

    Returns ``(curves, rug)``: curves has columns term (the source column),
    value, fitted; rug has term and value (at most ``RUG_MAX`` per column).
    Predictions are per unit of effort when the model has an effort offset.
    """
    fam = get_family(family)
    used = [t for t, b in zip(terms, coef) if b != 0]
    sources = [s for s in dict.fromkeys(s for t in used for s in t.sources) if s not in categorical]
    base = typical_row(frame, categorical)
    rng = np.random.default_rng(seed)
    curve_parts, rug_parts = [], []
    for name in sources:
        observed = frame[name].to_numpy(dtype=float)
        grid = np.linspace(observed.min(), observed.max(), points)
        rows = pd.DataFrame([base] * points)
        rows[name] = grid
        X = apply_design(terms, reference_levels, rows)
        fitted = fam.inverse_link(intercept + X @ coef)
        curve_parts.append(pd.DataFrame({"term": name, "value": grid, "fitted": fitted}))
        sample = observed if len(observed) <= RUG_MAX else rng.choice(observed, RUG_MAX, replace=False)
        rug_parts.append(pd.DataFrame({"term": name, "value": np.sort(sample)}))
    empty = pd.DataFrame({"term": [], "value": [], "fitted": []})
    curves = pd.concat(curve_parts, ignore_index=True) if curve_parts else empty
    rug = pd.concat(rug_parts, ignore_index=True) if rug_parts else empty[["term", "value"]]
    return curves, rug
