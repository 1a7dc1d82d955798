"""Result tables: plain DataFrames built from fitted objects, one function each.

Column names follow the output contract (see DEVELOPERS.md); every table is
long and tidy so that the report, a spreadsheet or a plotting library can read
it without knowing how it was computed.
"""

from __future__ import annotations

import numpy as np
import pandas as pd


def _per_path(fits: dict, frame_of) -> pd.DataFrame:
    """``frame_of(fit)`` of every path, stacked, with its method and mix in front."""
    parts = []
    for (method, mix), fit in fits.items():
        frame = frame_of(fit)
        frame.insert(0, "mix", mix)
        frame.insert(0, "method", method)
        parts.append(frame)
    return pd.concat(parts, ignore_index=True)


def coefficients_table(fits: dict) -> pd.DataFrame:
    """method, mix, step, penalty, term, estimate (original units), estimate_std."""
    return _per_path(fits, lambda fit: fit.to_frame())


def path_table(fits: dict) -> pd.DataFrame:
    """One row per fitted penalty: method, mix, step, penalty, n_terms, deviance, deviance_explained."""
    return _per_path(fits, lambda fit: fit.summary_frame())


def _with_relaxed(frame: pd.DataFrame, relaxed_part, method_name) -> pd.DataFrame:
    """Name each row's method from its mix; append the relaxed lasso's rows (mix 1) after them."""
    out = frame.copy()
    out.insert(0, "method", [method_name(m) for m in out["mix"]])
    out["relaxation"] = np.nan
    if relaxed_part is None:
        return out
    extra = relaxed_part.copy()
    extra.insert(0, "mix", 1.0)
    extra.insert(0, "method", "relaxed lasso")
    extra = extra.reindex(columns=out.columns)   # columns it lacks (train_mean) stay empty
    return pd.concat([out, extra], ignore_index=True)


def cv_table(curves: pd.DataFrame, relaxed, method_name) -> pd.DataFrame:
    """method, mix, step, penalty, n_terms, metric, cv_mean, cv_se, train_mean, relaxation.

    The relaxed lasso's curves (one per relaxation) follow the penalised ones.
    """
    return _with_relaxed(curves, None if relaxed is None else relaxed.curves, method_name)


def picks_table(picks: pd.DataFrame, relaxed, method_name) -> pd.DataFrame:
    """method, mix, rule, step, penalty, n_terms, cv_mean, cv_se, terms (and relaxation)."""
    return _with_relaxed(picks, None if relaxed is None else relaxed.picks, method_name)


def folds_table(folds, rows) -> pd.DataFrame:
    """row (data row number in the input table, first data row = 1), fold (1..K), repeat if repeated."""
    frame = folds.to_frame()
    frame["row"] = np.asarray(rows)[frame["row"].to_numpy()] + 1
    frame["fold"] = frame["fold"] + 1
    return frame


def correlations_table(design) -> pd.DataFrame:
    """Pearson correlation of every pair of terms: term_a, term_b, r (each pair once)."""
    X = design.X
    sd = X.std(axis=0)
    keep = sd > 0
    names = [n for n, k in zip(design.names, keep) if k]
    r = np.corrcoef(X[:, keep], rowvar=False) if keep.sum() > 1 else np.ones((1, 1))
    a, b = np.triu_indices(len(names), k=1)
    return pd.DataFrame({"term_a": np.asarray(names, dtype=object)[a],
                         "term_b": np.asarray(names, dtype=object)[b], "r": r[a, b]})
