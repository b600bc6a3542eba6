"""Calibration of cumulative-incidence predictions under competing risks.

Outside checks:

* pseudo-observations equal a brute-force jackknife of lifelines' ``AalenJohansenFitter`` (n refits) to 1e-10,
  and of riskbench's own Aalen–Johansen estimator with tied times (the definition of Andersen, Klein &
  Rosthøj 2003: θ_i = n F(τ) − (n − 1) F₋ᵢ(τ));
* on data simulated from known cause-specific hazards the true cumulative incidence is known in closed form:
  with outcome hazard a·exp(x) and competing hazard b,
  F(τ | x) = a e^x / (a e^x + b) · (1 − exp(−(a e^x + b) τ)) (Putter, Fiocco & Geskus 2007, Stat Med,
  section 2 — the cumulative incidence of constant cause-specific hazards). Predictions equal to the truth give
  a slope within Monte Carlo error of 1, an intercept near 0 and an ICI near 0; predictions scaled by 1.5 give
  O/E = 1/1.5 of the truth's (Austin, Putter, Giardiello & van Klaveren 2022, Diagn Progn Res, use the same
  checks of a correctly specified model); 1 − S of the cause-specific model is calibrated against
  1 − Kaplan–Meier with competing events censored and overestimates the cumulative incidence.
"""

import warnings

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from lifelines import AalenJohansenFitter

from riskbench.metrics import MetricInputError, calibration_at_horizon
from riskbench.metrics.censoring import aalen_johansen
from riskbench.metrics.pseudo_observations import pseudo_observations

TAU = 3.0
OUTCOME_RATE, COMPETING_RATE = 0.08, 0.06


def _simulate(n, seed):
    """Exponential cause-specific hazards (outcome 0.08·exp(x), competing 0.06); uniform censoring on [0, 12].

    x is a standard normal clipped to [−3, 1.5], so that 1.5 times the largest true risk stays below 1."""
    rng = np.random.default_rng(seed)
    x = np.clip(rng.normal(size=n), -3.0, 1.5)
    h1 = OUTCOME_RATE * np.exp(x)
    t_event = rng.exponential(1 / (h1 + COMPETING_RATE))
    cause = np.where(rng.uniform(size=n) < h1 / (h1 + COMPETING_RATE), 1, 2)
    t_cens = rng.uniform(0, 12, n)
    time = np.minimum(t_event, t_cens)
    status = np.where(t_event <= t_cens, cause, 0)
    return time, status, x


def true_cif(x, tau=TAU):
    h1 = OUTCOME_RATE * np.exp(x)
    total = h1 + COMPETING_RATE
    return h1 / total * -np.expm1(-total * tau)


def true_cause_specific_risk(x, tau=TAU):
    return -np.expm1(-OUTCOME_RATE * np.exp(x) * tau)


@pytest.fixture(scope="module")
def cohort():
    return _simulate(6000, 11)


def test_pseudo_observations_equal_lifelines_jackknife():
    warnings.simplefilter("ignore")  # lifelines warns about its own internals on small samples
    rng = np.random.default_rng(5)
    n = 40
    t = rng.exponential(5.0, n)
    s = rng.choice([0, 1, 2], n, p=[0.4, 0.35, 0.25])

    def aj(tt, ss):
        curve = AalenJohansenFitter().fit(tt, ss, event_of_interest=1).cumulative_density_.loc[:4.0]
        return float(curve.iloc[-1, 0]) if len(curve) else 0.0

    full = aj(t, s)
    brute = np.array([n * full - (n - 1) * aj(np.delete(t, i), np.delete(s, i)) for i in range(n)])
    np.testing.assert_allclose(pseudo_observations(t, s, 4.0), brute, atol=1e-10, rtol=0)


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 10_000), n=st.integers(2, 30), tau=st.sampled_from([0.5, 2.0, 3.0, 100.0]))
def test_pseudo_observations_equal_brute_force_with_ties(seed, n, tau):
    rng = np.random.default_rng(seed)
    t = np.round(rng.exponential(3.0, n))  # many ties, including ties between events and censorings
    s = rng.choice([0, 1, 2], n)

    def aj(tt, ss):
        return float(aalen_johansen(tt, ss)(tau))

    full = aj(t, s)
    brute = np.array([n * full - (n - 1) * aj(np.delete(t, i), np.delete(s, i)) for i in range(n)])
    np.testing.assert_allclose(pseudo_observations(t, s, tau), brute, atol=1e-10, rtol=0)


def test_pseudo_observations_without_competing_events_are_kaplan_meier_jackknife():
    """Without competing events the Aalen–Johansen estimator is 1 − Kaplan–Meier (Putter et al. 2007)."""
    rng = np.random.default_rng(3)
    t, s = rng.exponential(2.0, 25), rng.choice([0, 1], 25)
    from riskbench.metrics.censoring import kaplan_meier

    def km(tt, ss):
        return 1.0 - float(kaplan_meier(tt, ss)(1.5))

    brute = np.array([25 * km(t, s) - 24 * km(np.delete(t, i), np.delete(s, i)) for i in range(25)])
    np.testing.assert_allclose(pseudo_observations(t, s, 1.5), brute, atol=1e-12)


def test_true_cumulative_incidence_is_calibrated(cohort):
    t, s, x = cohort
    cal = calibration_at_horizon(t, s, true_cif(x), TAU, n_boot=0)
    # n = 6000, about 1100 outcomes by τ: slope SE about 0.04 (Monte Carlo error); ICI a few thousandths
    assert abs(cal.slope - 1) < 3 * cal.slope_se and cal.slope_se < 0.06
    assert abs(cal.intercept) < 3 * cal.intercept_se
    assert cal.ici < 0.01 and cal.e90 < 0.025
    assert cal.oe_lower < 1 < cal.oe_upper
    assert cal.target == "cumulative_incidence"


