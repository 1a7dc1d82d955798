"""Best-subset and stepwise searches, Akaike weights, against outside references.

References named beside each check: brute-force enumeration with numpy
``lstsq`` and with statsmodels GLM fits (``llf``, ``aic``, ``bic_llf``,
``info_criteria``, ``deviance``; OLS ``rsquared_adj``), Hurvich & Tsai (1989,
Biometrika 76:297-307) for AICc, Burnham & Anderson (2002, Model Selection and
Multimodel Inference) for Akaike weights, the confidence set, summed weights
and the full model average, Mallows' Cp (its value p + 1 for the full model),
and Efron, Hastie, Johnstone & Tibshirani (2004, Ann. Statist. 32:407-499) for
the diabetes data. Other data are invented.
"""

import math
from itertools import combinations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from hypothesis import given
from hypothesis import strategies as st

from pathfinder.choose import subset_search, subsets
from pathfinder.choose.problem import Problem
from pathfinder.choose.subsets import (akaike_table, best_subsets, count_subsets, model_average,
                                       stepwise, subset_choice, variable_importance)
from pathfinder.errors import InputError

SM_FAMILIES = {"gaussian": sm.families.Gaussian(), "binomial": sm.families.Binomial(),
               "poisson": sm.families.Poisson()}


def invented(seed, family, n=150, p=6, offset=False, weights=False):
    """Invented survey: three real effects, the rest noise, on mixed scales."""
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, p)) * rng.uniform(0.5, 4, p) + rng.uniform(-5, 5, p)
    Z = (X - X.mean(0)) / X.std(0)
    eta = 0.2 + 0.8 * Z[:, 0] - 0.5 * Z[:, 1] + 0.3 * Z[:, 2]
    off = rng.uniform(-0.5, 0.5, n) if offset else None
    eta_all = eta + (0 if off is None else off)
    if family == "gaussian":
        y = eta_all + rng.standard_normal(n)
    elif family == "binomial":
        y = rng.binomial(1, 1 / (1 + np.exp(-eta_all))).astype(float)
    else:
        y = rng.poisson(np.exp(eta_all)).astype(float)
    w = rng.uniform(0.2, 3.0, n) if weights else None
    return Problem(X, y, family, tuple(f"v{j + 1}" for j in range(p)), offset=off, weights=w)


def sm_fit(problem, cols):
    A = sm.add_constant(problem.X[:, list(cols)], has_constant="add")
    w = problem.weights
    freq = None if w is None else w * len(w) / w.sum()      # weights rescaled to sum to n
    return sm.GLM(problem.y, A, family=SM_FAMILIES[problem.family], offset=problem.offset,
                  freq_weights=freq).fit(tol=1e-12)


def names_of(problem, cols):
    return ";".join(problem.names[j] for j in cols)


# ---- exhaustive search against brute force ---------------------------------------

@pytest.mark.parametrize("weighted", [False, True])
def test_gaussian_best_subset_equals_lstsq_enumeration(weighted):
    problem = invented(1, "gaussian", n=120, p=10, weights=weighted)
    search = best_subsets(problem, keep_per_size=3)
    n, p = problem.X.shape
    w = np.ones(n) if problem.weights is None else problem.weights * n / problem.weights.sum()
    sw = np.sqrt(w)
    for k in range(p + 1):
        found = []
        for cols in combinations(range(p), k):
            A = np.column_stack([np.ones(n), problem.X[:, cols]]) * sw[:, None]
            b = np.linalg.lstsq(A, problem.y * sw, rcond=None)[0]
            found.append((float(np.sum((problem.y * sw - A @ b) ** 2)), cols))
        found.sort()
        mine = search.table[search.table.k == k]
        # Reference: brute-force enumeration with numpy lstsq (weighted by sqrt(w)).
        assert mine["terms"].iloc[0] == names_of(problem, found[0][1])
        assert mine["deviance"].iloc[0] == pytest.approx(found[0][0], rel=1e-9)
        top = min(3, len(found))
        assert list(mine["terms"]) == [names_of(problem, c) for _, c in found[:top]]
        assert np.allclose(mine["deviance"], [r for r, _ in found[:top]], rtol=1e-9)


def test_binomial_exhaustive_search_equals_statsmodels_fits():
    problem = invented(2, "binomial", n=250, p=8)
    search = best_subsets(problem)
    best = search.best_by_size
    for k in range(9):
        fits = [(sm_fit(problem, cols).llf, cols) for cols in combinations(range(8), k)]
        llf, cols = max(fits, key=lambda t: t[0])
        # Reference: statsmodels GLM(Binomial) llf of every subset, best of each size.
        assert best["terms"][k] == names_of(problem, cols)
        assert best["log_likelihood"][k] == pytest.approx(llf, rel=1e-9)


