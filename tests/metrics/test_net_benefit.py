"""Net benefit (Vickers et al. 2008, survival version) and the triage operating point.

Outside checks: each net benefit recomputed from lifelines' Kaplan–Meier among those above the threshold
with the published formula NB = P(risk ≥ p)·[O⁺ − (1 − O⁺)·p/(1 − p)]; treat-all from the cohort's
Kaplan–Meier; the triage NPV / PPV equal lifelines' Kaplan–Meier below / above the chosen threshold.
"""

import numpy as np
import pytest
from lifelines import KaplanMeierFitter

from riskbench.metrics import MetricInputError, net_benefit, triage_operating_point

HORIZON = 3.0


@pytest.fixture(scope="module")
def cohort():
    rng = np.random.default_rng(4)
    n = 2000
    x = rng.normal(size=n)
    t_event = rng.exponential(1 / (0.05 * np.exp(x)))
    t_cens = rng.uniform(0, 20, n)
    t = np.minimum(t_event, t_cens)
    e = (t_event <= t_cens).astype(int)
    return t, e, 1 - np.exp(-0.05 * HORIZON * np.exp(x))


def _km_risk(t, e):
    return 1 - float(KaplanMeierFitter().fit(t, e).predict(HORIZON))


def test_net_benefit_matches_formula_with_lifelines_km(cohort):
    t, e, risk = cohort
    table = net_benefit(t, e, risk, HORIZON, [0.05, 0.1, 0.2, 0.3])
    for row in table.itertuples():
        above = risk >= row.threshold
        o = _km_risk(t[above], e[above])
        odds = row.threshold / (1 - row.threshold)
        assert row.model == pytest.approx(above.mean() * (o - (1 - o) * odds), abs=1e-10)
        overall = _km_risk(t, e)
        assert row.treat_all == pytest.approx(overall - (1 - overall) * odds, abs=1e-10)
    assert (table["treat_none"] == 0).all()


def test_useful_model_beats_both_defaults_at_moderate_thresholds(cohort):
    t, e, risk = cohort
    table = net_benefit(t, e, risk, HORIZON, [0.15, 0.2, 0.25])
    assert (table["model"] > table["treat_all"]).all() and (table["model"] > 0).all()


def test_net_benefit_rejects_thresholds_outside_zero_one(cohort):
    t, e, risk = cohort
    for bad in ([-0.01, 0.5], [0.2, 1.0], [np.nan]):
        with pytest.raises(MetricInputError, match="from 0 up to"):
            net_benefit(t, e, risk, HORIZON, bad)


def test_threshold_zero_treats_everyone(cohort):
    """At p = 0 the odds are 0, so model and treat-all both equal the observed risk (Vickers & Elkin 2006:
    the decision curve of treat-all meets the prevalence at threshold 0)."""
    t, e, risk = cohort
    row = net_benefit(t, e, risk, HORIZON, [0.0]).iloc[0]
    assert row.fraction_treated == 1.0
    assert row.model == pytest.approx(_km_risk(t, e), abs=1e-12)
    assert row.treat_all == pytest.approx(_km_risk(t, e), abs=1e-12)


def test_triage_reaches_target_npv_and_matches_kaplan_meier(cohort):
    t, e, risk = cohort
    out = triage_operating_point(t, e, risk, HORIZON, target_npv=0.95, n_boot=30, seed=1).set_index("quantity")
    c = out.loc["threshold", "estimate"]
    below = risk < c
    assert out.loc["npv", "estimate"] >= 0.95
    assert out.loc["npv", "estimate"] == pytest.approx(1 - _km_risk(t[below], e[below]), abs=1e-10)
    assert out.loc["ppv", "estimate"] == pytest.approx(_km_risk(t[~below], e[~below]), abs=1e-10)
    assert out.loc["fraction_below", "estimate"] == pytest.approx(below.mean())
    assert (out["lower"] <= out["estimate"] + 1e-12).all() and (out["estimate"] <= out["upper"] + 1e-12).all()
    # the next candidate threshold (200 quantiles of risk, as documented) no longer keeps the target
    candidates = np.unique(np.quantile(risk, np.linspace(0, 1, 200)))
    nxt = candidates[candidates > c][0]
    spared = risk < nxt
    assert 1 - _km_risk(t[spared], e[spared]) < 0.95


def test_triage_is_seeded_and_sensitivity_target_works(cohort):
    t, e, risk = cohort
    a = triage_operating_point(t, e, risk, HORIZON, target_sensitivity=0.9, n_boot=20, seed=3)
    b = triage_operating_point(t, e, risk, HORIZON, target_sensitivity=0.9, n_boot=20, seed=3)
    assert a.equals(b)
    assert a.set_index("quantity").loc["sensitivity", "estimate"] >= 0.9


def test_triage_bad_targets(cohort):
    t, e, risk = cohort
    with pytest.raises(MetricInputError, match="exactly one"):
        triage_operating_point(t, e, risk, HORIZON, target_npv=0.9, target_sensitivity=0.9)
    # the lowest-risk patient has the outcome first: no spared group keeps an NPV of 0.99
    tiny_t = np.array([1.0, 2.5, 3.0, 4.0, 5.0, 6.0])
    tiny_e = np.array([1, 1, 0, 1, 0, 1])
    tiny_r = np.array([0.1, 0.2, 0.3, 0.4, 0.5, 0.6])
    with pytest.raises(MetricInputError, match="no risk threshold"):
        triage_operating_point(tiny_t, tiny_e, tiny_r, 2.0, target_npv=0.99, n_boot=1)
