"""The oracle (true) risk is a probability that agrees with what happens in the simulation.

With censoring switched off (no discharge, no loss; the study close is at least five years after
entry), the outcome in (s, s + 2 years] is observed for every patient at risk at s. The mean true risk
must then equal the observed proportion up to binomial noise (calibration-in-the-large; the 99 %
band uses the normal approximation to the binomial, **common practice**), and the true risk must
order patients far better than chance.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from riskbench.demo import GeneratorParameters, generate_cohort

Z99 = 2.5758


@pytest.fixture(scope="module")
def uncensored():
    params = GeneratorParameters().replace(loss_rate_per_year=0.0, discharge_probability=0.0)
    return generate_cohort(2500, seed=31, landmarks_days=(0.0, 365.25), n_risk_paths=10, parameters=params)


def _observed(cohort, landmark, horizon):
    entry = pd.to_datetime(cohort.patients.set_index("patient_id")["entry_date"])
    o = cohort.outcomes.set_index("patient_id")
    end = (pd.to_datetime(o["date"]) - entry.loc[o.index]).dt.days
    at_risk = end > landmark
    event = (o["kind"] == "outcome") & (end <= landmark + horizon)
    return at_risk, event


@pytest.mark.parametrize("landmark", [0.0, 365.25])
def test_mean_true_risk_matches_observed_proportion(uncensored, landmark):
    risk = uncensored.truth.true_risk
    risk = risk[risk["landmark"] == landmark].set_index("patient_id")
    at_risk, event = _observed(uncensored, landmark, 730.5)
    assert set(risk.index) == set(at_risk[at_risk].index)
    observed = event[risk.index].mean()
    predicted = risk["true_risk"].mean()
    band = Z99 * np.sqrt(predicted * (1 - predicted) / len(risk)) + Z99 * risk["true_risk_se"].mean()
    assert abs(observed - predicted) <= band, (observed, predicted, band)
    # discrimination: events carry higher true risk than non-events (Mann-Whitney AUC)
    r = risk["true_risk"]
    e = event[risk.index]
    ranks = r.rank()
    auc = (ranks[e].sum() - e.sum() * (e.sum() + 1) / 2) / (e.sum() * (~e).sum())
    assert auc > 0.75


def test_true_risk_table_shape(uncensored):
    risk = uncensored.truth.true_risk
    assert list(risk.columns) == ["patient_id", "landmark", "horizon", "true_risk", "true_risk_se"]
    assert risk["true_risk"].between(0, 1).all() and (risk["true_risk_se"] >= 0).all()
    assert (risk["horizon"] == 730.5).all()
    assert not risk.duplicated(["patient_id", "landmark"]).any()


def test_true_risk_without_covariate_effects_is_the_closed_form():
    """beta = 0 and no competing death: the risk is 1 - exp(-(H0(s + w) - H0(s))) for every patient,
    whatever the future visits (the Monte Carlo error is then exactly zero)."""
    from riskbench.demo import COVARIATES

    params = GeneratorParameters().replace(
        coefficients={c: 0.0 for c in COVARIATES}, weibull_rho=0.2, weibull_shape=0.8, gompertz_b=0.0
    )
    cohort = generate_cohort(200, seed=2, landmarks_days=(0.0, 200.0), n_risk_paths=4, parameters=params)
    risk = cohort.truth.true_risk

    def h0(t):
        return 0.2 * (t / 365.25) ** 0.8

    s = risk["landmark"].to_numpy()
    expected = 1 - np.exp(-(h0(s + 730.5) - h0(s)))
    np.testing.assert_allclose(risk["true_risk"], expected, rtol=1e-9)


def test_true_risk_with_competing_death_matches_adaptive_quadrature():
    """beta = 0 with Gompertz deaths: the cumulative incidence of the outcome over (s, s + w] is
    integral h0(t) exp(-(H0(t) - H0(s)) - (H2(t) - H2(s))) dt, here by scipy's adaptive quadrature
    (QUADPACK) as an independent calculation."""
    from scipy.integrate import quad

    from riskbench.demo import COVARIATES

    params = GeneratorParameters().replace(
        coefficients={c: 0.0 for c in COVARIATES},
        weibull_rho=0.3,
        weibull_shape=0.7,
        gompertz_b=4e-4,
        gompertz_c=0.1,
    )
    cohort = generate_cohort(40, seed=9, landmarks_days=(0.0, 500.0), n_risk_paths=2, parameters=params)
    entry = pd.to_datetime(cohort.patients.set_index("patient_id")["entry_date"])
    birth = pd.to_datetime(cohort.patients.set_index("patient_id")["birth_date"])
    age = (entry - birth).dt.days / 365.25
    for row in cohort.truth.true_risk.itertuples():
        a0 = age[row.patient_id]

        def h0(t):
            return 0.3 * (t / 365.25) ** 0.7

        def h2(t, a0=a0):
            return 4e-4 / 0.1 * np.exp(0.1 * a0) * np.expm1(0.1 * t / 365.25)

        def density(t, s=row.landmark):
            hazard = 0.3 * 0.7 * (t / 365.25) ** -0.3 / 365.25
            return hazard * np.exp(-(h0(t) - h0(s)) - (h2(t) - h2(s)))

        expected, _ = quad(density, row.landmark, row.landmark + 730.5, epsabs=1e-12, epsrel=1e-10, limit=200)
        assert row.true_risk == pytest.approx(expected, rel=1e-7)
