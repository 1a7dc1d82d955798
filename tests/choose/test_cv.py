"""Cross-validation curves and picks.

References: scikit-learn ``LassoCV.mse_path_`` for the curve; the
one-standard-error rule as defined by Breiman et al. (1984) and Hastie,
Tibshirani & Friedman (2009, ESL section 7.10).
"""

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from sklearn.linear_model import LassoCV

from pathfinder.choose.cv import cross_validate, pick_steps
from pathfinder.choose.problem import Problem
from pathfinder.choose.folds import random_folds, stratified_folds

from ..core.helpers import correlated_design, make_response


def _problem(family, n=300, p=12, seed=0, standardize=True, **extra):
    rng = np.random.default_rng(seed)
    X = correlated_design(rng, n, p, rho=0.5)
    coef = np.zeros(p)
    coef[[0, 3, 6]] = [0.8, -0.6, 0.4]
    y = make_response(rng, X, family, coef)
    return Problem(np.asfortranarray(X), y, family, tuple(f"x{j}" for j in range(p)),
                   standardize=standardize, **extra)


def test_gaussian_curve_equals_sklearn_lassocv():
    problem = _problem("gaussian", standardize=False)
    splits = random_folds(problem.n, 5, seed=3).splits()
    cv = cross_validate(problem, splits, mixes=(1.0,), n_penalties=40, fold_tol=1e-9)
    grid = cv.fits[1.0].penalties
    # Reference: scikit-learn LassoCV with the same folds and the same grid;
    # mse_path_ holds each fold's held-out mean squared error.
    ref = LassoCV(alphas=grid, cv=splits, tol=1e-12, max_iter=1_000_000).fit(problem.X, problem.y)
    ours = cv.curves[cv.curves.metric == "deviance"].cv_mean.to_numpy()
    assert np.allclose(ours, ref.mse_path_.mean(axis=1), rtol=1e-6)
    assert np.allclose(ref.alphas_, grid)


@pytest.mark.parametrize("family", ["gaussian", "binomial", "poisson"])
def test_one_se_pick_never_has_a_smaller_penalty_than_min(family):
    problem = _problem(family, seed=5)
    folds = (stratified_folds(problem.y, 5, seed=1) if family == "binomial"
             else random_folds(problem.n, 5, seed=1))
    cv = cross_validate(problem, folds.splits(), mixes=(1.0, 0.5), n_penalties=30)
    for mix, group in cv.picks.groupby("mix"):
        by_rule = group.set_index("rule")
        assert by_rule.loc["one_se", "penalty"] >= by_rule.loc["min", "penalty"]
        assert by_rule.loc["one_se", "n_terms"] <= by_rule.loc["min", "n_terms"] or mix < 1
    assert cv.best_mix in (1.0, 0.5)


@given(values=st.lists(st.floats(0.1, 10.0), min_size=3, max_size=30),
       ses=st.lists(st.floats(0.0, 2.0), min_size=30, max_size=30))
def test_pick_rules_on_any_curve(values, ses):
    mean = np.array(values)
    se = np.array(ses[: len(values)])
    picks = pick_steps(mean, se)
    best = picks["min"]
    # min: the smallest mean, earliest step (largest penalty) on ties
    assert mean[best] == mean.min() and np.all(mean[:best] > mean.min())
    # one_se: the earliest step within one SE of the minimum (Breiman et al. 1984)
    assert picks["one_se"] <= best
    assert mean[picks["one_se"]] <= mean[best] + se[best]
    assert np.all(mean[: picks["one_se"]] > mean[best] + se[best])


def test_training_error_falls_while_held_out_error_turns_up():
    # The bias-variance picture (common practice): with many noise predictors
    # the training deviance keeps falling along the path while the held-out
    # deviance has an interior minimum.
    rng = np.random.default_rng(9)
    X = rng.standard_normal((120, 60))
    y = X[:, 0] + rng.standard_normal(120)
    problem = Problem(X, y, "gaussian", tuple(f"x{j}" for j in range(60)))
    cv = cross_validate(problem, random_folds(120, 5, seed=2).splits(), n_penalties=50)
    curve = cv.curves[cv.curves.metric == "deviance"]
    assert np.all(np.diff(curve.train_mean.to_numpy()) <= 1e-9)
    best = curve.cv_mean.to_numpy().argmin()
    assert 0 < best < len(curve) - 1
    assert curve.cv_mean.iloc[-1] > curve.cv_mean.iloc[best]


