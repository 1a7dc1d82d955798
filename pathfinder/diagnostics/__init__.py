"""Checks on the predictors themselves, made before or beside any model fit."""
