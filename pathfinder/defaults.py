"""Every default of an analysis, written once.

The command-line help, the study options, the choosing stages and the report
all read their defaults from here, so a default can never say one thing in
the help and do another in the run. This module imports nothing.
"""

# ---- the penalised paths ---------------------------------------------------
MIXES = (1.0, 0.75, 0.5, 0.25, 0.0)   # lasso, three elastic nets, ridge
# The penalty grid: log-spaced from the largest penalty down this many powers
# of ten (decades), with this many penalties in each decade. 3.5 decades take
# a path on standardised covariates from the empty model to one that differs
# little from the unpenalised fit, for the tables ecologists hold; a wide
# table (more terms than sites) cannot be fitted that far, so it stops at 2.
GRID_DECADES = 3.5
GRID_DECADES_WIDE = 2.0
GRID_PER_DECADE = 20                  # a penalty every 11% step (10^(1/20))
NESTED_PER_DECADE = 12                # ... inside the outer folds of nested cross-validation
TOL = 5e-8                            # convergence: no coefficient moves more than this (in SDs)
MAX_SWEEPS = 250_000                  # coordinate sweeps per penalty before a fit is called unconverged
FOLD_TOL = 1e-4                       # convergence of repeated fits (folds, subsamples)

# ---- cross-validation --------------------------------------------------------
FOLDS = 10
INNER_FOLDS = 5                       # folds inside each outer training set
METRIC = "deviance"
SEED = 1

# ---- stability selection ---------------------------------------------------
STABILITY_PAIRS = 50                  # complementary pairs of half samples (100 fits)
NESTED_STABILITY_PAIRS = 25           # ... inside each outer fold of nested cross-validation
STABILITY_THRESHOLD = 0.75            # selection frequency that makes a term stable

# ---- the relaxed lasso -------------------------------------------------------
RELAXATION_STEPS = 8                  # relaxations 0, 1/8, ..., 1 between refit and lasso

# ---- subset searches -------------------------------------------------------
SUBSET_PROOF_MODELS = 200_000_000     # least squares: models leaps and bounds may visit (minutes)
SUBSET_EXACT_ROW_FITS = 2 * 10**8     # binomial / Poisson: fits x rows spent comparing every subset
SUBSET_RISING_SIZES = 5               # sizes covered until AIC, AICc and BIC all rose this many times

# ---- collinearity ----------------------------------------------------------
CORRELATION_THRESHOLD = 0.7           # |r| at which terms move together (Dormann et al. 2013)
