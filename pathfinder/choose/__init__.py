"""Choosing a model: folds for cross-validation and the rules that pick along a path."""