@pytest.mark.parametrize("family,offset,weights", [("gaussian", False, False),
                                                   ("binomial", False, False),
                                                   ("poisson", True, False),
                                                   ("binomial", False, True)])
def test_criteria_of_every_model_equal_statsmodels(family, offset, weights):
    problem = invented(3, family, n=160, p=5, offset=offset, weights=weights)
    search = best_subsets(problem, keep_per_size=4)
    counted = best_subsets(problem, keep_per_size=4, count_variance=True)
    for i, row in search.table.iterrows():
        cols = [problem.names.index(t) for t in row.terms.split(";") if t]
        ref = sm_fit(problem, cols)
        # Reference: statsmodels GLM llf, aic, bic_llf and deviance (k = df_model + 1,
        # Gaussian scale not counted; Gaussian llf with the ML variance RSS / n;
        # observation weights as statsmodels' freq_weights rescaled to sum to n).
        assert row.log_likelihood == pytest.approx(ref.llf, rel=1e-9)
        assert row.aic == pytest.approx(ref.aic, rel=1e-9)
        assert row.bic == pytest.approx(ref.bic_llf, rel=1e-9)
        assert row.deviance == pytest.approx(ref.deviance, rel=1e-8)
        # Reference: statsmodels GLMResults.info_criteria(..., dk_params=1) counts the Gaussian scale.
        extra = 1 if family == "gaussian" else 0
        other = counted.table.iloc[i]
        assert other.aic == pytest.approx(ref.info_criteria("aic", dk_params=extra), rel=1e-9)
        assert other.bic == pytest.approx(ref.info_criteria("bic", dk_params=extra), rel=1e-9)


def test_refitted_best_model_equals_statsmodels_and_is_full_length():
    problem = invented(4, "poisson", n=200, p=6, offset=True)
    search = best_subsets(problem)
    intercept, coef, terms = search.best("bic")
    cols = [problem.names.index(t) for t in terms]
    ref = sm_fit(problem, cols)
    # Reference: statsmodels GLM(Poisson, offset) params of the chosen subset.
    assert intercept == pytest.approx(ref.params[0], rel=1e-7)
    assert np.allclose(coef[cols], ref.params[1:], rtol=1e-7)
    assert coef.shape == (6,) and np.all(np.delete(coef, cols) == 0)
    # The table's coefficients of that model are the same fit.
    row = search.chosen_row("bic")
    assert np.allclose(search.coefficients[row], coef, rtol=1e-6, atol=1e-9)


# ---- AICc, adjusted R^2, Cp and the shape of the criteria ----------------------------

def test_aicc_follows_hurvich_and_tsai():
    problem = invented(5, "binomial", n=40, p=6)
    table = best_subsets(problem).table
    k, n = table.n_parameters.to_numpy(float), 40
    # Reference: Hurvich & Tsai (1989): AICc = AIC + 2k(k + 1)/(n - k - 1).
    assert np.allclose(table.aicc, table.aic + 2 * k * (k + 1) / (n - k - 1), rtol=1e-12)


def test_fit_improves_with_size_while_penalised_criteria_turn_back_up():
    # Common practice: training fit never worsens as terms are added; criteria that
    # charge for terms prefer a middle size when most predictors are noise.
    problem = invented(6, "gaussian", n=100, p=12)
    search = best_subsets(problem)
    best = search.best_by_size
    assert np.all(np.diff(best.log_likelihood) >= -1e-9)
    assert np.all(np.diff(best.deviance_explained) >= -1e-12)
    # Adjusted R^2 charges least for a term, so it may keep a few noise terms.
    for column, pick, most in [("adjusted_r2", np.argmax, 11), ("aicc", np.argmin, 6),
                               ("bic", np.argmin, 6)]:
        k = int(pick(best[column].to_numpy()))
        assert 2 <= k <= most, column
        worse = best[column].iloc[-1] < best[column].iloc[k] if column == "adjusted_r2" \
            else best[column].iloc[-1] > best[column].iloc[k]
        assert worse, column


