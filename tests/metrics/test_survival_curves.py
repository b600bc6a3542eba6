"""Kaplan–Meier and Aalen–Johansen estimates with bands, quantiles and numbers at risk, against outside software.

Datasets (shipped with the libraries): lifelines' ``load_waltons`` (163 subjects in two groups, control and
miR-137), lifelines' ``load_rossi`` (Rossi, Berk & Lenihan 1980: 432 released prisoners, re-arrest within 52
weeks, grouped by financial aid ``fin``) and scikit-survival's ``load_bmt`` (35 bone-marrow transplant patients
with relapse, code 1, and transplant-related death, code 2, competing; the data of Scrucca, Santucci & Aversa
2007, Bone Marrow Transplant 40:381–387).
References: lifelines' ``KaplanMeierFitter`` (log-log band, ``median_survival_times`` of the band, event table)
and ``AalenJohansenFitter``; statsmodels' ``SurvfuncRight.quantile_ci`` (Brookmeyer–Crowley limits on the
``cloglog`` and ``log`` scales, "not reached" as inf).
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st
from lifelines import AalenJohansenFitter, KaplanMeierFitter
from lifelines.datasets import load_rossi, load_waltons
from lifelines.utils import median_survival_times
from sksurv.datasets import load_bmt
from statsmodels.duration.survfunc import SurvfuncRight

from riskbench.metrics import MetricInputError, aalen_johansen_estimate, kaplan_meier_estimate

SCALE_IN_STATSMODELS = {"log-log": "cloglog", "log": "log"}


def _finite(value: float) -> float:
    return float("nan") if np.isinf(value) else float(value)


@pytest.fixture(scope="module")
def waltons() -> pd.DataFrame:
    return load_waltons()


def test_waltons_medians_and_limits_equal_lifelines(waltons):
    est = kaplan_meier_estimate(waltons["T"], waltons["E"], group=waltons["group"])
    medians = est.median().set_index("group")
    for group, rows in waltons.groupby("group"):
        peer = KaplanMeierFitter().fit(rows["T"], rows["E"])
        limits = median_survival_times(peer.confidence_interval_).to_numpy()[0]
        assert medians.loc[group, "time"] == peer.median_survival_time_
        assert (medians.loc[group, "lower"], medians.loc[group, "upper"]) == tuple(limits)


@pytest.mark.parametrize("scale", ["log-log", "log"])
def test_quantiles_and_limits_equal_statsmodels_on_both_scales(waltons, scale):
    rossi = load_rossi()
    for time, event, group in (
        (waltons["T"], waltons["E"], waltons["group"]),
        (rossi["week"], rossi["arrest"], rossi["fin"]),
    ):
        est = kaplan_meier_estimate(time, event, group=group, ci_scale=scale)
        table = est.quantiles([0.1, 0.2, 0.25, 0.5]).set_index(["group", "probability"])
        for g in est.groups:
            rows = group == g
            peer = SurvfuncRight(time[rows].to_numpy(float), event[rows].to_numpy(float))
            for p in (0.1, 0.2, 0.25, 0.5):
                lower, upper = peer.quantile_ci(p, method=SCALE_IN_STATSMODELS[scale])
                ours = table.loc[(g, p)]
                np.testing.assert_equal(
                    [ours["time"], ours["lower"], ours["upper"]],
                    [_finite(peer.quantile(p)), _finite(lower), _finite(upper)],
                )
    # the log scale gives different limits somewhere (the test sees both scales at work)
    default = kaplan_meier_estimate(waltons["T"], waltons["E"], group=waltons["group"]).median()
    log = kaplan_meier_estimate(waltons["T"], waltons["E"], group=waltons["group"], ci_scale="log").median()
    assert not default.equals(log)


def test_estimate_se_and_band_equal_lifelines_and_statsmodels(waltons):
    rows = waltons[waltons["group"] == "control"]
    est = kaplan_meier_estimate(rows["T"], rows["E"])
    peer = KaplanMeierFitter().fit(rows["T"], rows["E"])
    ours = est.table.set_index("time")
    times = ours.index
    np.testing.assert_allclose(ours["estimate"], peer.survival_function_.loc[times].iloc[:, 0], atol=1e-12)
    band = peer.confidence_interval_.loc[times].to_numpy()
    np.testing.assert_allclose(ours[["lower", "upper"]].to_numpy(), band, atol=1e-12)
    sm = SurvfuncRight(rows["T"].to_numpy(float), rows["E"].to_numpy(float))
    at_events = pd.Series(sm.surv_prob_se, index=sm.surv_times)
    at_events = at_events[sm.surv_prob > 0]  # statsmodels leaves the SE undefined once S reaches 0; ours is 0
    assert ours["estimate"].iloc[-1] == 0 and ours["se"].iloc[-1] == 0
    np.testing.assert_allclose(ours.loc[at_events.index, "se"], at_events, atol=1e-12)


def test_number_at_risk_equals_lifelines_event_table(waltons):
    est = kaplan_meier_estimate(waltons["T"], waltons["E"], group=waltons["group"])
    for group, rows in waltons.groupby("group"):
        table = KaplanMeierFitter().fit(rows["T"], rows["E"]).event_table.iloc[1:]  # row 0 is time 0 (entrance)
        ours = est.table[est.table["group"] == group].set_index("time")
        np.testing.assert_array_equal(ours["at_risk"], table["at_risk"])
        np.testing.assert_array_equal(ours["events"], table["observed"])
        np.testing.assert_array_equal(ours["censored"], table["censored"])
        chosen = est.at_risk([0.0, 10.0, 30.5, 60.0, 1000.0]).loc[group]
        np.testing.assert_array_equal(chosen, [(rows["T"] >= t).sum() for t in (0.0, 10.0, 30.5, 60.0, 1000.0)])


@pytest.mark.parametrize("cause", [1, 2])
def test_aalen_johansen_equals_lifelines_on_transplant_data(cause):
    """lifelines breaks tied times by jittering them; both fit lifelines' jittered times (shifted by 1 so none is
    negative), so the comparison is exact, with the statuses of the original data."""
    _, y = load_bmt()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        jittered = AalenJohansenFitter(seed=3).fit(y["ftime"], y["status"], event_of_interest=cause).durations
    time, status = np.asarray(jittered, dtype=float) + 1.0, np.asarray(y["status"])
    peer = AalenJohansenFitter().fit(time, status, event_of_interest=cause)
    est = aalen_johansen_estimate(time, status, cause=cause)
    ours = est.table.set_index("time")
    times = ours.index
    np.testing.assert_allclose(ours["estimate"], peer.cumulative_density_.loc[times].iloc[:, 0], atol=1e-12)
    np.testing.assert_allclose(ours["se"] ** 2, peer.variance_.loc[times], atol=1e-12)
    band = peer.confidence_interval_.loc[times].to_numpy()
    moving = ours["estimate"].to_numpy() > 0  # lifelines' log(-log F) band is NaN where F = 0; ours is [0, 0]
    np.testing.assert_allclose(ours.loc[moving, ["lower", "upper"]].to_numpy(), band[moving], atol=1e-12)
    # quantiles: the first times F, its upper and its lower limit reach p, read off lifelines' numbers
    f = peer.cumulative_density_.loc[times].iloc[:, 0].to_numpy()
    for p in (0.1, 0.2):
        expected = [times[np.argmax(c >= p)] if (c >= p).any() else np.nan for c in (f, band[:, 1], band[:, 0])]
        got = est.quantiles([p]).iloc[0]
        np.testing.assert_equal([got["time"], got["lower"], got["upper"]], expected)
    assert est.table["events"].sum() == (status == cause).sum()
    assert est.table["other_events"].sum() == ((status != 0) & (status != cause)).sum()


@settings(max_examples=30, deadline=None)
@given(st.lists(st.integers(1, 40), min_size=2, max_size=60))
def test_without_censoring_survival_is_the_share_still_event_free(days):
    """With every subject followed to its event, Kaplan–Meier is the empirical survival share (definition)."""
    t = np.asarray(days, dtype=float)
    assume(np.unique(t).size > 1)
    est = kaplan_meier_estimate(t, np.ones(t.size, dtype=int))
    probe = np.arange(0.0, 42.0, 0.5)
    np.testing.assert_allclose(est.at(probe)["estimate"], [(t > x).mean() for x in probe], atol=1e-12)
    median = est.median()["time"].iloc[0]
    assert (t <= median).mean() >= 0.5 and (t < median).mean() < 0.5


def test_inputs_are_checked(waltons):
    with pytest.raises(MetricInputError, match="ci_scale"):
        kaplan_meier_estimate(waltons["T"], waltons["E"], ci_scale="arcsine")
    with pytest.raises(MetricInputError, match="strictly between 0 and 1"):
        kaplan_meier_estimate(waltons["T"], waltons["E"]).quantiles([0.5, 1.0])
    with pytest.raises(MetricInputError, match="cause"):
        aalen_johansen_estimate(waltons["T"], waltons["E"], cause=3)
    with pytest.raises(MetricInputError, match="group"):
        kaplan_meier_estimate(waltons["T"], waltons["E"], group=[None] * len(waltons))
