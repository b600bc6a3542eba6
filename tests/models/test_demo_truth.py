"""Models recover the known truth of the committed synthetic demo cohort (``demo_data/clean``).

The outside reference is the generator's own hazard (``truth.json``: coefficients of the six covariates of a
correctly specified Cox model) and its Monte Carlo true risks (``true_risk.parquet``), not anything fitted
here. Tables come from the cohort stage (``build_cohort`` with ``demo_cohort_spec()``).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy.stats import norm

from riskbench.cohort import build_cohort
from riskbench.demo.cohort_spec import demo_cohort_spec
from riskbench.metrics import concordance_harrell
from riskbench.models import LandmarkSupermodel, SurvivalForest
from riskbench.models.cox_engine import fit_cox

DEMO = Path(__file__).resolve().parents[2] / "demo_data" / "clean"
LANDMARKS = [0.0, 182.625, 365.25, 547.875, 730.5, 1095.75]  # days: the landmarks of true_risk.parquet
HORIZON = 730.5  # days (2 years)
CLINICAL = ["age_at_entry", "sex_male", "pack_years", "serum_marker"]
IMAGING = ["log_nodule_volume", "log_nodule_volume_change", "suspicion_score"]


@pytest.fixture(scope="module")
def demo():
    truth = json.loads((DEMO / "truth.json").read_text())
    cohort = build_cohort(
        DEMO / "patients.parquet", DEMO / "measurements.parquet", DEMO / "outcomes.parquet", demo_cohort_spec()
    )
    stack = cohort.landmark_stack(LANDMARKS, HORIZON)
    ids = np.sort(stack["patient_id"].unique())
    held_out = set(np.random.default_rng(0).choice(ids, len(ids) // 3, replace=False))
    test_rows = stack["patient_id"].isin(held_out)
    return truth, cohort.counting_process, stack[~test_rows], stack[test_rows]


def test_true_coefficients_inside_99_percent_intervals(demo) -> None:
    """The correctly specified Cox model (the generator's six covariates on the counting-process rows)
    covers each true β with its 99% Wald interval, model-based and cluster-robust (fixed seed 2026)."""
    truth, counting, _, _ = demo
    names = truth["covariates"]
    assert len(names) == 6
    rows = counting.dropna(subset=names)
    fit = fit_cox(
        rows[names].to_numpy(),
        rows["stop"].to_numpy(),
        (rows["status"] == 1).to_numpy(dtype=float),
        rows["start"].to_numpy(),
        cluster=rows["patient_id"].to_numpy(),
        names=names,
    )
    true_beta = np.array([truth["coefficients"][n] for n in names])
    z99 = norm.ppf(0.995)
    for se in (fit.se, fit.robust_se):
        outside = np.abs(fit.coef - true_beta) > z99 * se
        assert not outside.any(), dict(zip(np.array(names)[outside], fit.coef[outside]))


def _model(family: str, covariates: list[str]):
    if family == "landmark":
        return LandmarkSupermodel(covariates)
    return SurvivalForest(covariates + ["landmark"], n_estimators=50, max_samples=2000, random_state=0)


@pytest.mark.parametrize("family", ["landmark", "forest"])
def test_imaging_adds_discrimination_on_held_out_patients(demo, family: str) -> None:
    """The imaging-plus-clinical model (landmark super-model, or survival forest) ranks held-out patients'
    outcomes within 2 years better than the clinical-only one (the generator's hazard depends on the imaging
    covariates), by more than twice the larger jackknife standard error."""
    _, _, train, test = demo
    event = (test["status"] == 1).to_numpy(dtype=int)
    result = {}
    for label, covariates in (("clinical", CLINICAL), ("imaging+clinical", CLINICAL + IMAGING)):
        risk = _model(family, covariates).fit(train).predict_risk(test, HORIZON)
        result[label] = concordance_harrell(test["time"].to_numpy(), event, risk)
    gain = result["imaging+clinical"].estimate - result["clinical"].estimate
    assert gain > 2 * max(result["imaging+clinical"].se, result["clinical"].se), result


def test_super_model_risk_agrees_with_the_generator_true_risk(demo) -> None:
    """Held-out predicted cumulative incidence (outcome with competing death) against the generator's Monte
    Carlo true risk at the same landmarks and horizon: correlation > 0.85, mean absolute error < 0.02 and
    mean risk within 0.005 (tolerances from the held-out sample size, ~5 400 rows)."""
    _, _, train, test = demo
    true_risk = pd.read_parquet(DEMO / "true_risk.parquet")
    true_risk = true_risk[np.isclose(true_risk["horizon"], HORIZON)]
    rows = test.merge(true_risk[["patient_id", "landmark", "true_risk"]], on=["patient_id", "landmark"])
    assert len(rows) > 0.9 * len(test)
    model = LandmarkSupermodel(CLINICAL + IMAGING).fit(train)
    risk = model.predict_risk(rows, HORIZON)
    assert model.competing_ is not None
    assert np.corrcoef(risk, rows["true_risk"])[0, 1] > 0.85
    assert np.mean(np.abs(risk - rows["true_risk"])) < 0.02
    assert abs(risk.mean() - rows["true_risk"].mean()) < 0.005