def test_binomial_metrics_are_all_reported():
    problem = _problem("binomial", seed=2)
    folds = stratified_folds(problem.y, 4, seed=0)
    cv = cross_validate(problem, folds.splits(), metrics=("auc", "brier", "log_loss"), n_penalties=20)
    assert set(cv.curves.metric) == {"deviance", "auc", "brier", "log_loss"}
    auc = cv.curves[cv.curves.metric == "auc"]
    assert auc.cv_mean.between(0, 1).all()
    assert auc.cv_mean.iloc[-1] > 0.6   # the invented signal is real


def test_repeated_folds_take_their_standard_error_over_fold_positions():
    """Hastie, Tibshirani & Friedman (2009, section 7.10): SE over the K folds; repeats are
    averaged per fold position first, so the SE does not shrink as 1/sqrt(repeats)."""
    from pathfinder.choose.cv import fold_mean_se

    rng = np.random.default_rng(5)
    K, R = 5, 4
    scores = rng.normal(size=(R * K, 3))              # repeat-major: repeat r, fold j at r K + j
    mean, se = fold_mean_se(scores, repeats=R)
    positions = scores.reshape(R, K, 3).mean(axis=0)
    assert np.allclose(mean, scores.mean(axis=0))
    assert np.allclose(se, positions.std(axis=0, ddof=1) / np.sqrt(K))
    pooled = scores.std(axis=0, ddof=1) / np.sqrt(R * K)   # the rule this replaces
    assert not np.allclose(se, pooled)



def test_a_secondary_metric_undefined_on_a_fold_never_stops_the_run():
    """The AUC of a fold without presences is undefined (Mann-Whitney form); that fold gets
    no AUC and the other folds are pooled, while the deviance picks the penalty."""
    rng = np.random.default_rng(8)
    X = rng.standard_normal((120, 4))
    y = np.zeros(120)
    y[:12] = 1
    problem = Problem(X, y, "binomial", tuple(f"x{j}" for j in range(4)))
    fold = np.arange(120) % 4
    fold[:12] = np.arange(12) % 3             # fold 3 holds no presence
    splits = [(np.flatnonzero(fold != k), np.flatnonzero(fold == k)) for k in range(4)]
    cv = cross_validate(problem, splits, metrics=("deviance", "auc"), n_penalties=8)
    auc = cv.curves[cv.curves.metric == "auc"]
    assert np.isfinite(auc.cv_mean).all()
    with pytest.raises(Exception, match="no presences"):
        cross_validate(problem, splits, metrics=("auc",), primary="auc", n_penalties=8)


def test_on_spatial_blocks_the_auc_curve_pools_the_held_out_predictions():
    """Hijmans (2012, Ecology 93:679-688): pooled over folds, against scikit-learn's
    roc_auc_score of the same pooled predictions (fitted here with fit_path per fold)."""
    from sklearn.metrics import roc_auc_score

    from pathfinder.core import fit_path

    rng = np.random.default_rng(12)
    X = rng.standard_normal((160, 4))
    y = rng.binomial(1, 1 / (1 + np.exp(-(X[:, 0] - X[:, 1])))).astype(float)
    problem = Problem(X, y, "binomial", tuple(f"x{j}" for j in range(4)))
    splits = random_folds(160, 4, seed=3).splits()
    cv = cross_validate(problem, splits, metrics=("deviance", "auc"), n_penalties=6,
                        pool_auc=True, fold_tol=1e-9)
    curve = cv.curves[cv.curves.metric == "auc"].cv_mean.to_numpy()
    grid = cv.fits[1.0].penalties
    pooled = np.empty((160, len(grid)))
    for train, test in splits:
        fit = fit_path(X[train], y[train], family="binomial", penalties=grid, tol=1e-9)
        pooled[test] = fit.predict(X[test])
    expected = [roc_auc_score(y, pooled[:, k]) for k in range(1, len(grid))]
    assert np.allclose(curve[1:], expected, atol=1e-6)
