"""Held-out metrics against outside references.

Each reference check names its source beside the assertion: scikit-learn
(roc_auc_score, brier_score_loss, log_loss, mean_squared_error,
mean_absolute_error, mean_poisson_deviance) or statsmodels (family deviance,
GLM deviance and null deviance). The data are invented.
"""

import numpy as np
import pytest
import statsmodels.api as sm
from hypothesis import given
from hypothesis import strategies as st
from sklearn import metrics as skm

from pathfinder.core.families import NegativeBinomial
from pathfinder.choose.metrics import (
    METRICS, auc, brier, default_metric, deviance_explained, log_loss, mae, mean_deviance,
    mse, poisson_deviance, score,
)
from pathfinder.errors import InputError


@pytest.fixture(scope="module")
def presence():
    rng = np.random.default_rng(3)
    n = 300
    x = rng.standard_normal(n)
    prob = 1 / (1 + np.exp(-(0.3 + 1.2 * x)))
    y = rng.binomial(1, prob).astype(float)
    mu = np.clip(prob + rng.normal(0, 0.05, n), 0.01, 0.99)
    w = rng.uniform(0.1, 3.0, n)
    return y, mu, w


@pytest.fixture(scope="module")
def counts():
    rng = np.random.default_rng(4)
    n = 250
    mu = np.exp(rng.normal(0.5, 0.8, n))
    y = rng.poisson(mu).astype(float)
    return y, mu * rng.uniform(0.7, 1.3, n), rng.uniform(0.2, 2.0, n)


@pytest.fixture(scope="module")
def continuous():
    rng = np.random.default_rng(5)
    n = 200
    y = rng.normal(10, 3, n)
    return y, y + rng.normal(0.5, 2, n), rng.uniform(0.0, 2.0, n)


# ---- AUC -------------------------------------------------------------------------

def test_auc_equals_sklearn(presence):
    y, mu, w = presence
    # Reference: scikit-learn roc_auc_score, unweighted and with sample_weight.
    assert auc(y, mu) == pytest.approx(skm.roc_auc_score(y, mu), abs=1e-12)
    assert auc(y, mu, w) == pytest.approx(skm.roc_auc_score(y, mu, sample_weight=w), abs=1e-12)


def test_auc_with_ties_equals_sklearn(presence):
    y, mu, w = presence
    coarse = np.round(mu, 1)  # about ten distinct scores: many tied pairs
    assert len(np.unique(coarse)) < 15
    # Reference: scikit-learn roc_auc_score (trapezoids over tied scores = ties counted half).
    assert auc(y, coarse) == pytest.approx(skm.roc_auc_score(y, coarse), abs=1e-12)
    assert auc(y, coarse, w) == pytest.approx(skm.roc_auc_score(y, coarse, sample_weight=w), abs=1e-12)


def test_auc_all_tied_is_one_half():
    # Common practice (Mann-Whitney with ties counted half): constant scores give 0.5.
    assert auc([0, 1, 0, 1, 1], [0.3] * 5) == pytest.approx(0.5)


@given(st.lists(st.tuples(st.integers(0, 1), st.integers(0, 6), st.integers(1, 4)),
                min_size=2, max_size=40))
def test_auc_integer_weights_equal_repeated_rows(rows):
    y = np.array([r[0] for r in rows], dtype=float)
    if y.min() == y.max():
        return
    s = np.array([r[1] for r in rows], dtype=float)
    w = np.array([r[2] for r in rows], dtype=float)
    # Property: a weight of m counts like m copies of the row.
    assert auc(y, s, w) == pytest.approx(auc(np.repeat(y, w.astype(int)), np.repeat(s, w.astype(int))))
    # Property: reversing the scores turns the AUC into 1 - AUC.
    assert auc(y, -s, w) == pytest.approx(1 - auc(y, s, w))


def test_auc_needs_both_classes():
    with pytest.raises(InputError, match="no presences"):
        auc([0, 0, 0], [0.1, 0.2, 0.3])


# ---- the other binomial metrics ---------------------------------------------------

def test_brier_equals_sklearn(presence):
    y, mu, w = presence
    # Reference: scikit-learn brier_score_loss.
    assert brier(y, mu) == pytest.approx(skm.brier_score_loss(y, mu), rel=1e-12)
    assert brier(y, mu, w) == pytest.approx(skm.brier_score_loss(y, mu, sample_weight=w), rel=1e-12)


def test_log_loss_equals_sklearn(presence):
    y, mu, w = presence
    # Reference: scikit-learn log_loss.
    assert log_loss(y, mu) == pytest.approx(skm.log_loss(y, mu), rel=1e-12)
    assert log_loss(y, mu, w) == pytest.approx(skm.log_loss(y, mu, sample_weight=w), rel=1e-12)


def test_log_loss_clips_certain_mistakes_like_sklearn():
    y = np.array([0.0, 1.0, 1.0, 0.0])
    p = np.array([1.0, 0.0, 0.9, 0.2])  # two certain and wrong predictions
    # Reference: scikit-learn log_loss (clips to machine epsilon).
    assert log_loss(y, p) == pytest.approx(skm.log_loss(y, p), rel=1e-12)
    assert np.isfinite(log_loss(y, p))


def test_binomial_mean_deviance_equals_statsmodels(presence):
    y, mu, w = presence
    fam = sm.families.Binomial()
    # Reference: statsmodels Binomial().deviance / n (with frequency weights / their sum).
    assert mean_deviance(y, mu, "binomial") == pytest.approx(fam.deviance(y, mu) / len(y), rel=1e-10)
    assert mean_deviance(y, mu, "binomial", w) == pytest.approx(
        fam.deviance(y, mu, freq_weights=w) / w.sum(), rel=1e-10)
    # Common practice: for 0/1 data the binomial deviance is twice the log loss.
    assert mean_deviance(y, mu, "binomial", w) == pytest.approx(2 * log_loss(y, mu, w), rel=1e-10)


