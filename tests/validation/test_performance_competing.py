"""How the performance table treats competing events: checked against the measures written out pair by pair
(Harrell's C as in Wolbers et al. 2009) and subject by subject (IPCW Brier score with the censoring
Kaplan–Meier from lifelines, a reference library)."""

from __future__ import annotations

import numpy as np
import pytest
from lifelines import KaplanMeierFitter

from riskbench.validation.performance import evaluate_risks


def _data(seed: int = 3, n: int = 120):
    rng = np.random.default_rng(seed)
    time = rng.exponential(500.0, n)  # continuous: no tied times
    status = rng.choice([0, 1, 2], n, p=[0.4, 0.35, 0.25])
    risk = np.clip(0.3 + 0.2 * (status == 1) + 0.15 * rng.normal(size=n), 0.01, 0.99)
    return time, status, risk


def _wolbers_c(time, status, risk, horizon):
    """Pairs (i, j): i has the outcome by the horizon; j outlives i or had a competing event by the horizon."""
    num = den = 0.0
    for i in np.flatnonzero((status == 1) & (time <= horizon)):
        for j in range(time.size):
            if j == i:
                continue
            if time[j] > time[i] or (status[j] == 2 and time[j] <= horizon):
                den += 1
                num += 1.0 if risk[i] > risk[j] else 0.5 if risk[i] == risk[j] else 0.0
    return num / den


def _brier_competing(time, status, risk, horizon):
    """(1/n) sum of w_i (I_i - r_i)^2: outcome or competing event by the horizon weighted 1/G(T_i-), still
    event-free at the horizon 1/G(horizon); censored before the horizon weight 0."""
    km = KaplanMeierFitter().fit(time, (status == 0).astype(int))
    g = lambda t: km.survival_function_at_times(np.atleast_1d(t)).to_numpy()  # noqa: E731
    total = 0.0
    for t, s, r in zip(time, status, risk):
        if t <= horizon and s == 1:
            total += (1 - r) ** 2 / g(t - 1e-9)[0]
        elif t <= horizon and s == 2:
            total += r**2 / g(t - 1e-9)[0]
        elif t > horizon:
            total += r**2 / g(horizon)[0]
    return total / time.size


def test_competing_event_is_a_known_non_outcome_in_c_and_brier() -> None:
    time, status, risk = _data()
    horizon = 400.0
    table = evaluate_risks(time, status, {horizon: risk}).set_index("metric")["value"]
    assert table["harrell_c"] == pytest.approx(_wolbers_c(time, status, risk, horizon), abs=1e-12)
    assert table["brier"] == pytest.approx(_brier_competing(time, status, risk, horizon), rel=1e-9)
    # Counting competing events as censored would give a different Brier score (a check that can fail).
    censored = evaluate_risks(time, np.where(status == 2, 0, status), {horizon: risk}).set_index("metric")["value"]
    assert abs(censored["brier"] - table["brier"]) > 1e-3
