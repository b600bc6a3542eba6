"""Permutation importance on the development rows (Breiman 2001, Machine Learning 45:5-32, section 10: the drop
in accuracy when one variable's values are permuted -- **from memory**), here with Harrell's C as the accuracy."""

from __future__ import annotations

import numpy as np
import pandas as pd

from riskbench.validation.apparent_importance import forest_importance


class _RiskIsColumn:
    """A stand-in model whose risk is one column of the table (it ignores every other column)."""

    def __init__(self, column: str) -> None:
        self.column = column

    def predict_risk(self, table: pd.DataFrame, horizon: float) -> np.ndarray:
        return table[self.column].to_numpy(float)


def test_a_covariate_the_model_ignores_has_no_importance_and_the_one_it_uses_has_much() -> None:
    rng = np.random.default_rng(0)
    n = 400
    used, ignored = rng.normal(size=n), rng.normal(size=n)
    time = np.exp(-used)  # higher value, earlier event: C of the true ordering is 1
    table = pd.DataFrame({"time": time, "status": 1, "used": used, "ignored": ignored})
    result = {
        r["covariate"]: r["importance"]
        for r in forest_importance(_RiskIsColumn("used"), table, ["used", "ignored"], 365.25, seed=1)
    }
    assert result["ignored"] == 0.0
    assert 0.4 < result["used"] < 0.6  # C falls from 1 to about 0.5 when the used column is shuffled


def test_the_same_seed_gives_the_same_importance() -> None:
    rng = np.random.default_rng(3)
    table = pd.DataFrame(
        {"time": rng.exponential(size=200), "status": rng.integers(0, 2, 200), "x": rng.normal(size=200)}
    )
    first = forest_importance(_RiskIsColumn("x"), table, ["x"], 1.0, seed=7)
    assert first == forest_importance(_RiskIsColumn("x"), table, ["x"], 1.0, seed=7)
