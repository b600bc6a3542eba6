"""Permutation importance of a fitted model's covariates on its own development rows (apparent, not validated).

Used to describe a saved forest, which has no coefficients: for each covariate, Harrell's C of the predicted risk
at one horizon minus the C after that covariate's values are shuffled across the rows (Breiman 2001, Machine
Learning 45:5-32, section 10 -- **from memory**). On the development rows it says what the model uses, not how
well it would do elsewhere; :mod:`riskbench.validation.importance` gives the resampled version.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np
import pandas as pd

from riskbench.metrics.concordance import concordance_harrell

__all__ = ["forest_importance"]


def forest_importance(
    model: Any, table: pd.DataFrame, covariates: Sequence[str], horizon_days: float, *, seed: int = 0
) -> list[dict[str, Any]]:
    """Permutation importance of each covariate: Harrell's C of the risk at ``horizon_days`` on ``table`` minus
    the C after the covariate's values are shuffled across the rows (one seeded permutation each)."""
    rows = table.reset_index(drop=True)
    time, status = rows["time"].to_numpy(float), rows["status"].to_numpy(int)

    def c_index(frame: pd.DataFrame) -> float:
        risk = np.asarray(model.predict_risk(frame, horizon_days), float)
        keep = np.isfinite(risk)
        return float(concordance_harrell(time[keep], status[keep], risk[keep], with_se=False).estimate)

    full = c_index(rows)
    rng = np.random.default_rng(seed)
    out = []
    for name in covariates:
        shuffled = rows.copy()
        shuffled[name] = rng.permutation(shuffled[name].to_numpy())
        out.append({"covariate": str(name), "importance": full - c_index(shuffled)})
    return out
