"""Updating a model on a new cohort (riskbench.validation.updating): the estimates against an outside fit, the
generator's known truth for a shifted population, and the closed test's choice."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st

from riskbench.cohort import build_cohort
from riskbench.demo import CohortShift, generate_cohort
from riskbench.demo.cohort_spec import demo_cohort_spec
from riskbench.metrics.calibration import cloglog, observed_expected
from riskbench.models.landmark import LandmarkSupermodel
from riskbench.models.risk_contract import ModelInputError
from riskbench.validation.errors import ValidationInputError
from riskbench.validation.updating import (
    METHODS,
    UpdatingRows,
    closed_test,
    fit_update,
    update_model,
    updating_rows,
)

HORIZON = 730.5  # days: two years
LANDMARKS = [0.0, 182.625, 365.25, 547.875, 730.5]
COVARIATES = ["log_nodule_volume", "suspicion_score", "serum_marker", "age_at_entry", "pack_years"]
SHIFT = CohortShift(outcome_hazard_multiplier=2.0, age_shift_years=4.0, pack_years_multiplier=1.3, log_volume_shift=0.3)


def _cohort(n: int, seed: int, shift: CohortShift | None = None, paths: int = 0):
    cohort = generate_cohort(n, seed, n_risk_paths=paths, shift=shift)
    built = build_cohort(cohort.patients, cohort.measurements, cohort.outcomes, demo_cohort_spec())
    stack = built.landmark_stack(LANDMARKS, HORIZON).dropna(subset=COVARIATES).reset_index(drop=True)
    return stack, cohort.truth


@pytest.fixture(scope="module")
def model():
    stack, _ = _cohort(1000, 1)
    return LandmarkSupermodel(COVARIATES).fit(stack)


@pytest.fixture(scope="module")
def same(model):
    stack, _ = _cohort(1000, 2)
    return stack, updating_rows(model, stack, HORIZON)


@pytest.fixture(scope="module")
def shifted(model):
    stack, truth = _cohort(1000, 3, SHIFT, paths=20)
    return stack, updating_rows(model, stack, HORIZON), truth


def _oe(stack: pd.DataFrame, rows: UpdatingRows, risk: np.ndarray) -> tuple[float, float, float]:
    return observed_expected(stack["time"].to_numpy(), stack["status"].to_numpy(), risk, HORIZON, cluster=rows.patient)


def test_original_oe_moves_with_the_shift_by_the_size_the_truth_gives(model, shifted, same):
    """The generator knows every row's true risk under the shifted process (its oracle, a Monte Carlo
    cumulative incidence with competing death), so the O/E the shift should produce is mean(true risk) /
    mean(predicted risk) on the same rows; the observed O/E must sit around it and clearly above 1, while on an
    unshifted cohort (another seed) the interval holds 1."""
    stack, rows, truth = shifted
    oe, low, high = _oe(stack, rows, rows.risk)
    true = stack[["patient_id", "landmark"]].merge(truth.true_risk, on=["patient_id", "landmark"], how="left")
    assert true["true_risk"].notna().mean() > 0.99
    expected_oe = np.nanmean(true["true_risk"]) / rows.risk[true["true_risk"].notna().to_numpy()].mean()
    assert expected_oe > 1.3  # the hazard doubled: the model under-predicts
    assert low > 1.0 and low < expected_oe < high
    assert oe == pytest.approx(expected_oe, rel=0.15)
    same_stack, same_rows = same
    _, low0, high0 = _oe(same_stack, same_rows, same_rows.risk)
    assert low0 < 1.0 < high0


def test_recalibration_in_the_large_brings_oe_back_to_one(shifted):
    stack, rows, _ = shifted
    fit = fit_update(rows, "in_the_large")
    assert fit.coef[0] > np.log(1.3)  # the log cumulative hazard rose
    oe, low, high = _oe(stack, rows, fit.risk(rows.risk, rows.landmark, rows.x))
    assert low < 1.0 < high and oe == pytest.approx(1.0, abs=0.03)


def test_closed_test_keeps_the_original_without_a_shift_and_updates_with_one(same, shifted):
    fits = {m: fit_update(same[1], m) for m in METHODS[1:]}
    kept = closed_test(fits)
    assert kept.chosen == "original"
    assert list(kept.tests["step"]) == ["overall"] and not kept.tests["significant"].any()
    shifted_fits = {m: fit_update(shifted[1], m) for m in METHODS[1:]}
    updated = closed_test(shifted_fits)
    assert updated.chosen != "original"
    first = updated.tests.iloc[1]
    assert (first["candidate"], first["against"], bool(first["significant"])) == ("in_the_large", "original", True)


def test_recalibration_estimates_equal_an_outside_glm_with_the_same_pseudo_observations(shifted):
    """The pseudo-observation regressions are quasi-likelihood GLMs with the cloglog link and binomial variance
    (McCullagh & Nelder 1989, ch. 9); statsmodels' GLM with the same responses, design and offset solves the
    same estimating equations, so the estimates agree to 1e-6."""
    sm = pytest.importorskip("statsmodels.api")
    _, rows, _ = shifted
    z = cloglog(rows.risk)
    family = sm.families.Binomial(link=sm.families.links.CLogLog())
    ones = np.ones((z.size, 1))
    large = sm.GLM(rows.pseudo, ones, family=family, offset=z).fit(tol=1e-12)
    slope = sm.GLM(rows.pseudo, np.column_stack([ones, z]), family=family).fit(tol=1e-12)
    assert fit_update(rows, "in_the_large").coef == pytest.approx(large.params, abs=1e-6)
    assert fit_update(rows, "slope").coef == pytest.approx(slope.params, abs=1e-6)
    dummies = (rows.landmark[:, None] == rows.landmarks[None, :]).astype(float)
    per_landmark = sm.GLM(rows.pseudo, np.column_stack([dummies, z]), family=family).fit(tol=1e-12)
    assert fit_update(rows, "landmark_baseline").coef == pytest.approx(per_landmark.params, abs=1e-6)


def test_pseudo_observations_of_complete_follow_up_are_the_outcomes():
    """Without censoring before the horizon the jackknife pseudo-observation of the cumulative incidence is
    the indicator of an outcome by the horizon (Andersen, Klein & Rosthøj 2003, Biometrika), so recalibration
    in the large is an ordinary cloglog GLM of the 0/1 outcomes with offset cloglog(p)."""
    sm = pytest.importorskip("statsmodels.api")
    rng = np.random.default_rng(5)
    n = 400
    risk = rng.uniform(0.02, 0.5, n)
    outcome = rng.uniform(size=n) < np.minimum(1.0, 1.5 * risk)
    competing = ~outcome & (rng.uniform(size=n) < 0.1)
    time = np.where(outcome | competing, rng.uniform(1, 700, n), 800.0)
    status = np.where(outcome, 1, np.where(competing, 2, 0))

    class Fixed:
        competing_ = True

        def predict_risk(self, table, horizon):
            return risk

    stack = pd.DataFrame({"patient_id": np.arange(n), "landmark": 0.0, "time": time, "status": status})
    rows = updating_rows(Fixed(), stack, 730.5, covariates=[])
    assert rows.pseudo == pytest.approx(outcome.astype(float), abs=1e-12)
    glm = sm.GLM(
        outcome.astype(float),
        np.ones((n, 1)),
        offset=cloglog(risk),
        family=sm.families.Binomial(link=sm.families.links.CLogLog()),
    ).fit(tol=1e-12)
    assert fit_update(rows, "in_the_large").coef == pytest.approx(glm.params, abs=1e-6)


def test_shrunk_revision_lies_between_the_original_and_the_full_revision(shifted):
    _, rows, _ = shifted
    full = fit_update(rows, "revision")
    shrunk = fit_update(rows, "revision", shrink=True)
    assert 0.0 < shrunk.shrinkage < 1.0
    k = full.landmarks.size
    original = np.r_[1.0, np.zeros(len(full.covariates))]
    expected = original + shrunk.shrinkage * (full.coef[k:] - original)
    assert shrunk.coef[k:] == pytest.approx(expected, abs=1e-12)
    _, low, high = _oe(shifted[0], rows, shrunk.risk(rows.risk, rows.landmark, rows.x))
    assert low < 1.0 < high  # intercepts re-estimated after shrinking: still calibrated in the large


def test_updated_model_answers_predict_risk_at_its_horizon_only(model, shifted):
    stack, rows, _ = shifted
    updated = update_model(model, stack, [HORIZON], "slope")
    direct = fit_update(rows, "slope").risk(rows.risk, rows.landmark, rows.x)
    assert updated.predict_risk(stack, HORIZON) == pytest.approx(direct, abs=1e-12)
    with pytest.raises(ModelInputError, match="horizon"):
        updated.predict_risk(stack, 365.25)
    per_landmark = update_model(model, stack[stack["landmark"] <= 365.25], [HORIZON], "landmark_baseline")
    with pytest.raises(ModelInputError, match="landmark"):
        per_landmark.predict_risk(stack[stack["landmark"] > 365.25], HORIZON)


def test_unusable_inputs_are_refused_with_the_fix(model, shifted):
    stack, rows, _ = shifted
    with pytest.raises(ValidationInputError, match="method"):
        fit_update(rows, "everything")
    quiet = stack.assign(status=0)
    with pytest.raises(ValidationInputError, match="no outcome"):
        updating_rows(model, quiet, HORIZON)
    holes = stack.copy()
    holes.loc[:3, "pack_years"] = np.nan
    with pytest.raises(ValidationInputError, match="pack_years"):
        fit_update(UpdatingRows(**{**rows.__dict__, "x": holes[COVARIATES].to_numpy(float)}), "revision")


@settings(max_examples=30, deadline=None)
@given(seed=st.integers(0, 10_000), factor=st.floats(0.3, 3.0))
def test_recalibration_keeps_the_order_of_the_risks(seed, factor):
    """Invariant: an update in the large, or with a positive slope, is a monotone map of the original risk,
    so it never changes who is ranked above whom (the concordance of the original is kept)."""
    rng = np.random.default_rng(seed)
    n = 300
    risk = rng.uniform(0.01, 0.4, n)
    outcome = rng.uniform(size=n) < np.minimum(1.0, factor * risk)
    assume(3 <= outcome.sum() <= n - 3)
    time = np.where(outcome, rng.uniform(1, 700, n), rng.uniform(100, 900, n))
    rows = UpdatingRows(
        730.5, "cumulative_incidence", risk, np.zeros(n), np.zeros(n), np.arange(n), (), np.empty((n, 0))
    )
    from riskbench.metrics.pseudo_observations import pseudo_observations

    rows = UpdatingRows(**{**rows.__dict__, "pseudo": pseudo_observations(time, outcome.astype(int), 730.5)})
    order = np.argsort(risk)
    for method in ("in_the_large", "slope"):
        fit = fit_update(rows, method)
        assume(method == "in_the_large" or fit.coef[1] > 0)
        updated = fit.risk(rows.risk, rows.landmark, rows.x)
        assert np.all(np.diff(updated[order]) >= -1e-15)
