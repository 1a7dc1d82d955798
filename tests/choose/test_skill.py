"""Held-out skill of the chosen model, against scikit-learn's metrics.

References: scikit-learn ``roc_auc_score`` and ``mean_squared_error`` /
``mean_absolute_error``; the deviance explained against statsmodels' Binomial
family deviance. Data are invented.
"""

import numpy as np
import pytest
import statsmodels.api as sm
from sklearn.metrics import mean_absolute_error, mean_squared_error, roc_auc_score

from pathfinder.choose.folds import random_folds
from pathfinder.choose.problem import Problem
from pathfinder.choose.skill import held_out_skill


def _binary(seed=1, n=200):
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, 3))
    y = rng.binomial(1, 1 / (1 + np.exp(-(X[:, 0] - 0.5)))).astype(float)
    held = np.clip(1 / (1 + np.exp(-(0.8 * X[:, 0] - 0.4))) + rng.normal(0, 0.05, n), 0.01, 0.99)
    return Problem(X, y, "binomial", ("a", "b", "c")), held


def test_auc_per_fold_and_pooled_equal_scikit_learn():
    problem, held = _binary()
    splits = random_folds(problem.n, 4, seed=2).splits()
    table = held_out_skill(problem, held, splits).set_index("measure")
    per_fold = [roc_auc_score(problem.y[test], held[test]) for _, test in splits]   # sklearn
    assert table.loc["auc", "value"] == pytest.approx(np.mean(per_fold), rel=1e-12)
    assert table.loc["auc", "se"] == pytest.approx(np.std(per_fold, ddof=1) / 2, rel=1e-12)
    assert table.loc["auc_pooled", "value"] == pytest.approx(roc_auc_score(problem.y, held), rel=1e-12)


def test_deviance_explained_uses_each_folds_training_null_model():
    problem, held = _binary(seed=3)
    splits = random_folds(problem.n, 5, seed=1).splits()
    table = held_out_skill(problem, held, splits).set_index("measure")
    fam = sm.families.Binomial()                                     # statsmodels deviance
    values = [1 - fam.deviance(problem.y[test], held[test])
              / fam.deviance(problem.y[test], np.full(len(test), problem.y[train].mean()))
              for train, test in splits]
    assert table.loc["deviance_explained", "value"] == pytest.approx(np.mean(values), rel=1e-10)


def test_counts_and_measures_get_errors_in_their_own_units():
    rng = np.random.default_rng(4)
    X = rng.standard_normal((90, 2))
    y = rng.poisson(np.exp(0.5 + X[:, 0])).astype(float)
    held = np.exp(0.4 + 0.9 * X[:, 0])
    problem = Problem(X, y, "poisson", ("a", "b"))
    splits = random_folds(90, 3, seed=5).splits()
    table = held_out_skill(problem, held, splits).set_index("measure")
    rmse = [np.sqrt(mean_squared_error(y[t], held[t])) for _, t in splits]     # sklearn
    mae = [mean_absolute_error(y[t], held[t]) for _, t in splits]
    assert table.loc["rmse", "value"] == pytest.approx(np.mean(rmse), rel=1e-12)
    assert table.loc["mae", "value"] == pytest.approx(np.mean(mae), rel=1e-12)
    assert "auc" not in table.index


def test_a_fold_without_presences_gets_no_auc_but_the_pooled_auc_stands():
    problem, held = _binary(seed=6, n=60)
    y = problem.y.copy()
    y[:20] = 0
    problem = Problem(problem.X, y, "binomial", problem.names)
    splits = [(np.arange(20, 60), np.arange(20)), (np.arange(20), np.arange(20, 60))]
    table = held_out_skill(problem, held, splits).set_index("measure")
    assert table.loc["auc", "n_folds"] == 1
    assert table.loc["auc_pooled", "value"] == pytest.approx(roc_auc_score(y, held), rel=1e-12)
