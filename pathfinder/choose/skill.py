"""Held-out skill of one model in terms a reader uses, from its held-out predictions.

Given each site's prediction by a model that did not see it (in pathfinder:
the model its outer fold chose, see :func:`pathfinder.choose.nested.nested_cv`),
this module reports how good those predictions are, fold by fold, with the
mean over folds and its standard error ``sd / sqrt(K)``:

* ``deviance_explained``  1 - deviance(model) / deviance(null model) on the
  held-out sites, the null model being the intercept-only fit on the fold's
  training sites (negative when the model predicts new sites worse than the
  plain average does);
* presence/absence: ``auc``, per fold (folds without presences or without
  absences get no value), and ``auc_pooled`` over all held-out predictions
  together. On spatial-block folds a fold holds few places, so its AUC
  measures discrimination within a block only; the pooled AUC compares sites
  across the whole region (Hijmans 2012, Ecology 93:679-688) and is the one
  to quote there;
* counts and continuous responses: ``rmse`` and ``mae``, the typical error in
  the response's own units.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..errors import InputError
from .metrics import auc, deviance_explained, mae, mse
from .problem import Problem


def _fold_rows(problem: Problem, held, splits):
    """Per fold: (metric -> value) on its held-out sites."""
    fam = problem.family
    out = []
    for train, test in splits:
        y, mu = problem.y[test], held[test]
        w = problem.part(problem.weights, test)
        row = {"deviance_explained": deviance_explained(y, mu, problem.null_means(train, test),
                                                        fam, w)}
        if fam.binary:
            try:
                row["auc"] = auc(y, mu, w)
            except InputError:              # a fold without presences or without absences
                row["auc"] = np.nan
        else:
            row["rmse"] = float(np.sqrt(mse(y, mu, w)))
            row["mae"] = mae(y, mu, w)
        out.append(row)
    return pd.DataFrame(out)


def held_out_skill(problem: Problem, held, splits, scheme: str = "") -> pd.DataFrame:
    """One row per measure: measure, value, se, n_folds, scheme.

    ``held`` holds each site's held-out prediction (NaN for sites in no
    fold); ``splits`` are the (train, test) folds that made them.
    """
    held = np.asarray(held, dtype=float)
    splits = [(np.asarray(a), np.asarray(b)) for a, b in splits]
    if not splits or np.isnan(np.concatenate([held[b] for _, b in splits])).any():
        raise InputError("held-out skill needs a held-out prediction for every site of every fold")
    per_fold = _fold_rows(problem, held, splits)
    rows = []
    for measure in per_fold.columns:
        values = per_fold[measure].to_numpy(dtype=float)
        values = values[np.isfinite(values)]
        k = len(values)
        rows.append({"measure": measure, "value": values.mean() if k else np.nan,
                     "se": values.std(ddof=1) / np.sqrt(k) if k > 1 else np.nan,
                     "n_folds": k, "scheme": scheme})
    if problem.family.binary:
        every = np.concatenate([b for _, b in splits])
        w = problem.part(problem.weights, every)
        rows.append({"measure": "auc_pooled", "value": auc(problem.y[every], held[every], w),
                     "se": np.nan, "n_folds": len(splits), "scheme": scheme})
    return pd.DataFrame(rows)