# ---- Gaussian and Poisson -----------------------------------------------------------

def test_mse_and_mae_equal_sklearn(continuous):
    y, mu, w = continuous
    # Reference: scikit-learn mean_squared_error and mean_absolute_error.
    assert mse(y, mu) == pytest.approx(skm.mean_squared_error(y, mu), rel=1e-12)
    assert mse(y, mu, w) == pytest.approx(skm.mean_squared_error(y, mu, sample_weight=w), rel=1e-12)
    assert mae(y, mu) == pytest.approx(skm.mean_absolute_error(y, mu), rel=1e-12)
    assert mae(y, mu, w) == pytest.approx(skm.mean_absolute_error(y, mu, sample_weight=w), rel=1e-12)


def test_gaussian_mean_deviance_equals_statsmodels(continuous):
    y, mu, w = continuous
    fam = sm.families.Gaussian()
    # Reference: statsmodels Gaussian().deviance / n (with frequency weights / their sum).
    assert mean_deviance(y, mu, "gaussian") == pytest.approx(fam.deviance(y, mu) / len(y), rel=1e-12)
    assert mean_deviance(y, mu, "gaussian", w) == pytest.approx(
        fam.deviance(y, mu, freq_weights=w) / w.sum(), rel=1e-12)


def test_poisson_deviance_equals_sklearn_and_statsmodels(counts):
    y, mu, w = counts
    assert np.any(y == 0)
    # Reference: scikit-learn mean_poisson_deviance.
    assert poisson_deviance(y, mu) == pytest.approx(skm.mean_poisson_deviance(y, mu), rel=1e-12)
    assert poisson_deviance(y, mu, w) == pytest.approx(
        skm.mean_poisson_deviance(y, mu, sample_weight=w), rel=1e-12)
    # Reference: statsmodels Poisson().deviance / n.
    assert mean_deviance(y, mu, "poisson") == pytest.approx(
        sm.families.Poisson().deviance(y, mu) / len(y), rel=1e-12)


@pytest.mark.parametrize("family", ["gaussian", "binomial", "poisson"])
def test_deviance_explained_equals_statsmodels_in_sample(family):
    rng = np.random.default_rng(8)
    n = 200
    x = rng.standard_normal((n, 2))
    eta = 0.2 + x @ np.array([0.8, -0.5])
    y = {"gaussian": eta + rng.standard_normal(n),
         "binomial": rng.binomial(1, 1 / (1 + np.exp(-eta))).astype(float),
         "poisson": rng.poisson(np.exp(eta)).astype(float)}[family]
    smfam = {"gaussian": sm.families.Gaussian(), "binomial": sm.families.Binomial(),
             "poisson": sm.families.Poisson()}[family]
    res = sm.GLM(y, sm.add_constant(x), family=smfam).fit()
    mu_null = np.full(n, y.mean())  # the intercept-only model of a canonical-link GLM
    # Reference: statsmodels GLM, 1 - deviance / null_deviance (in-sample).
    assert deviance_explained(y, res.fittedvalues, mu_null, family) == pytest.approx(
        1 - res.deviance / res.null_deviance, rel=1e-9)


def test_deviance_explained_is_negative_for_a_model_worse_than_the_null(continuous):
    y, _, _ = continuous
    worse = y.mean() + 3 * (y - y.mean())[::-1]
    assert deviance_explained(y, worse, np.full(len(y), y.mean()), "gaussian") < 0


# ---- the registry ----------------------------------------------------------------

def test_default_metric_is_the_deviance():
    for family in ("gaussian", "binomial", "poisson"):
        assert default_metric(family) == "deviance"
    with pytest.raises(InputError, match="unknown family"):
        default_metric("gamma")


@pytest.mark.parametrize("name", sorted(METRICS))
def test_registry_direction_prefers_the_better_prediction(name, presence, counts, continuous):
    data = {"binomial": presence, "poisson": counts, "gaussian": continuous,
            "negative_binomial": counts}
    for family in METRICS[name].families:
        y, mu, w = data[family]
        good = np.clip(0.9 * y + 0.1 * mu, 0.02, 0.98) if family == "binomial" else \
            np.maximum(0.9 * y + 0.1 * mu, 0.05)
        bad = mu[::-1]
        null = np.full(len(y), np.average(y, weights=w))
        fam = NegativeBinomial(2.0) if family == "negative_binomial" else family  # theta given
        s_good = score(name, y, good, fam, w, mu_null=null)
        s_bad = score(name, y, bad, fam, w, mu_null=null)
        if METRICS[name].larger_is_better:
            assert s_good > s_bad
        else:
            assert s_good < s_bad


def test_score_refuses_a_metric_that_does_not_fit_the_family(continuous):
    y, mu, _ = continuous
    with pytest.raises(InputError, match="does not apply to a gaussian"):
        score("auc", y, mu, "gaussian")
    with pytest.raises(InputError, match="unknown metric"):
        score("accuracy", y, mu, "gaussian")


def test_bad_input_gives_one_line():
    with pytest.raises(InputError) as info:
        mse([1.0, 2.0, 3.0], [1.0, 2.0])
    assert "\n" not in str(info.value) and "one prediction per observed row" in str(info.value)
    with pytest.raises(InputError, match="link scale"):
        brier([0, 1], [-0.5, 1.2])
    with pytest.raises(InputError, match="weights"):
        mae([1.0, 2.0], [1.0, 2.0], w=[-1.0, 2.0])
