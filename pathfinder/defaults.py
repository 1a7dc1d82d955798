"""Every default of an analysis, written once.

The command-line help, the study options, the choosing stages and the report
all read their defaults from here, so a default can never say one thing in
the help and do another in the run. This module imports nothing.
"""

# ---- the penalised paths ---------------------------------------------------
MIXES = (1.0, 0.75, 0.5, 0.25, 0.0)   # lasso, three elastic nets, ridge
N_PENALTIES = 100                     # penalties on a full path
NESTED_PENALTIES = 50                 # at most this many on the paths inside outer folds
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

# ---- subset searches -------------------------------------------------------
SUBSET_MODELS = 50_000                # models a best-subset search may fit
SUBSET_ROW_MODELS = 2 * 10**8         # binomial / Poisson: models x rows the default allows

# ---- collinearity ----------------------------------------------------------
CORRELATION_THRESHOLD = 0.7           # |r| at which terms move together (Dormann et al. 2013)
