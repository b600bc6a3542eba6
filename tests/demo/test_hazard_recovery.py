"""The simulated outcome times follow the stated hazard.

Simulation method under test: inverse-transform sampling of the cumulative hazard, piece by piece
for piecewise-constant covariates (Bender, Augustin & Blettner 2005, "Generating survival times to
simulate Cox proportional hazards models", Statistics in Medicine 24:1713-1723).

Outside checks: lifelines' CoxTimeVaryingFitter (Cox partial likelihood on (start, stop] rows, Efron
ties) must cover every true coefficient with its 99 % Wald interval; lifelines' Kaplan-Meier estimate
must cover the closed-form Weibull survival when all coefficients are zero; empirical survival of
direct draws must match the closed-form piecewise-exponential survival.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from lifelines import CoxTimeVaryingFitter, KaplanMeierFitter

from riskbench.demo import COVARIATES, GeneratorParameters, generate_cohort
from riskbench.demo.hazards import sample_piecewise_event_days

Z99 = 2.5758  # two-sided 99 % normal quantile


def test_cox_time_varying_fit_covers_true_coefficients():
    """Each true beta lies inside lifelines' 99 % interval (fixed seed, 2500 patients)."""
    cohort = generate_cohort(2500, seed=7, n_risk_paths=0)
    rows = cohort.truth.intervals.assign(event=lambda d: (d["status"] == 1).astype(int))
    assert rows["event"].sum() > 200  # enough outcomes for the check to have power
    fit = CoxTimeVaryingFitter().fit(
        rows[["patient_id", "start", "stop", "event", *COVARIATES]],
        id_col="patient_id",
        event_col="event",
        start_col="start",
        stop_col="stop",
    )
    coef, se = fit.summary["coef"], fit.summary["se(coef)"]
    for name in COVARIATES:
        true = cohort.truth.coefficients[name]
        assert abs(coef[name] - true) <= Z99 * se[name], (name, coef[name], se[name], true)
    # the interval is informative: the suspicion score's effect is clearly non-zero
    assert coef["suspicion_score"] - Z99 * se["suspicion_score"] > 0


def test_kaplan_meier_matches_closed_form_weibull_when_covariates_have_no_effect():
    """With beta = 0, no competing death and only administrative censoring, the outcome time is
    Weibull: S(t) = exp(-rho (t/365.25)^shape). Event days are ceil(t), so S at whole days is exact."""
    params = GeneratorParameters().replace(
        coefficients={name: 0.0 for name in COVARIATES},
        weibull_rho=0.3,
        weibull_shape=0.6,
        gompertz_b=0.0,
        loss_rate_per_year=0.0,
        discharge_probability=0.0,
    )
    cohort = generate_cohort(3000, seed=3, n_risk_paths=0, parameters=params)
    ends = cohort.outcomes
    entry = pd.to_datetime(cohort.patients["entry_date"])
    days = (pd.to_datetime(ends["date"]) - entry).dt.days.to_numpy()
    km = KaplanMeierFitter().fit(days, event_observed=(ends["kind"] == "outcome").to_numpy())
    table = km.event_table
    # Greenwood's variance: S(t)^2 * sum over event times <= t of d / (n (n - d))
    terms = (table["observed"] / (table["at_risk"] * (table["at_risk"] - table["observed"]))).cumsum()
    assert (ends["kind"] == "outcome").sum() > 1000
    for t in (30, 365, 730, 1461):
        expected = np.exp(-0.3 * (t / 365.25) ** 0.6)
        estimate = float(km.survival_function_at_times(t).iloc[0])
        se = estimate * np.sqrt(float(terms[terms.index <= t].iloc[-1]))
        assert abs(estimate - expected) <= Z99 * se, (t, estimate, expected, se)


def test_piecewise_draws_follow_closed_form_survival():
    """Two pieces with hazard ratios exp(0) then exp(1.5) on a Weibull baseline: the empirical survival
    of 200,000 draws matches exp(-H(t)) within 4 binomial standard errors at several times."""
    params = GeneratorParameters().replace(weibull_rho=0.2, weibull_shape=1.3)
    n = 200_000
    patient = np.repeat(np.arange(n), 2)
    start = np.tile([0.0, 400.0], n)
    stop = np.tile([400.0, 3000.0], n)
    eta = np.tile([0.0, 1.5], n)
    t = sample_piecewise_event_days(patient, start, stop, eta, n, params, np.random.default_rng(0))

    def h0(x):
        return 0.2 * (x / 365.25) ** 1.3

    for x in (100.0, 399.0, 401.0, 800.0, 1500.0):
        cum = h0(min(x, 400.0)) + (np.exp(1.5) * (h0(x) - h0(400.0)) if x > 400 else 0.0)
        expected = np.exp(-cum)
        observed = np.mean(t > x)
        assert abs(observed - expected) <= 4 * np.sqrt(expected * (1 - expected) / n), (x, observed, expected)
    # beyond the last piece the cumulative hazard is not reached: no event (inf), never a wrong time
    assert np.all((t > 0) & ((t <= 3000.0) | np.isinf(t)))


@pytest.mark.parametrize("bad", [{"n_patients": -5}, {"n_patients": 0}])
def test_sizes_checked_before_any_work(bad):
    with pytest.raises(ValueError, match="n_patients"):
        generate_cohort(bad["n_patients"], seed=0)


def test_an_extreme_hazard_does_not_disturb_other_patients_draws():
    """Regression: one patient with a huge linear predictor (hazard ratio e^60) must leave the draws
    of every other patient unchanged up to rounding (the running sum of cumulative hazards stays small;
    without the cap every later patient lost its event)."""
    params = GeneratorParameters()
    n = 2000
    patient = np.repeat(np.arange(n), 3)
    start = np.tile([0.0, 100.0, 400.0], n)
    stop = np.tile([100.0, 400.0, 2000.0], n)
    eta = np.tile([9.0, 9.5, 10.0], n)
    calm = sample_piecewise_event_days(patient, start, stop, eta, n, params, np.random.default_rng(4))
    eta_wild = eta.copy()
    eta_wild[:3] = 60.0
    wild = sample_piecewise_event_days(patient, start, stop, eta_wild, n, params, np.random.default_rng(4))
    np.testing.assert_allclose(wild[1:], calm[1:], rtol=1e-10)  # only rounding in the last digits
    assert wild[0] < 1.0  # the extreme patient has the event almost at once


def test_serum_marker_stays_inside_the_assay_range_for_extreme_nodules():
    from riskbench.demo.process import draw_hidden_state, measure_lab

    params = GeneratorParameters()
    state = draw_hidden_state(5, params, np.random.default_rng(0))
    state.aggressiveness[:] = 6.0  # far beyond anything a normal cohort holds
    marker = measure_lab(state, np.arange(5), np.full(5, 3000.0), params, np.random.default_rng(1))
    assert (marker <= params.marker_max_ng_ml).all() and (marker > 0).all()