def test_adjusted_r2_and_cp_formulas():
    problem = invented(7, "gaussian", n=60, p=7)
    search = best_subsets(problem)
    table, n, p = search.table, 60, 7
    r2, k = table.deviance_explained.to_numpy(), table.k.to_numpy(float)
    # Common-practice formula of adjusted R^2, with k the number of predictors.
    assert np.allclose(table.adjusted_r2, 1 - (1 - r2) * (n - 1) / (n - k - 1), rtol=1e-12)
    best = table[table.rank_within_size == 1].iloc[3]
    cols = [problem.names.index(t) for t in best.terms.split(";")]
    ols = sm.OLS(problem.y, sm.add_constant(problem.X[:, cols])).fit()
    # Reference: statsmodels OLS rsquared and rsquared_adj.
    assert best.deviance_explained == pytest.approx(ols.rsquared, rel=1e-10)
    assert best.adjusted_r2 == pytest.approx(ols.rsquared_adj, rel=1e-10)
    full = sm.OLS(problem.y, sm.add_constant(problem.X)).fit()
    s2 = full.ssr / (n - p - 1)
    # Mallows' Cp with s^2 from the full model; for the full model itself Cp = p + 1.
    assert np.allclose(table.cp, table.deviance / s2 - n + 2 * (k + 1), rtol=1e-9)
    assert table.cp.iloc[-1] == pytest.approx(p + 1, rel=1e-9)


def test_bic_never_chooses_more_terms_than_aic():
    # Follows from the penalties: log(n) > 2 per parameter once n > e^2.
    for seed in range(4):
        search = best_subsets(invented(10 + seed, "poisson", n=80, p=7))
        assert len(search.best("bic")[2]) <= len(search.best("aic")[2])


def test_collinear_twin_adds_nothing():
    problem = invented(8, "gaussian", n=80, p=4)
    X = np.column_stack([problem.X, 2 * problem.X[:, 0] + 1])
    twin = Problem(X, problem.y, "gaussian", problem.names + ("twin",))
    table = best_subsets(twin, keep_per_size=100).table
    ll = dict(zip(table.terms, table.log_likelihood))
    assert ll["v1;twin"] == pytest.approx(ll["v1"], rel=1e-10)
    assert ll["twin"] == pytest.approx(ll["v1"], rel=1e-10)


# ---- the search machinery --------------------------------------------------------

def test_a_search_once_refused_covers_every_size_and_a_budget_is_stated():
    # 2^30 subsets used to be refused; branch and bound now proves every size.
    rng = np.random.default_rng(9)
    problem = Problem(rng.standard_normal((50, 30)), rng.standard_normal(50), "gaussian",
                      tuple(f"x{j}" for j in range(30)))
    search = best_subsets(problem, keep_per_size=2)
    assert list(search.sizes.k) == list(range(31)) and search.max_size == 30
    assert set(search.sizes.found_by) <= {"exhaustive", "proved"}
    assert 0 < search.n_models < 2**30 and search.notes == ()
    assert count_subsets(30, 8) == sum(math.comb(30, i) for i in range(9))
    # A budget too small to prove every size is said in words, with how to lift it.
    short = best_subsets(problem, keep_per_size=2, max_fits=200)
    assert "searched" in set(short.sizes.found_by)
    assert any("budget of 200 models" in note and "--subset-budget" in note for note in short.notes)
    assert set(short.table.found_by) == set(short.sizes.found_by)
    # A largest size asked for is stated too.
    capped = best_subsets(problem, max_size=2)
    assert len(capped.table) == 1 + 10 + 10
    assert any("up to 2 of the 30 terms" in note for note in capped.notes)


@pytest.mark.parametrize("family", ["gaussian", "binomial"])
def test_blocks_and_workers_do_not_change_the_result(family, monkeypatch):
    problem = invented(12, family, n=120, p=9)
    whole = best_subsets(problem, max_size=6)
    monkeypatch.setattr(subsets, "GLM_BLOCK", 23)                # exhaustive blocks (binomial)
    monkeypatch.setattr(subset_search, "FIRST_PASS_MODELS", 5)    # branch-and-bound parts
    monkeypatch.setattr(subset_search, "TOP_DEPTH", 3)
    seen, calls = [], []

    def run(fn, tasks, shared):
        calls.append(len(tasks))
        return [fn(shared, t) for t in tasks]

    cut = best_subsets(problem, max_size=6, run=run, progress=seen.append)
    assert calls[0] > 10
    assert seen[-1] == cut.n_models
    compared = [c for c in whole.table.columns if c != "found_by"]
    pd.testing.assert_frame_equal(whole.table[compared], cut.table[compared], check_exact=True)
    assert np.array_equal(whole.coefficients, cut.coefficients)
    if family == "binomial":
        ticks = []
        best_subsets(problem, max_size=6, progress=ticks.append)
        assert ticks == sorted(ticks) and ticks[-1] == whole.n_models and len(ticks) > 10


