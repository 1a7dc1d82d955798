"""Invented data for the core tests (property and reference tests only)."""

import numpy as np


def correlated_design(rng, n, p, rho=0.5):
    """Rows of an AR(rho) Gaussian design: corr(x_j, x_k) = rho^|j-k|."""
    Z = rng.standard_normal((n, p))
    X = np.empty_like(Z)
    X[:, 0] = Z[:, 0]
    for j in range(1, p):
        X[:, j] = rho * X[:, j - 1] + np.sqrt(1 - rho**2) * Z[:, j]
    return X


def population_standardise(X, w=None):
    """Centre and scale columns to (weighted) mean 0 and population SD 1."""
    w = np.ones(X.shape[0]) if w is None else w * (X.shape[0] / w.sum())
    mean = w @ X / X.shape[0]
    sd = np.sqrt(w @ (X - mean) ** 2 / X.shape[0])
    return (X - mean) / sd


def make_response(rng, X, family, coef, intercept=0.0, offset=None):
    eta = intercept + X @ coef + (0 if offset is None else offset)
    if family == "gaussian":
        return eta + rng.standard_normal(X.shape[0])
    if family == "binomial":
        return rng.binomial(1, 1 / (1 + np.exp(-eta))).astype(float)
    return rng.poisson(np.exp(eta)).astype(float)