@settings(max_examples=5, deadline=None)
@given(seed=st.integers(0, 100_000))
def test_true_cumulative_incidence_calibrated_for_any_seed(seed):
    """n = 3000: slope within 4 SE of 1 and ICI under 0.03 (measured over seeds 0–59 at this size: median
    0.009, largest 0.024; |slope − 1| / SE largest 1.9)."""
    t, s, x = _simulate(3000, seed)
    cal = calibration_at_horizon(t, s, true_cif(x), TAU, n_boot=0, check_direction=False)
    assert abs(cal.slope - 1) < 4 * cal.slope_se
    assert cal.ici < 0.03


def test_scaled_predictions_give_observed_expected_of_the_inverse_scale(cohort):
    t, s, x = cohort
    truth = calibration_at_horizon(t, s, true_cif(x), TAU, n_boot=0)
    scaled = calibration_at_horizon(t, s, 1.5 * true_cif(x), TAU, n_boot=0)
    assert scaled.oe_ratio == pytest.approx(truth.oe_ratio / 1.5, rel=1e-12)
    assert scaled.oe_ratio == pytest.approx(1 / 1.5, abs=0.05)  # Monte Carlo error of O/E about 0.03 here
    assert scaled.oe_upper < 0.8 and scaled.intercept < -3 * scaled.intercept_se
    assert scaled.ici > 0.05


def test_cause_specific_risk_is_calibrated_against_kaplan_meier_only(cohort):
    t, s, x = cohort
    cs = true_cause_specific_risk(x)
    own = calibration_at_horizon(t, s, cs, TAU, target="cause_specific", n_boot=0)
    assert abs(own.slope - 1) < 3 * own.slope_se and own.ici < 0.01
    assert own.oe_lower < 1 < own.oe_upper
    against_cif = calibration_at_horizon(t, s, cs, TAU, n_boot=0)
    assert against_cif.oe_upper < 1  # 1 − S ignores the competing event and overestimates the incidence
    assert against_cif.ici > own.ici


def test_clustered_rows_duplicate_gives_the_same_slope_and_standard_error(cohort):
    """Each row twice, clustered on its original row: the estimating equations are unchanged and the
    clustered sandwich equals the row-level one (a patient at two landmarks counted as one cluster)."""
    t, s, x = (a[:2000] for a in cohort)
    one = calibration_at_horizon(t, s, true_cif(x), TAU, n_boot=0)
    ids = np.arange(t.size)
    two = calibration_at_horizon(
        np.r_[t, t], np.r_[s, s], np.r_[true_cif(x), true_cif(x)], TAU, n_boot=0, cluster=np.r_[ids, ids]
    )
    assert two.slope == pytest.approx(one.slope, rel=0.02)
    assert two.slope_se == pytest.approx(one.slope_se, rel=0.05)
    # the O/E interval from the clustered jackknife variance matches the delta-method interval of one copy
    # (the jackknife and delta-method variances of the Aalen–Johansen estimator agree asymptotically)
    assert (two.oe_lower, two.oe_upper) == pytest.approx((one.oe_lower, one.oe_upper), rel=0.01)
    rowwise = calibration_at_horizon(np.r_[t, t], np.r_[s, s], np.r_[true_cif(x), true_cif(x)], TAU, n_boot=0)
    assert rowwise.slope_se < 0.8 * two.slope_se  # ignoring the clusters understates the uncertainty


def test_band_is_seeded_and_brackets_the_curve(cohort):
    t, s, x = (a[:1500] for a in cohort)
    a = calibration_at_horizon(t, s, true_cif(x), TAU, n_boot=30, seed=4)
    b = calibration_at_horizon(t, s, true_cif(x), TAU, n_boot=30, seed=4)
    pd_a, pd_b = a.curve, b.curve
    np.testing.assert_array_equal(pd_a["observed_lower"], pd_b["observed_lower"])
    inside = (pd_a["observed_lower"] <= pd_a["observed"] + 1e-9) & (pd_a["observed"] <= pd_a["observed_upper"] + 1e-9)
    assert inside.mean() > 0.9


def test_unknown_target_is_refused(cohort):
    t, s, x = cohort
    with pytest.raises(MetricInputError, match="`target` must be one of"):
        calibration_at_horizon(t, s, true_cif(x), TAU, target="subdistribution", n_boot=0)


@pytest.mark.parametrize("target", ["cumulative_incidence", "cause_specific"])
def test_performance_table_shows_the_calibration_measures_of_the_same_target(cohort, target):
    """One O/E everywhere: the evaluation table of the validation stage reads the same numbers."""
    from riskbench.validation.performance import evaluate_risks, evaluation_time

    t, s, x = (a[:2000] for a in cohort)
    t = np.minimum(t, TAU)
    s = np.where(t >= TAU, 0, s)  # a landmark stack: administratively censored at the horizon
    risk = true_cif(x)
    table = evaluate_risks(t, s, {TAU: risk}, target=target).set_index("metric")["value"]
    cal = calibration_at_horizon(t, s, risk, evaluation_time(TAU, t), target=target, n_boot=0)
    assert table["oe_ratio"] == pytest.approx(cal.oe_ratio, rel=1e-12)
    assert table["calibration_slope"] == pytest.approx(cal.slope, rel=1e-12)
    assert table["ici"] == pytest.approx(cal.ici, rel=1e-12)
