"""Resampling with missing covariates: every missing-data method through bootstrap optimism, cross-validation
folds and the paired comparison (each fit -- per replicate and per fold -- fits its own imputation models on
its own training patients)."""

import numpy as np
import pytest

from riskbench.models.missing_data import MissingDataModel, MissingDataPlan
from riskbench.validation import (
    ModelSpec,
    PrecomputedTables,
    ValidationInputError,
    bootstrap_optimism,
    compare_specs,
    evaluate_splits,
    fit_spec,
    patient_folds,
)

from .conftest import simulate_stack

NO_EFFECTS = {"landmark_effects": "none"}
METHODS = ("multiple_imputation", "complete_cases", "missing_indicator")


@pytest.fixture(scope="module")
def source():
    """300 patients; the imaging value of 30% of them is missing at every landmark and in the counting rows."""
    stack, cp = simulate_stack(300, seed=3)
    ids = cp["patient_id"].to_numpy()
    gone = set(ids[np.random.default_rng(0).uniform(size=len(ids)) < 0.3])
    for table in (stack, cp):
        table.loc[table["patient_id"].isin(gone), "imaging"] = np.nan
    return PrecomputedTables(stack, cp)


def _specs(method: str) -> list[ModelSpec]:
    plan = MissingDataPlan(method, imputations=2, max_iterations=2)
    return [
        ModelSpec("clinical", ["clinical"], params=NO_EFFECTS, missing=plan),
        ModelSpec("imaging + clinical", ["clinical", "imaging"], params=NO_EFFECTS, missing=plan),
    ]


@pytest.mark.parametrize("method", METHODS)
def test_bootstrap_optimism_and_comparison_run_with_every_method(source, method: str) -> None:
    specs = _specs(method)
    optimism = bootstrap_optimism(specs, source, [365.0], n_boot=3, seed=1)
    c = optimism[optimism["metric"] == "harrell_c"].set_index("spec")
    assert np.isfinite(c[["apparent", "optimism", "corrected"]].to_numpy(float)).all()
    assert (c["n_boot"] == 3).all()
    assert c.loc["imaging + clinical", "apparent"] > c.loc["clinical", "apparent"]

    comparison = compare_specs(specs, source, [365.0], n_boot=3, seed=2, pairs=[(0, 1)])
    assert comparison.n_failed == 0
    diff = comparison.differences.set_index("metric")
    assert np.isfinite(diff.loc["harrell_c", ["estimate", "ci_low", "ci_high"]].to_numpy(float)).all()


@pytest.mark.parametrize("method", METHODS)
def test_cross_validation_folds_and_the_counting_process_cox_run_with_every_method(source, method: str) -> None:
    plan = MissingDataPlan(method, imputations=2, max_iterations=2)
    stack = source.full_tables().landmark_stack
    splits = patient_folds(stack["patient_id"].to_numpy(), stack["status"].to_numpy(), 3, seed=4)
    specs = [*_specs(method), ModelSpec("cox", ["clinical", "imaging"], family="cox", missing=plan)]
    per_spec, per_pair = evaluate_splits(specs, source, splits, [365.0], pairs="vs_first")
    assert np.isfinite(per_spec["value"].to_numpy(float)[per_spec["metric"] != "net_benefit"]).all()
    assert len(per_spec[per_spec["metric"] == "harrell_c"]) == 3 * len(specs)
    assert set(per_pair["metric"]) >= {"nri", "harrell_c"}


def test_complete_case_evaluation_uses_the_rows_every_model_predicts(source) -> None:
    """A complete-case model gives no risk for an incomplete row; the paired evaluation then scores every
    model on the rows all of them predict (so a comparison stays paired)."""
    from riskbench.validation.paired import evaluate_fitted

    full = source.full_tables()
    specs = [
        ModelSpec(
            "mi", ["clinical", "imaging"], params=NO_EFFECTS, missing=MissingDataPlan(imputations=2, max_iterations=2)
        ),
        ModelSpec("cc", ["clinical", "imaging"], params=NO_EFFECTS, missing="complete_cases"),
    ]
    models = [fit_spec(s, full) for s in specs]
    assert isinstance(models[0], MissingDataModel)
    per_spec, _ = evaluate_fitted(specs, models, full.landmark_stack, [365.0], pairs=[(0, 1)])
    complete = full.landmark_stack.dropna(subset=["imaging"])
    alone, _ = evaluate_fitted(specs[:1], models[:1], complete, [365.0])
    got = per_spec[(per_spec["spec"] == "mi") & (per_spec["metric"] == "harrell_c")]["value"].iloc[0]
    want = alone[alone["metric"] == "harrell_c"]["value"].iloc[0]
    assert got == pytest.approx(want, abs=1e-12)
    with pytest.raises(ValidationInputError, match=r"\[\[models\]\] missing_data = 'drop'"):
        ModelSpec("x", ["clinical"], missing="drop")
    assert (
        ModelSpec("x", ["clinical", "imaging"], missing="complete_cases").without(["imaging"]).missing.method
        == "complete_cases"
    )


def test_importance_runs_with_a_complete_case_model(source) -> None:
    """Permutation importance evaluates one model at a time (``evaluate_model``): a complete-case model is
    scored on the rows it predicts."""
    from riskbench.validation import permutation_importance

    spec = ModelSpec("cc", ["clinical", "imaging"], params=NO_EFFECTS, missing="complete_cases")
    table = permutation_importance(spec, {"imaging": ["imaging"]}, source, [365.0], n_boot=2, seed=1)
    drop = table[table["metric"] == "harrell_c"]["drop"]
    assert np.isfinite(drop.to_numpy(float)).all() and (drop > 0).all()
