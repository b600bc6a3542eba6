"""Landmark super-model: cross-checks against lifelines' CoxPHFitter and checks of the design."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from lifelines import CoxPHFitter

from riskbench.models import LandmarkSupermodel, RiskModel
from riskbench.models.risk_contract import ModelInputError, cumulative_incidence


def test_stratified_constant_effects_equal_stratified_cox_with_robust_se(make_stack) -> None:
    """landmark_effects="none" + baseline="stratified" is a Cox model on the stack stratified by landmark
    (van Houwelingen 2007, section 3): coefficients, model-based SE and cluster-robust SE (by patient) equal
    lifelines' CoxPHFitter(strata, cluster_col) to 1e-5."""
    stack = make_stack(n_patients=250, competing_rate=0)
    ours = LandmarkSupermodel(["x1", "x2"], landmark_effects="none", baseline="stratified").fit(stack)
    data = stack[["time", "status", "x1", "x2", "landmark"]]
    plain = CoxPHFitter().fit(data, "time", "status", strata=["landmark"])
    robust = CoxPHFitter().fit(
        stack[["time", "status", "x1", "x2", "landmark", "patient_id"]],
        "time",
        "status",
        strata=["landmark"],
        cluster_col="patient_id",
    )
    np.testing.assert_allclose(ours.coef_, plain.params_[["x1", "x2"]], atol=1e-5)
    np.testing.assert_allclose(np.sqrt(np.diag(ours.var_)), plain.standard_errors_[["x1", "x2"]], atol=1e-5)
    np.testing.assert_allclose(np.sqrt(np.diag(ours.robust_var_)), robust.standard_errors_[["x1", "x2"]], atol=1e-5)
    summary = ours.summary()
    assert list(summary["term"]) == ["x1", "x2"] and (summary["cause"] == "outcome").all()


def test_competing_cumulative_incidence_matches_lifelines_cause_specific_hazards(make_stack) -> None:
    """The risk in (s, s+w] is the Aalen–Johansen combination of the two cause-specific Cox cumulative hazards
    given the covariates (Putter, Fiocco & Geskus 2007, Stat Med, section 4); here the hazards come from
    lifelines' stratified CoxPHFitter (Breslow baseline) and only the combination is ours."""
    stack = make_stack(n_patients=200, competing_rate=1 / 600, seed=1)
    model = LandmarkSupermodel(["x1", "x2"], landmark_effects="none", baseline="stratified").fit(stack)
    rows = stack.groupby("landmark").head(3)
    horizon = 500.0
    ours = model.predict_risk(rows, horizon)

    grid = np.unique(stack["time"])
    grid = grid[grid <= horizon]
    cumhaz = []
    for cause in (1, 2):
        data = stack.assign(event=(stack["status"] == cause).astype(int))[["time", "event", "x1", "x2", "landmark"]]
        fitted = CoxPHFitter().fit(data, "time", "event", strata=["landmark"])
        cumhaz.append(fitted.predict_cumulative_hazard(rows, times=grid).to_numpy().T)
    jumps = [np.diff(h, axis=1, prepend=0.0) for h in cumhaz]
    expected = cumulative_incidence(jumps[0], jumps[1])[:, -1]
    np.testing.assert_allclose(ours, expected, rtol=1e-5)
    # competing event removes patients from risk: cause-specific 1 - S would be larger
    no_competing = LandmarkSupermodel(
        ["x1", "x2"], landmark_effects="none", baseline="stratified", competing=False
    ).fit(stack)
    assert np.all(no_competing.predict_risk(rows, horizon) > ours)


def test_smooth_baseline_and_landmark_dependent_effects_recover_a_drifting_coefficient(make_stack) -> None:
    """Data drawn with β₁(s) = 0.3 + 0.6·s/S: the linear landmark-effect model recovers slope and intercept
    within 3 robust standard errors (van Houwelingen 2007, model with β(s) = β₀ + β₁·s)."""
    stack = make_stack(n_patients=900, beta=(0.3, -0.4), beta_slope=(0.6, 0.0), seed=2, competing_rate=0)
    model = LandmarkSupermodel(["x1", "x2"], landmark_effects="linear", baseline="smooth").fit(stack)
    assert model.design_columns_ == ["x1", "x2", "x1:s", "x2:s", "landmark_s", "landmark_s2"]
    se = np.sqrt(np.diag(model.robust_var_))
    truth = {"x1": 0.3, "x2": -0.4, "x1:s": 0.6, "x2:s": 0.0}
    for j, name in enumerate(model.design_columns_[:4]):
        assert abs(model.coef_[j] - truth[name]) < 3 * se[j], name
    at = model.landmark_coefficients([0.0, 365.25])
    np.testing.assert_allclose(at["x1"], [model.coef_[0], model.coef_[0] + model.coef_[2]])


