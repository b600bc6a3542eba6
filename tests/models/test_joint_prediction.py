"""Dynamic predictions of the joint model (Rizopoulos 2011, Biometrics 67:819-829): invariants and checks."""

from __future__ import annotations

import copy
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

sys.path.insert(0, str(Path(__file__).parent))
from joint_simulation import DAYS, JointTruth, simulate_joint

from riskbench.models.joint_model import JointModel
from riskbench.models.risk_contract import RiskModel


@pytest.fixture(scope="module")
def data() -> tuple[pd.DataFrame, pd.DataFrame]:
    return simulate_joint(500, JointTruth(rate_outcome=0.004), seed=5)


@pytest.fixture(scope="module")
def model(data) -> JointModel:
    measurements, survival = data
    return JointModel("value", marker_covariates=["x"], event_covariates=["w"], prediction_draws=100).fit(
        measurements, survival
    )


def _rows(survival: pd.DataFrame, landmark_years: float) -> pd.DataFrame:
    at_risk = survival[survival["time"] > landmark_years * DAYS].copy()
    at_risk["landmark"] = landmark_years * DAYS
    return at_risk.drop(columns=["time", "status"]).reset_index(drop=True)


def test_answers_the_risk_contract(model):
    assert isinstance(model, RiskModel)


def test_risk_in_unit_interval_zero_at_zero_and_monotone(model, data):
    """Invariants of a cumulative incidence over (s, s + w]: 0 at w = 0, non-decreasing in w, in [0, 1]
    (Putter, Fiocco & Geskus 2007, Stat Med 26:2389-2430, section 3)."""
    rows = _rows(data[1], 1.0)
    curve = model.predict_curve(rows, [0.0, 90.0, 365.25, 730.5, 1461.0])
    assert np.all(curve[:, 0] == 0.0)
    assert np.all(np.diff(curve, axis=1) >= -1e-12)
    assert np.all((curve >= 0) & (curve <= 1))
    assert curve[:, -1].max() > 0.05


@settings(max_examples=15, deadline=None)
@given(st.floats(0.0, 3.0), st.floats(1.0, 1500.0), st.floats(1.0, 1500.0))
def test_predict_risk_is_monotone_in_horizon(model, data, landmark, w1, w2):
    """Risk over a longer window is never smaller (property over landmarks and windows)."""
    rows = _rows(data[1], landmark).head(20)
    short, long = sorted((w1, w2))
    assert np.all(model.predict_risk(rows, long) >= model.predict_risk(rows, short) - 1e-12)


def test_measurement_after_the_landmark_never_changes_the_prediction(model, data):
    """Leakage-free by construction: only measurements at or before a row's landmark enter its prediction."""
    measurements, survival = data
    rows = _rows(survival, 1.0).head(50)
    before = model.predict_risk(rows, 730.5)
    extra = pd.DataFrame({"patient_id": rows["patient_id"], "time": 1.0 * DAYS + 30.0, "value": 50.0})
    changed = copy.deepcopy(model)
    changed.set_history(pd.concat([measurements, extra], ignore_index=True))
    np.testing.assert_array_equal(changed.predict_risk(rows, 730.5), before)
    # a measurement before the landmark does move it (the history is used at all)
    earlier = extra.assign(time=1.0 * DAYS - 30.0)
    changed.set_history(pd.concat([measurements, earlier], ignore_index=True))
    assert np.all(changed.predict_risk(rows, 730.5) > before)


def test_without_association_equals_closed_form_piecewise_exponential(data):
    """With the association at zero and no competing event the conditional risk is
    1 - exp(-(H(s + w) - H(s))) of the piecewise-constant hazard (Friedman 1982, Ann Stat 10:101-113):
    closed form from the fitted parameters, against the Monte Carlo product-integral, to 1e-10 (its steps end at
    the baseline knots and hold the hazard constant within each, so nothing but rounding separates them)."""
    measurements, survival = data
    model = JointModel("value", event_covariates=["w"], association="none", competing=False, prediction_draws=10).fit(
        measurements, survival
    )
    rows = _rows(survival, 0.5).head(40)
    horizon_years = 2.0
    sl_h, sl_g, _ = model.structure_.layout.cause_slices(0)
    knots = model.structure_.knots
    rate = np.exp(model.theta_[sl_h])
    lin = (rows["w"].to_numpy() - survival["w"].mean()) * model.theta_[sl_g][0]
    upper = np.append(knots[1:], np.inf)

    def cumulative(t: float) -> float:
        return float(np.sum(rate * (np.clip(t, knots, upper) - knots)))

    expected = -np.expm1(-np.exp(lin) * (cumulative(0.5 + horizon_years) - cumulative(0.5)))
    got = model.predict_risk(rows, horizon_years * DAYS)
    np.testing.assert_allclose(got, expected, rtol=0, atol=1e-10)


def test_prediction_is_seeded(model, data):
    rows = _rows(data[1], 0.5).head(30)
    np.testing.assert_array_equal(model.predict_risk(rows, 365.25), model.predict_risk(rows, 365.25))


def test_marker_band_covers_the_measurements_and_widens_beyond_the_landmark(model, data):
    """The predicted true marker sits near the measured values up to the landmark (measurement SD 0.3) and its
    band widens after the last measurement (the random slope is less and less pinned down)."""
    measurements, survival = data
    rows = _rows(survival, 2.0).head(5)
    trajectory = model.marker_trajectory(rows, [0.0, 365.25, 730.5, 1461.0, 2191.5])
    width = (trajectory["marker_upper"] - trajectory["marker_lower"]).to_numpy().reshape(5, 5)
    assert np.all(width[:, -1] > width[:, 2])
    first = measurements[measurements["patient_id"] == rows["patient_id"].iloc[0]]
    at_zero = trajectory[(trajectory["row"] == 0) & (trajectory["time_days"] == 0.0)]["marker_mean"].iloc[0]
    assert abs(at_zero - first[first["time"] == 0.0]["value"].iloc[0]) < 1.0


def test_dynamic_prediction_with_parameter_draws(model, data):
    """Rizopoulos (2011) scheme with parameter draws: the interval contains the mean and median."""
    rows = _rows(data[1], 1.0).head(3)
    table = model.dynamic_prediction(rows, [365.25, 730.5], parameter_draws=40, draws_per_parameter=30, seed=3)
    assert len(table) == 6
    assert np.all(table["risk_lower_95"] <= table["risk_median"])
    assert np.all(table["risk_median"] <= table["risk_upper_95"])
    assert np.all(table["risk_lower_95"] <= table["risk_mean"])
    assert np.all(table["risk_mean"] <= table["risk_upper_95"])
