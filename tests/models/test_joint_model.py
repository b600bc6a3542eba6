"""Joint model of a repeated marker and the outcome: checks against outside references.

Sources named beside each check. Data come from :mod:`joint_simulation` (written from the published model
equations, not from the fitting code).
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

sys.path.insert(0, str(Path(__file__).parent))
from joint_simulation import DAYS, JointTruth, simulate_joint

from riskbench.models.joint_model import JointModel
from riskbench.models.risk_contract import ModelInputError


@pytest.fixture(scope="module")
def small_data() -> tuple[pd.DataFrame, pd.DataFrame]:
    return simulate_joint(400, seed=2)


@pytest.fixture(scope="module")
def no_association(small_data: tuple[pd.DataFrame, pd.DataFrame]) -> JointModel:
    measurements, survival = small_data
    return JointModel(
        "value", marker_covariates=["x"], event_covariates=["w"], association="none", competing=False
    ).fit(measurements, survival)


def test_marker_submodel_equals_statsmodels_mixedlm_ml(small_data, no_association):
    """With the association fixed at zero the joint likelihood factorises, so the marker submodel must be
    the linear mixed model's maximum-likelihood fit (Laird & Ware 1982, Biometrics 38:963-974; Rizopoulos
    2012, section 4.1). Reference: statsmodels ``MixedLM`` with ``reml=False``, random intercept and slope,
    on the same data; agreement to 1e-4."""
    import statsmodels.formula.api as smf

    measurements, survival = small_data
    data = measurements.merge(survival[["patient_id", "x"]], on="patient_id")
    data["t"] = data["time"] / DAYS
    data["xc"] = data["x"] - survival["x"].mean()  # the model centres covariates at their means
    reference = smf.mixedlm("value ~ t + xc", data, groups=data["patient_id"], re_formula="~t").fit(
        reml=False, method="lbfgs"
    )
    theta = no_association.theta_
    np.testing.assert_allclose(theta[:3], reference.fe_params.to_numpy(), atol=1e-4)
    assert abs(np.exp(2 * theta[3]) - reference.scale) < 1e-4
    chol = np.array([[np.exp(theta[4]), 0.0], [theta[5], np.exp(theta[6])]])
    np.testing.assert_allclose(chol @ chol.T, reference.cov_re.to_numpy(), atol=1e-4)
    assert no_association.marker_loglik_ >= reference.llf - 1e-6


def test_survival_submodel_equals_piecewise_exponential_poisson_glm(small_data, no_association):
    """With the association at zero the hazard submodel is a piecewise-exponential model, whose maximum
    likelihood equals a Poisson regression of the event counts per (patient, piece) with log exposure as
    offset (Holford 1980, Biometrics 36:299-305; Laird & Olivier 1981, JASA 76:231-240). Reference:
    statsmodels GLM Poisson on the split data, same knots; agreement to 1e-4."""
    import statsmodels.api as sm

    _, survival = small_data
    knots = no_association.structure_.knots
    end = survival["time"].to_numpy() / DAYS
    status = survival["status"].to_numpy()
    upper = np.append(knots[1:], np.inf)
    exposure = np.clip(end[:, None], knots, upper) - knots  # (n, K)
    piece = np.clip(np.searchsorted(knots, end, side="left") - 1, 0, len(knots) - 1)
    events = np.zeros_like(exposure)
    events[np.arange(len(end)), piece] = (status == 1).astype(float)
    keep = exposure.ravel() > 0
    dummies = np.tile(np.eye(len(knots)), (len(end), 1))[keep]
    w = np.repeat(survival["w"].to_numpy(), len(knots))[keep]
    design = np.column_stack([dummies, w])
    fit = sm.GLM(events.ravel()[keep], design, family=sm.families.Poisson(), offset=np.log(exposure.ravel()[keep])).fit(
        tol=1e-12
    )
    layout = no_association.structure_.layout
    sl_h, sl_g, _ = layout.cause_slices(0)
    gamma = no_association.theta_[sl_g][0]
    assert abs(gamma - fit.params[-1]) < 1e-4
    # our baseline refers to the mean of w: log h_k = GLM piece coefficient + γ · mean(w)
    np.testing.assert_allclose(no_association.theta_[sl_h], fit.params[:-1] + gamma * survival["w"].mean(), atol=1e-4)


def test_recovers_association_in_one_large_replicate():
    """Parameter recovery, one replicate of 2,000 patients from the model of Henderson, Diggle & Dobson
    (2000, section 2) / Rizopoulos (2012, section 4.1): every true marker, association and hazard
    coefficient lies within 3.5 standard errors of its estimate (a 50-replicate study with bias and coverage
    is ``benchmarks/joint_model_recovery.py``)."""
    truth = JointTruth(rate_outcome=0.004)
    measurements, survival = simulate_joint(2000, truth, seed=11)
    model = JointModel("value", marker_covariates=["x"], event_covariates=["w"]).fit(measurements, survival)
    table = model.summary().set_index("parameter")
    checks = {
        "marker: time_years": truth.beta[1],
        "marker: x": truth.beta[2],
        "marker: residual SD": truth.sigma,
        "marker: random-intercept SD": np.sqrt(truth.d[0][0]),
        "marker: random-slope SD per year": np.sqrt(truth.d[1][1]),
        "outcome: w": truth.gamma_outcome,
        "outcome: association, current marker value": truth.alpha,
        "competing: w": truth.gamma_competing,
    }
    for name, value in checks.items():
        row = table.loc[name]
        assert abs(row["estimate"] - value) < 3.5 * row["std_error"], (name, row["estimate"], value)
    assert model.converged_


def test_gradient_is_exact():
    """Private algorithm on purpose: the analytic gradient of the joint log-likelihood equals central
    differences of the log-likelihood (value and slope association, spline time basis, competing cause)."""
    from riskbench.models.joint_data import History, build_arrays
    from riskbench.models.joint_design import TimeBasis
    from riskbench.models.joint_likelihood import ParameterLayout, joint_loglik
    from riskbench.models.joint_quadrature import adaptive_nodes, hermite_grid

    rng = np.random.default_rng(1)
    n = 60
    end = rng.uniform(0.5, 5, n)
    status = rng.choice([0, 1, 2], n)
    counts = rng.integers(0, 6, n)
    patient = np.repeat(np.arange(n), counts)
    times = rng.uniform(0, 1, len(patient)) * end[patient]
    basis = TimeBasis((0.0, 1.0, 2.0, 4.0))
    arrays = build_arrays(
        History(patient, times, rng.normal(size=len(patient)) + times),
        end,
        status,
        rng.normal(size=(n, 1)),
        [rng.normal(size=(n, 2)), rng.normal(size=(n, 1))],
        [("value", "slope"), ("value",)],
        basis,
        np.array([0.0, 1.0, 2.5]),
        5,
    )
    layout = ParameterLayout(2 + basis.n_columns, 3, ((2, 2), (1, 1)))
    theta = rng.normal(size=layout.size) * 0.3
    points, log_weight = adaptive_nodes(
        rng.normal(size=(n, 2)) * 0.3, np.tile(np.eye(2) * 0.2, (n, 1, 1)), *hermite_grid(4, 2)
    )
    _, grad, _ = joint_loglik(theta, arrays, layout, points, log_weight)
    step = 1e-6
    numeric = [
        (
            joint_loglik(theta + e, arrays, layout, points, log_weight)[0]
            - joint_loglik(theta - e, arrays, layout, points, log_weight)[0]
        )
        / (2 * step)
        for e in np.eye(layout.size) * step
    ]
    np.testing.assert_allclose(grad, numeric, atol=1e-5 * max(1.0, np.abs(grad).max()))


def test_spline_time_basis_fits(small_data):
    """A natural cubic spline of time (Hastie, Tibshirani & Friedman 2009, eq. 5.4-5.5) contains the straight
    line, so its maximised likelihood is at least the linear model's (nested models)."""
    measurements, survival = small_data
    linear = JointModel("value", event_covariates=["w"], competing=False).fit(measurements, survival)
    spline = JointModel("value", event_covariates=["w"], competing=False, time_knots=2).fit(measurements, survival)
    assert spline.structure_.basis.n_columns == 3
    assert spline.loglik_ >= linear.loglik_ - 1e-3


def test_refuses_measurements_after_follow_up(small_data):
    measurements, survival = small_data
    late = measurements.copy()
    late.loc[0, "time"] = survival.set_index("patient_id").loc[late.loc[0, "patient_id"], "time"] + 10
    with pytest.raises(ModelInputError, match="after the patient's event"):
        JointModel("value").fit(late, survival)


def test_refuses_unknown_association():
    with pytest.raises(ModelInputError, match="association"):
        JointModel("value", association="area").fit(pd.DataFrame(), pd.DataFrame())


def test_data_without_competing_events_fit_the_outcome_model_alone(small_data):
    measurements, survival = small_data
    censored = survival.assign(status=survival["status"].replace({2: 0}))
    model = JointModel("value", event_covariates=["w"], max_iter=50).fit(measurements, censored)
    assert len(model.structure_.cause_terms) == 1
