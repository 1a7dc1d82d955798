"""The screen command: checks and collinearity before any model."""

import numpy as np
import pandas as pd
from statsmodels.stats.outliers_influence import variance_inflation_factor

from pathfinder.cli import main
from pathfinder.screen import screen


def _frame(n=120, seed=0):
    # Invented covariates: b tracks a closely, c is independent.
    rng = np.random.default_rng(seed)
    a = rng.standard_normal(n)
    return pd.DataFrame({"a": a, "b": a + 0.2 * rng.standard_normal(n), "c": rng.standard_normal(n),
                         "y": rng.standard_normal(n)})


def test_screen_finds_the_pair_and_its_vif():
    result = screen(_frame(), response="y")
    terms = result.terms.set_index("term")
    assert terms.loc["a", "cluster"] == terms.loc["b", "cluster"] != terms.loc["c", "cluster"]
    X = np.column_stack([np.ones(120), _frame()[["a", "b", "c"]].to_numpy()])
    # Reference: statsmodels variance_inflation_factor (with the constant column).
    assert np.allclose(terms.vif.to_numpy(), [variance_inflation_factor(X, j) for j in (1, 2, 3)])


def test_screen_command_writes_tables(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    _frame().to_csv("t.csv", index=False)
    assert main(["screen", "t.csv", "--response", "y", "--out", "checks", "--quiet"]) == 0
    assert {p.name for p in (tmp_path / "checks").iterdir()} == {"terms.csv", "missing.csv",
                                                                 "correlations.csv"}
    assert main(["screen", "t.csv", "--response", "nope"]) == 2
    assert "nope" in capsys.readouterr().err