@pytest.mark.parametrize("family", ["binomial", "poisson"])
def test_glm_search_with_and_without_kept_working_vectors_agree(family, monkeypatch):
    # Large data sets recompute each parent's working weights instead of keeping them.
    problem = invented(19, family, n=150, p=7)
    kept = best_subsets(problem, keep_per_size=5)
    monkeypatch.setattr(subsets, "STORED_VECTORS", 0)
    recomputed = best_subsets(problem, keep_per_size=5)
    assert list(kept.table.terms) == list(recomputed.table.terms)
    assert np.allclose(kept.table.log_likelihood, recomputed.table.log_likelihood, rtol=1e-11)
    assert np.allclose(kept.coefficients, recomputed.coefficients, rtol=1e-6, atol=1e-9)


def test_subset_choice_uses_only_the_rows_given():
    problem = invented(13, "binomial", n=200, p=6)
    rows = np.arange(0, 200, 2)
    part = Problem(problem.X[rows], problem.y[rows], "binomial", problem.names)
    b0, b = subset_choice(problem, rows, "best", "aicc")
    ref0, ref, _ = best_subsets(part).best("aicc")
    assert b0 == pytest.approx(ref0) and np.allclose(b, ref)
    s0, s = subset_choice(problem, rows, "forward", "aic")
    path = stepwise(part, direction="forward", criterion="aic")
    assert s0 == pytest.approx(path.intercept) and np.allclose(s, path.coef)


# ---- stepwise ------------------------------------------------------------------

def test_forward_stepwise_on_diabetes_picks_bmi_first():
    from sklearn.datasets import load_diabetes
    data = load_diabetes()
    problem = Problem(data.data, data.target, "gaussian", tuple(data.feature_names))
    result = stepwise(problem, direction="forward", criterion="aic")
    # Reference: Efron et al. (2004) diabetes data; bmi is the predictor most
    # correlated with the response, so the first addition must be bmi.
    assert result.steps.term[1] == "bmi"
    correlations = [abs(np.corrcoef(data.data[:, j], data.target)[0, 1]) for j in range(10)]
    assert data.feature_names[int(np.argmax(correlations))] == "bmi"
    assert np.all(np.diff(result.steps.value) < 0)


def test_forward_stepwise_equals_a_greedy_loop_of_statsmodels_fits():
    problem = invented(14, "binomial", n=300, p=7)
    result = stepwise(problem, direction="forward", criterion="aic")
    chosen, current = [], sm_fit(problem, []).aic
    expected = []
    while True:
        trials = [(sm_fit(problem, chosen + [j]).aic, j) for j in range(7) if j not in chosen]
        if not trials:
            break
        aic, j = min(trials)
        if aic >= current:
            break
        chosen.append(j)
        current = aic
        expected.append((problem.names[j], aic))
    # Reference: a greedy loop of statsmodels GLM(Binomial) fits, each step taking the lowest aic.
    assert list(result.steps.term[1:]) == [t for t, _ in expected]
    assert np.allclose(result.steps.value[1:], [a for _, a in expected], rtol=1e-9)
    assert set(result.terms) == {t for t, _ in expected}


def test_backward_and_both_directions():
    problem = invented(15, "poisson", n=200, p=6, offset=True)
    back = stepwise(problem, direction="backward", criterion="bic")
    assert back.steps.action[0] == "start" and back.steps.k[0] == 6
    assert set(back.steps.action[1:]) <= {"remove"}
    assert np.all(np.diff(back.steps.value) < 0)
    both = stepwise(problem, direction="both", criterion="bic")
    assert np.all(np.diff(both.steps.value) < 0)
    # Neither greedy path can beat the best subset by the same criterion.
    search = best_subsets(problem)
    assert search.table.bic.min() <= min(back.value, both.value) + 1e-9
    limited = stepwise(problem, direction="forward", criterion="aic", max_steps=1)
    assert len(limited.steps) == 2 and len(limited.terms) == 1
    with pytest.raises(InputError, match="direction"):
        stepwise(problem, direction="sideways")


# ---- Akaike weights ------------------------------------------------------------

