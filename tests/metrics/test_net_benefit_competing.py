"""Net benefit with a competing event: treat-all and the model's curve use the Aalen–Johansen cumulative
incidence, checked against lifelines' ``AalenJohansenFitter`` (a reference library) on a small example.

Formula (Vickers, Cronin, Elkin & Gonen 2008, BMC Med Inform Decis Mak 8:53, survival version; with competing
risks the observed risk is the cumulative incidence, as in the competing-risk decision curves of the same
group): NB_all(p) = F(h) − (1 − F(h))·p/(1 − p); NB_model(p) = P(risk ≥ p)·[F⁺(h) − (1 − F⁺(h))·p/(1 − p)].
"""

from __future__ import annotations

import numpy as np
import pytest
from lifelines import AalenJohansenFitter, KaplanMeierFitter

from riskbench.metrics import net_benefit

HORIZON = 300.0
THRESHOLDS = [0.0, 0.05, 0.1, 0.2, 0.3]


def _example(seed: int = 11, n: int = 80):
    rng = np.random.default_rng(seed)
    time = np.round(rng.exponential(400.0, n), 3) + rng.uniform(0, 1e-3, n)  # continuous: no ties
    status = rng.choice([0, 1, 2], n, p=[0.3, 0.4, 0.3])
    risk = np.clip(0.25 + 0.2 * (status == 1) + 0.15 * rng.normal(size=n), 0.0, 0.95)
    return time, status, risk


def _lifelines_incidence(time, status, horizon):
    """Aalen–Johansen cumulative incidence of cause 1 at ``horizon`` from lifelines (step function)."""
    fitter = AalenJohansenFitter(calculate_variance=False).fit(time, status, event_of_interest=1)
    curve = fitter.cumulative_density_.iloc[:, 0]
    return float(curve[curve.index <= horizon].iloc[-1])


def test_treat_all_is_the_aalen_johansen_incidence_formula() -> None:
    time, status, risk = _example()
    table = net_benefit(time, status, risk, HORIZON, THRESHOLDS, check_direction=False)
    incidence = _lifelines_incidence(time, status, HORIZON)
    p = np.asarray(THRESHOLDS)
    expected = incidence - (1 - incidence) * p / (1 - p)
    np.testing.assert_allclose(table["treat_all"], expected, atol=1e-12)
    # 1 − Kaplan–Meier with competing events censored is larger here: the check can fail.
    km = KaplanMeierFitter().fit(time, (status == 1).astype(int))
    naive = 1 - float(km.survival_function_at_times([HORIZON]).iloc[0])
    assert naive - incidence > 0.02
    assert table["treat_all"].iloc[0] == pytest.approx(incidence, abs=1e-12)


def test_model_curve_uses_the_incidence_among_those_treated() -> None:
    time, status, risk = _example(seed=5)
    table = net_benefit(time, status, risk, HORIZON, THRESHOLDS, check_direction=False)
    for row in table.itertuples(index=False):
        above = risk >= row.threshold
        incidence = _lifelines_incidence(time[above], status[above], HORIZON)
        odds = row.threshold / (1 - row.threshold)
        assert row.fraction_treated == pytest.approx(above.mean())
        assert row.model == pytest.approx(above.mean() * (incidence - (1 - incidence) * odds), abs=1e-12)
