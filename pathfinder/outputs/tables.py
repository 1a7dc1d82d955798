"""Result tables: plain DataFrames built from fitted objects, one function each.

Column names follow the output contract (see DEVELOPERS.md); every table is
long and tidy so that the report, a spreadsheet or a plotting library can read
it without knowing how it was computed.
"""

from __future__ import annotations

import pandas as pd


def coefficients_table(fits: dict) -> pd.DataFrame:
    """method, mix, step, penalty, term, estimate (original units), estimate_std."""
    parts = []
    for (method, mix), fit in fits.items():
        long = fit.to_frame()
        long.insert(0, "mix", mix)
        long.insert(0, "method", method)
        parts.append(long)
    return pd.concat(parts, ignore_index=True)


def path_table(fits: dict) -> pd.DataFrame:
    """One row per fitted penalty: method, mix, step, penalty, n_terms, deviance, deviance_explained."""
    parts = []
    for (method, mix), fit in fits.items():
        summary = fit.summary_frame().rename(columns={"deviance_ratio": "deviance_explained"})
        summary.insert(0, "mix", mix)
        summary.insert(0, "method", method)
        parts.append(summary)
    return pd.concat(parts, ignore_index=True)
