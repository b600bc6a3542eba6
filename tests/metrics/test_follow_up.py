"""Median follow-up by reverse Kaplan–Meier (Schemper & Smith 1996, Control Clin Trials 17:343–346).

Checked against lifelines' KaplanMeierFitter with the event indicator reversed on lifelines' shipped Rossi
recidivism data (load_rossi: week of arrest or censoring at 52 weeks).
"""

from __future__ import annotations

import numpy as np
import pytest
from lifelines import KaplanMeierFitter
from lifelines.datasets import load_rossi

from riskbench.metrics.follow_up import reverse_km_follow_up, reverse_km_quantile
from riskbench.metrics.inputs import MetricInputError


def _lifelines_quantile(time, ended_without_event, q):
    kmf = KaplanMeierFitter().fit(time, event_observed=ended_without_event)
    return float(kmf.percentile(1 - q))


def test_median_follow_up_matches_lifelines_on_rossi():
    rossi = load_rossi()
    time, status = rossi["week"].to_numpy(float), rossi["arrest"].to_numpy()
    for q in (0.25, 0.5, 0.75):
        assert reverse_km_quantile(time, status, q) == pytest.approx(_lifelines_quantile(time, status == 0, q))
    assert reverse_km_follow_up(time, status).median == 52.0


def test_matches_lifelines_with_competing_events_as_censoring():
    """Outcome (1) and competing event (2) both stop follow-up early: both censor the reverse KM."""
    rng = np.random.default_rng(3)
    time = np.round(rng.exponential(400, 300), 0)
    status = rng.choice([0, 1, 2], size=300, p=[0.6, 0.25, 0.15])
    fu = reverse_km_follow_up(time, status)
    assert fu.median == pytest.approx(_lifelines_quantile(time, status == 0, 0.5))
    assert fu.lower_quartile <= fu.median <= fu.upper_quartile


def test_exceeds_naive_median_when_events_stop_follow_up():
    """Schemper & Smith's point: the naive median of observed times understates follow-up when events cut it."""
    time = np.array([1.0, 2, 3, 4, 10, 10, 10, 10])
    status = np.array([1, 1, 1, 1, 0, 0, 0, 0])
    assert reverse_km_quantile(time, status) == 10.0 > np.median(time)


def test_no_end_of_follow_up_gives_infinity_and_bad_q_is_named():
    assert reverse_km_quantile([1.0, 2.0], [1, 2]) == float("inf")
    with pytest.raises(MetricInputError, match="q must"):
        reverse_km_quantile([1.0, 2.0], [0, 0], q=1.5)
