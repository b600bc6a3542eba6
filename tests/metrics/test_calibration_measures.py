"""The calibration slope and ICI computed alone equal those of the full calibration.

``slope_and_ici`` repeats the steps of ``calibration_at_horizon`` that lead to these two numbers; the check is
against that function (itself checked against published definitions in tests/metrics/test_calibration.py), so a
change of method there that is not made here fails this test.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from riskbench.metrics import calibration_at_horizon
from riskbench.metrics.calibration_measures import slope_and_ici
from riskbench.metrics.inputs import MetricInputError
from riskbench.metrics.risk_sets import OutcomeSet


def _data(seed: int, n: int):
    rng = np.random.default_rng(seed)
    x = rng.normal(size=n)
    t_event = rng.exponential(800 / np.exp(0.7 * x))
    t_other = rng.exponential(3000, n)
    t_cens = rng.uniform(100, 1500, n)
    time = np.minimum.reduce([t_event, t_other, t_cens]).round(1) + 0.1
    status = np.select([t_event <= np.minimum(t_other, t_cens), t_other <= t_cens], [1, 2], 0)
    risk = 1 - np.exp(-365 / 800 * np.exp(0.7 * x + rng.normal(0, 0.3, n)))
    return time, status, risk


@settings(max_examples=20, deadline=None)
@given(
    seed=st.integers(0, 10_000),
    n=st.integers(60, 600),
    target=st.sampled_from(["cumulative_incidence", "cause_specific"]),
)
def test_slope_and_ici_equal_those_of_calibration_at_horizon(seed, n, target):
    time, status, risk = _data(seed, n)
    full = calibration_at_horizon(time, status, risk, 365.0, target=target, n_boot=0, check_direction=False)
    shared = OutcomeSet.from_arrays(time, status)
    for outcomes in (None, shared, shared):  # the second use of the set reads its cached pseudo-observations
        got = slope_and_ici(time, status, risk, 365.0, target=target, outcomes=outcomes)
        assert got.slope == full.slope
        assert got.ici == full.ici


def test_too_few_distinct_risks_are_refused_as_by_the_full_calibration():
    time, status, _ = _data(1, 200)
    risk = np.where(np.arange(200) < 190, 0.1, 0.3)
    with pytest.raises(MetricInputError, match="distinct values"):
        calibration_at_horizon(time, status, risk, 365.0, n_boot=0, check_direction=False)
    with pytest.raises(MetricInputError, match="distinct values"):
        slope_and_ici(time, status, risk, 365.0)
