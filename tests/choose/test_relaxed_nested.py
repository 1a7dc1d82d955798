"""The relaxed lasso (Meinshausen 2007) and nested cross-validation."""

import numpy as np
import pytest
import statsmodels.api as sm

from pathfinder.choose.cv import cross_validate
from pathfinder.choose.problem import Problem
from pathfinder.choose.folds import random_folds, stratified_folds
from pathfinder.choose.metrics import mean_deviance
from pathfinder.choose.nested import FoldPlan, choices, comparison_table, mean_jaccard, nested_cv
from pathfinder.choose.problem import refit
from pathfinder.choose.relaxed import RELAXATIONS, relaxed_lasso

from ..core.helpers import correlated_design, make_response


def _problem(family, n=240, p=10, seed=0, signal=True):
    rng = np.random.default_rng(seed)
    X = correlated_design(rng, n, p, rho=0.5)
    coef = np.zeros(p)
    if signal:
        coef[[0, 2, 5]] = [0.9, -0.7, 0.5]
    y = make_response(rng, X, family, coef)
    return Problem(np.asfortranarray(X), y, family, tuple(f"x{j}" for j in range(p)))


def test_relaxation_one_is_the_lasso_itself():
    problem = _problem("binomial")
    splits = stratified_folds(problem.y, 5, seed=0).splits()
    cv = cross_validate(problem, splits, n_penalties=30)
    relaxed = relaxed_lasso(problem, cv.fits[1.0], splits)
    assert set(relaxed.curves.relaxation) == set(RELAXATIONS)
    lasso_curve = cv.curves[cv.curves.metric == "deviance"].cv_mean.to_numpy()
    at_one = relaxed.curves[relaxed.curves.relaxation == 1.0].cv_mean.to_numpy()
    # Meinshausen (2007): relaxation 1 reproduces the lasso path exactly.
    assert np.allclose(at_one, lasso_curve, rtol=1e-6)


@pytest.mark.parametrize("family", ["gaussian", "binomial", "poisson"])
def test_refit_on_the_active_set_is_the_maximum_likelihood_fit(family):
    problem = _problem(family, seed=3)
    fit = problem.fit(n_penalties=30)
    k = int(np.argmax(fit.n_terms >= 3))
    active = np.flatnonzero(fit.coef[k])
    rows = np.arange(problem.n)
    b0, b = refit(problem, rows, active)
    fams = {"gaussian": sm.families.Gaussian(), "binomial": sm.families.Binomial(),
            "poisson": sm.families.Poisson()}
    # Reference: statsmodels GLM on the active columns (the refit carries a
    # 1e-6 ridge, far below this tolerance).
    ref = sm.GLM(problem.y, sm.add_constant(problem.X[:, active]), family=fams[family]).fit()
    assert np.allclose(b[active], ref.params[1:], atol=1e-4)
    assert b0 == pytest.approx(ref.params[0], abs=1e-4)
    assert np.all(b[np.setdiff1d(np.arange(problem.X.shape[1]), active)] == 0)


def test_relaxed_model_blends_lasso_and_refit():
    problem = _problem("gaussian", seed=4)
    splits = random_folds(problem.n, 5, seed=1).splits()
    cv = cross_validate(problem, splits, n_penalties=30)
    relaxed = relaxed_lasso(problem, cv.fits[1.0], splits)
    lasso = cv.fits[1.0]
    for _, pick in relaxed.picks.iterrows():
        k, relaxation = int(pick.step), pick.relaxation
        b0_refit, b_refit = refit(problem, np.arange(problem.n), np.flatnonzero(lasso.coef[k]))
        b0, b = relaxed.models[pick.rule]
        assert np.allclose(b, relaxation * lasso.coef[k] + (1 - relaxation) * b_refit)
        assert b0 == pytest.approx(relaxation * lasso.intercept[k] + (1 - relaxation) * b0_refit)


def test_nested_error_is_honest_on_pure_noise():
    # Pure noise (invented): nothing predicts the response. Selection redone
    # inside each outer fold cannot beat the null model on the outer folds by
    # more than noise, while the inner cross-validated minimum is optimistic
    # (it is the smallest of many noisy estimates).
    problem = _problem("gaussian", n=150, p=40, seed=8, signal=False)
    outer = random_folds(problem.n, 5, seed=2)
    plan = FoldPlan(k=5)
    rows = nested_cv(problem, outer.splits(), plan, seed=3, inner_k=5, mixes=(1.0,), n_penalties=30)
    lasso_min = rows[(rows.method == "lasso") & (rows.rule == "min")]
    null_scores = []
    for train, test in outer.splits():
        mu = np.full(len(test), problem.y[train].mean())
        null_scores.append(mean_deviance(problem.y[test], mu, "gaussian"))
    outer_mean, null_mean = lasso_min.outer_score.mean(), np.mean(null_scores)
    se = lasso_min.outer_score.std(ddof=1) / np.sqrt(len(lasso_min))
    assert outer_mean >= null_mean - 2 * se
    assert (lasso_min.outer_score - lasso_min.inner_score).mean() > 0   # optimism shows


