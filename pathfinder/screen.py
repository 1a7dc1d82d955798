"""The screen: fast checks of a survey table before any model is fitted.

For every predictor: missing values, range, mean and spread; for the terms of
the design: correlation clusters (|r| >= 0.7 as a working threshold, Dormann
et al. 2013) and variance inflation factors. Nothing is fitted; the tables
tell a user which covariates move together before they read any model.
"""

from __future__ import annotations

from dataclasses import dataclass

import pandas as pd

from .data.design import build_design
from .defaults import CORRELATION_THRESHOLD
from .data.intake import missing_cells, prepare_survey
from .diagnostics.collinearity import correlation_clusters, correlation_matrix, variance_inflation
from .outputs.tables import correlations_table

VIF_HIGH = 10.0


@dataclass(frozen=True, eq=False)
class Screen:
    survey: object
    terms: pd.DataFrame          # term, group, min, max, mean, sd, vif, cluster
    missing: pd.DataFrame        # column, missing
    correlations: pd.DataFrame   # term_a, term_b, r
    threshold: float

    @property
    def tables(self) -> dict:
        return {"terms": self.terms, "missing": self.missing, "correlations": self.correlations}


def screen(frame: pd.DataFrame, *, response, threshold=CORRELATION_THRESHOLD,
           **survey_options) -> Screen:
    """Check the table, then describe every term and how the terms move together."""
    raw_missing = pd.DataFrame({"column": frame.columns,
                                "missing": [int(missing_cells(frame[c]).sum()) for c in frame.columns]})
    survey = prepare_survey(frame, response=response, **survey_options)
    design = build_design(survey.frame, survey.predictors, survey.categorical, weights=survey.weights)
    X = design.X
    R = correlation_matrix(X, survey.weights)
    terms = pd.DataFrame({
        "term": design.names, "group": [t.group for t in design.terms],
        "min": X.min(axis=0), "max": X.max(axis=0), "mean": X.mean(axis=0), "sd": X.std(axis=0),
        "vif": variance_inflation(X, survey.weights),
        "cluster": correlation_clusters(R, threshold),
    })
    return Screen(survey, terms, raw_missing, correlations_table(design), threshold)
