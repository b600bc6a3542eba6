"""All-thresholds split against one Aalen–Johansen / Kaplan–Meier fit per subgroup (the definition)."""

import numpy as np
import pytest

from riskbench.metrics.censoring import observed_risk
from riskbench.metrics.threshold_groups import split_by_thresholds


@pytest.mark.parametrize("competing", [False, True])
def test_matches_one_fit_per_subgroup(competing):
    rng = np.random.default_rng(2)
    n = 400
    t = np.r_[rng.integers(1, 30, n // 2), rng.uniform(0.5, 30, n - n // 2)]
    status = rng.choice([0, 1, 2] if competing else [0, 1], n)
    risk = rng.random(n)
    cuts = np.quantile(risk, np.linspace(0.05, 0.95, 19))
    split = split_by_thresholds(t, status, risk, 15.0, cuts)
    for j, c in enumerate(cuts):
        above, below = risk >= c, risk < c
        assert split.risk_above[j] == pytest.approx(observed_risk(t[above], status[above], 15.0)[0], abs=1e-12)
        assert split.risk_below[j] == pytest.approx(observed_risk(t[below], status[below], 15.0)[0], abs=1e-12)
        assert (split.n_above[j], split.n_below[j]) == (above.sum(), below.sum())