def test_quadratic_model_predicts_between_landmarks_for_unseen_patients(make_stack) -> None:
    """The contract: rows of patients not seen in fitting, with only covariates and a landmark, get risks in
    [0, 1] that do not depend on the other rows, curves non-decreasing in the horizon."""
    model = LandmarkSupermodel(["x1", "x2"], landmark_effects="quadratic").fit(make_stack(n_patients=200, seed=5))
    assert isinstance(model, RiskModel)
    new = pd.DataFrame({"landmark": [0.0, 100.0, 300.0], "x1": [1.5, 0.0, -1.0], "x2": [0.0, 0.5, 1.0]})
    risk = model.predict_risk(new, 365.25)
    assert np.all((risk > 0) & (risk < 1))
    assert risk[0] > risk[2]  # x1 raises the hazard
    alone = model.predict_risk(new.iloc[[1]], 365.25)
    np.testing.assert_allclose(alone, risk[[1]])
    curve = model.predict_curve(new, [30.0, 182.0, 365.25, 700.0])
    assert np.all(np.diff(curve, axis=1) >= 0)
    np.testing.assert_allclose(curve[:, 2], risk)


def test_clear_errors(make_stack) -> None:
    stack = make_stack(n_patients=120, seed=6)
    with pytest.raises(ModelInputError, match="lacks column 'status'"):
        LandmarkSupermodel(["x1"]).fit(stack.drop(columns="status"))
    with pytest.raises(ModelInputError, match="needs at least 3 distinct landmarks"):
        LandmarkSupermodel(["x1"], landmark_effects="quadratic").fit(stack[stack["landmark"] > 0])
    with pytest.raises(ModelInputError, match="needs at least 2 distinct landmarks"):
        LandmarkSupermodel(["x1"]).fit(stack[stack["landmark"] == 0])
    with pytest.raises(ModelInputError, match=r"'x2' .*missing in 1 row.*\[missing_data\] method"):
        LandmarkSupermodel(["x1", "x2"]).fit(stack.assign(x2=stack["x2"].mask(stack.index == 7)))
    stratified = LandmarkSupermodel(["x1"], landmark_effects="none", baseline="stratified").fit(stack)
    with pytest.raises(ModelInputError, match="only at the fitted landmarks"):
        stratified.predict_risk(pd.DataFrame({"landmark": [50.0], "x1": [0.0]}), 365.25)
    smooth = LandmarkSupermodel(["x1"]).fit(stack)
    with pytest.raises(ModelInputError, match="outside the fitted range"):
        smooth.predict_risk(pd.DataFrame({"landmark": [900.0], "x1": [0.0]}), 365.25)
    with pytest.raises(ModelInputError, match="beyond"):
        smooth.predict_risk(stack.head(2), 2000.0)
    with pytest.raises(ModelInputError, match="not fitted"):
        LandmarkSupermodel(["x1"]).predict_risk(stack.head(2), 100.0)


def test_breslow_ties_equal_scikit_survival_on_one_landmark(make_stack) -> None:
    """With one landmark, ties="breslow" and times rounded to whole weeks (many ties), the coefficients equal
    scikit-survival's CoxPHSurvivalAnalysis(ties="breslow") to 1e-5."""
    from sksurv.linear_model import CoxPHSurvivalAnalysis

    stack = make_stack(n_patients=300, landmarks=(0.0,), seed=8, competing_rate=0)
    stack = stack.assign(time=np.ceil(stack["time"] / 7) * 7)
    assert stack.loc[stack["status"] == 1, "time"].duplicated().sum() > 20
    ours = LandmarkSupermodel(["x1", "x2"], landmark_effects="none", ties="breslow").fit(stack)
    target = np.empty(len(stack), dtype=[("event", bool), ("time", float)])
    target["event"], target["time"] = stack["status"] == 1, stack["time"]
    reference = CoxPHSurvivalAnalysis(ties="breslow").fit(stack[["x1", "x2"]].to_numpy(), target)
    np.testing.assert_allclose(ours.coef_, reference.coef_, atol=1e-5)