def test_comparison_table_and_jaccard():
    problem = _problem("binomial", seed=5)
    folds = stratified_folds(problem.y, 4, seed=0)
    cv = cross_validate(problem, folds.splits(), mixes=(1.0, 0.5, 0.0), n_penalties=25)
    relaxed = relaxed_lasso(problem, cv.fits[1.0], folds.splits())
    outer = nested_cv(problem, folds.splits(), FoldPlan(k=4, family="binomial"), seed=1,
                      inner_k=3, mixes=(1.0, 0.5, 0.0), n_penalties=25)
    table = comparison_table(choices(cv, relaxed), outer, "deviance")
    assert {"lasso", "ridge", "elastic net", "relaxed lasso"} == set(table.method)
    assert set(table.rule) == {"min", "one_se"}
    assert table.outer_mean.notna().all() and (table.outer_se > 0).all()
    assert np.all(table.jaccard.between(0, 1))
    assert table[table.method == "ridge"].n_terms.eq(10).all()
    assert mean_jaccard(["a;b", "a;b", "a;b"]) == 1.0
    assert mean_jaccard(["a;b", "c"]) == 0.0
    assert mean_jaccard(["a;b", "a"]) == pytest.approx(0.5)


def test_inner_folds_follow_the_groups():
    rng = np.random.default_rng(1)
    groups = np.repeat(np.arange(12), 10)
    plan = FoldPlan(k=4, groups=groups)
    rows = np.flatnonzero(groups != 3)
    inner = plan.make(rng.standard_normal(120), rows, seed=2)
    for g in np.unique(groups[rows]):
        assert len(set(inner.fold[groups[rows] == g])) == 1


def test_best_subset_redone_inside_outer_folds_does_not_beat_the_null_on_noise():
    # Pure noise (invented): if the full data leaked into subset selection, the
    # chosen model would look better than the null model on the outer folds.
    from pathfinder.choose.selectors import SubsetSelector
    problem = _problem("gaussian", n=120, p=12, seed=21, signal=False)
    outer = random_folds(problem.n, 5, seed=4)
    rows = nested_cv(problem, outer.splits(), FoldPlan(k=5), seed=5, inner_k=3, mixes=(1.0,),
                     n_penalties=20, relaxed_lasso=False, selectors=(SubsetSelector(),))
    null_scores = [mean_deviance(problem.y[test], np.full(len(test), problem.y[train].mean()), "gaussian")
                   for train, test in outer.splits()]
    for method, rule in (("best subset", "aicc"), ("best subset", "bic"), ("stepwise", "aic")):
        mine = rows[(rows.method == method) & (rows.rule == rule)].outer_score
        se = mine.std(ddof=1) / np.sqrt(len(mine))
        assert mine.mean() >= np.mean(null_scores) - 2 * se, (method, rule)


def test_held_out_predictions_come_from_each_outer_folds_own_choice():
    """Each site's held-out prediction is the model its outer fold chose without it; the
    outer score of that fold is the metric of those very predictions (a consistency check
    against pathfinder.choose.metrics.mean_deviance, itself checked against statsmodels)."""
    from pathfinder.choose.selectors import SubsetSelector
    problem = _problem("gaussian", n=90, p=6, seed=2)
    outer = random_folds(problem.n, 3, seed=1)
    rows, predictions = nested_cv(problem, outer.splits(), FoldPlan(k=3), seed=5, inner_k=3,
                                  mixes=(1.0,), n_penalties=12, relaxed_lasso=False,
                                  selectors=(SubsetSelector(),), keep_predictions=True)
    assert set(predictions) == set(zip(rows.method, rows.rule))
    for (method, rule), held in predictions.items():
        assert np.isfinite(held).all()
        for k, (_, test) in enumerate(outer.splits()):
            score = rows[(rows.method == method) & (rows.rule == rule) & (rows.fold == k)].outer_score
            assert float(score.iloc[0]) == pytest.approx(
                mean_deviance(problem.y[test], held[test], "gaussian"), rel=1e-12)
