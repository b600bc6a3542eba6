"""Kaplan–Meier, censoring Kaplan–Meier and Aalen–Johansen against published and library values.

Outside checks: Le, *Introductory Biostatistics* (2003), Table 11.1 (6-MP arm of the Freireich leukaemia
trial, survival to 4 decimals) with Greenwood SE from Klein & Moeschberger Table 4.1A (**from memory**,
reproduced); lifelines' ``AalenJohansenFitter`` estimate and delta-method variance;
scikit-survival's ``CensoringDistributionEstimator`` (outcomes before censorings at tied times).
"""

import numpy as np
from lifelines import AalenJohansenFitter
from lifelines.datasets import load_leukemia
from sksurv.nonparametric import CensoringDistributionEstimator
from sksurv.util import Surv

from riskbench.metrics import aalen_johansen, censoring_survival, kaplan_meier


def test_kaplan_meier_leukemia_six_mp_arm():
    df = load_leukemia()
    arm = df[df["Rx"] == 0]
    curve = kaplan_meier(arm["t"].to_numpy(float), arm["status"].to_numpy())
    weeks = [6, 7, 10, 13, 16, 22, 23]
    np.testing.assert_allclose(curve(weeks), [0.8571, 0.8067, 0.7529, 0.6902, 0.6275, 0.5378, 0.4482], atol=5e-5)
    np.testing.assert_allclose(
        np.sqrt(curve.var_at(weeks)), [0.0764, 0.0869, 0.0963, 0.1068, 0.1141, 0.1282, 0.1346], atol=5e-5
    )


def test_censoring_curve_agrees_with_scikit_survival(shipped):
    ours = censoring_survival(shipped.time, shipped.event)
    ref = CensoringDistributionEstimator().fit(Surv.from_arrays(shipped.event, shipped.time))
    grid = np.unique(shipped.time)[:-1]
    np.testing.assert_allclose(ours(grid), ref.predict_proba(grid), atol=1e-12)


def test_aalen_johansen_agrees_with_lifelines():
    rng = np.random.default_rng(0)
    t = rng.uniform(0, 10, 300)  # no ties: lifelines would jitter tied times
    status = rng.choice([0, 1, 2], 300, p=[0.3, 0.5, 0.2])
    ref = AalenJohansenFitter(calculate_variance=True).fit(t, status, event_of_interest=1)
    ours = aalen_johansen(t, status, cause=1)
    grid = ref.cumulative_density_.index.to_numpy()[1:-1]
    np.testing.assert_allclose(ours(grid), ref.cumulative_density_.iloc[1:-1, 0], atol=1e-10)
    np.testing.assert_allclose(ours.var_at(grid), ref.variance_.iloc[1:-1], rtol=1e-8)


def test_aalen_johansen_without_competing_events_is_one_minus_kaplan_meier():
    rng = np.random.default_rng(1)
    t = rng.integers(1, 15, 200).astype(float)
    status = rng.choice([0, 1], 200)
    grid = np.arange(0, 15.0)
    np.testing.assert_allclose(aalen_johansen(t, status)(grid), 1 - kaplan_meier(t, status)(grid), atol=1e-12)
    # the delta-method variance reduces to Greenwood's
    np.testing.assert_allclose(aalen_johansen(t, status).var_at(grid), kaplan_meier(t, status).var_at(grid), rtol=1e-9)