def _stacked_design(stack: pd.DataFrame, effect_power: int, scale: float) -> pd.DataFrame:
    """The super-model's design built by hand (van Houwelingen 2007, Scand J Stat 34:70-85, section 4; van
    Houwelingen & Putter 2012, ch. 7): covariates, covariate × (s/S)^k for k up to the effect power, and the
    smooth baseline terms s/S and (s/S)² as covariates, with S (``scale``) the largest fitted landmark."""
    s = stack["landmark"].to_numpy() / scale
    out = stack[["patient_id", "time", "status", "x1", "x2"]].copy()
    for k in range(1, effect_power + 1):
        for c in ("x1", "x2"):
            out[f"{c}:s{'' if k == 1 else k}"] = stack[c].to_numpy() * s**k
    out["landmark_s"], out["landmark_s2"] = s, s**2
    return out


@pytest.mark.parametrize(("effects", "power"), [("linear", 1), ("quadratic", 2)])
def test_smooth_super_model_equals_lifelines_on_the_stacked_design(make_stack, effects, power) -> None:
    """The default super-model (linear landmark effects, smooth baseline) and the quadratic one are one Cox model
    on the stacked design: coefficients, model-based SEs and cluster-robust SEs (by patient, Lin & Wei 1989)
    equal lifelines' CoxPHFitter with ``cluster_col`` to 1e-6, and the risk by the horizon equals the
    product-limit form 1 − ∏(1 − e^{lp} dH₀) over lifelines' baseline increments (the module docstring: the
    product-limit form of 1 − exp(−H₀ e^{lp}), which it approaches as the increments shrink)."""
    stack = make_stack(n_patients=250, competing_rate=0, beta_slope=(0.3, 0.0), seed=7)
    model = LandmarkSupermodel(["x1", "x2"], landmark_effects=effects).fit(stack)
    if effects == "linear":
        assert LandmarkSupermodel(["x1", "x2"]).get_params()["landmark_effects"] == "linear"  # the default
    scale = float(stack["landmark"].max())
    design = _stacked_design(stack, power, scale)
    terms = [c for c in design.columns if c not in ("patient_id", "time", "status")]
    assert terms == model.design_columns_
    tight = {"precision": 1e-12, "r_precision": 1e-14}
    plain = CoxPHFitter().fit(design.drop(columns="patient_id"), "time", "status", fit_options=tight)
    robust = CoxPHFitter().fit(design, "time", "status", cluster_col="patient_id", fit_options=tight)
    np.testing.assert_allclose(model.coef_, plain.params_[terms], atol=1e-6)
    np.testing.assert_allclose(np.sqrt(np.diag(model.var_)), plain.standard_errors_[terms], atol=1e-6)
    np.testing.assert_allclose(np.sqrt(np.diag(model.robust_var_)), robust.standard_errors_[terms], atol=1e-6)

    horizon = 365.25
    new = stack.drop_duplicates("patient_id").head(40).assign(landmark=120.0)  # between fitted landmarks
    x = _stacked_design(new, power, scale)
    baseline = plain.baseline_cumulative_hazard_.iloc[:, 0]
    increments = np.diff(baseline[baseline.index <= horizon].to_numpy(), prepend=0.0)
    score = np.exp((x[terms].to_numpy() - plain._norm_mean[terms].to_numpy()) @ plain.params_[terms].to_numpy())
    expected = 1.0 - np.prod(1.0 - np.outer(score, increments[increments > 0]), axis=1)
    np.testing.assert_allclose(model.predict_risk(new, horizon), expected, atol=1e-6)
    exponential = 1.0 - np.exp(-score * baseline[baseline.index <= horizon].iloc[-1])
    # The exponential form differs by the second-order terms of the increments only (measured: at most 1.1e-3).
    np.testing.assert_allclose(model.predict_risk(new, horizon), exponential, atol=2e-3)
    assert np.abs(model.predict_risk(new, horizon) - exponential).max() > 1e-7  # ... and is not what is computed