def test_akaike_weights_importance_and_average():
    problem = invented(16, "gaussian", n=70, p=5)
    search = best_subsets(problem, keep_per_size=100)      # every model: 2^5 = 32
    table = search.akaike("aicc")
    delta = table.aicc - table.aicc.min()
    expected = np.exp(-delta / 2) / np.exp(-delta / 2).sum()
    # Reference: Burnham & Anderson (2002) Akaike weights exp(-delta/2) normalised.
    assert table.akaike_weight.sum() == pytest.approx(1.0, abs=1e-12)
    assert np.allclose(table.akaike_weight, expected, rtol=1e-12)
    assert np.allclose(table.delta, delta) and table.delta.iloc[0] == 0
    # 95% confidence set: up to 0.95 cumulative weight plus the model that crosses it.
    inside = table[table.in_confidence_set]
    assert inside.akaike_weight.sum() >= 0.95
    assert inside.akaike_weight.iloc[:-1].sum() < 0.95
    assert list(table.in_confidence_set) == sorted(table.in_confidence_set, reverse=True)
    # Burnham & Anderson (2002): summed weight of the models holding each term.
    importance = variable_importance(table, problem.names)
    for name in problem.names:
        holds = table.terms.str.split(";").apply(lambda t, n=name: n in t)
        assert importance[name] == pytest.approx(table.akaike_weight[holds].sum(), rel=1e-12)
    # Full model average: absent terms count as zero.
    averaged = model_average(table, search.coefficients)
    manual = sum(w * search.coefficients[m] for w, m in zip(table.akaike_weight, table.model))
    assert np.allclose(averaged, manual, rtol=1e-12)
    assert search.weight_left_out("aicc") == 0.0


def test_weight_left_out_bounds_the_models_not_listed():
    problem = invented(17, "binomial", n=60, p=6)
    every = best_subsets(problem, keep_per_size=100).akaike("aic")
    short = best_subsets(problem, keep_per_size=2)
    listed = set(short.table.terms)
    missing = every[~every.terms.isin(listed)].akaike_weight.sum()
    assert 0 < missing <= short.weight_left_out("aic") < 1


@given(st.lists(st.floats(-50, 50), min_size=1, max_size=30))
def test_akaike_table_properties(values):
    models = pd.DataFrame({"terms": [f"t{i}" for i in range(len(values))], "aic": values})
    table = akaike_table(models, "aic")
    assert table.akaike_weight.sum() == pytest.approx(1.0)
    assert np.all(np.diff(table.aic.to_numpy()) >= 0)
    # Burnham & Anderson (2002): the set is the best models up to 0.95 cumulative weight
    # plus the one that crosses it, so it holds at least 0.95 and would not without its last.
    inside = table.in_confidence_set.to_numpy()
    m = int(inside.sum())
    assert m >= 1 and inside[:m].all()
    weights = table.akaike_weight.to_numpy()
    assert weights[:m].sum() >= 0.95 - 1e-12 or m == len(weights)
    assert weights[:m - 1].sum() < 0.95 + 1e-12


def test_bad_requests_are_refused():
    problem = invented(18, "binomial", n=50, p=3)
    with pytest.raises(InputError, match="Gaussian"):
        best_subsets(problem).best("cp")
    with pytest.raises(InputError, match="criterion"):
        stepwise(problem, criterion="deviance")
    with pytest.raises(InputError, match="keep_per_size"):
        best_subsets(problem, keep_per_size=0)
    with pytest.raises(InputError, match="method"):
        subset_choice(problem, np.arange(50), "lasso", "aic")
    bad = Problem(problem.X, problem.y * 3, "binomial", problem.names)
    with pytest.raises(InputError, match="between 0 and 1"):
        best_subsets(bad)


def test_stepwise_by_qaic_follows_the_quasi_likelihood():
    """Burnham & Anderson (2002, section 2.5): with c = 1 QAIC is AIC plus 2 (c counted), so
    it chooses as AIC does; a large c shrinks every log-likelihood gain, so fewer terms."""
    problem = invented(5, "poisson", n=200, p=6)
    by_aic = stepwise(problem, direction="both", criterion="aic")
    same = stepwise(problem, direction="both", criterion="qaic", dispersion=1.0)
    assert same.terms == by_aic.terms
    assert same.value == pytest.approx(by_aic.value + 2.0)
    wide = stepwise(problem, direction="both", criterion="qaic", dispersion=40.0)
    assert len(wide.terms) < len(by_aic.terms)
    with pytest.raises(InputError):
        stepwise(problem, criterion="qaic")          # no dispersion given: refused
