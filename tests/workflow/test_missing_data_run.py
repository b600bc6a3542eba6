"""A cohort with missing covariate values runs through every stage with each missing-data choice.

The suspicion score of 30% of the demo patients is never measured, so it is missing at every landmark for
them. Stage functions are run in-process on a small demo-generator cohort (tests/workflow/analysis_builder.py).
"""

from __future__ import annotations

import importlib.util
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from riskbench.models.missing_data import MissingDataModel
from riskbench.workflow.config import load_config
from riskbench.workflow.model_factory import fit_model, missing_data_plan
from riskbench.workflow.run_results import FinishedRun

_SPEC = importlib.util.spec_from_file_location("analysis_builder", Path(__file__).with_name("analysis_builder.py"))
B = importlib.util.module_from_spec(_SPEC)
_SPEC.loader.exec_module(B)

CONSTANT = {"landmark_effects": "none"}
LATER = ("models", "validation", "comparison")


def _config(folder: Path, name: str, imaging_method: str | None, method: str = "multiple_imputation") -> Path:
    imaging = {**B.DEFAULT_MODELS[1], "params": CONSTANT}
    if imaging_method is not None:
        imaging["missing_data"] = imaging_method
    path = B.write_config(folder, models=[{**B.DEFAULT_MODELS[0], "params": CONSTANT}, imaging], name=name)
    path.write_text(path.read_text() + f'\n[missing_data]\nmethod = "{method}"\nimputations = 3\nmax_iterations = 3\n')
    return path


@pytest.fixture(scope="module")
def cohort(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("missing")
    data = B.write_data(folder, 400)
    measurements = pd.read_csv(data / "measurements.csv")
    ids = measurements["patient_id"].unique()
    never = set(ids[np.random.default_rng(0).uniform(size=len(ids)) < 0.3])
    gone = measurements["patient_id"].isin(never) & (measurements["variable"] == "suspicion_score")
    measurements[~gone].to_csv(data / "measurements.csv", index=False)
    B.run_stages(_config(folder, "cohort", None), folder / "cohort_run", ("cohort",))
    return folder


def test_cohort_stage_writes_the_missing_data_table(cohort: Path) -> None:
    table = pd.read_csv(cohort / "cohort_run" / "tables" / "missing_data.csv")
    score = table[table["covariate"] == "suspicion_score"]
    assert len(score) == 5 and score["share_missing"].between(0.2, 0.4).all()
    assert (table.loc[table["covariate"] == "age_at_entry", "share_missing"] == 0).all()
    assert not (cohort / "cohort_run" / "tables" / "complete_cases.csv").exists()  # nobody uses complete cases


def test_the_configured_plan_and_the_per_model_override_reach_the_fits(cohort: Path) -> None:
    config = load_config(_config(cohort, "plans", "complete_cases"))
    plans = {m.name: missing_data_plan(m, config.missing_data) for m in config.models}
    assert (plans["clinical"].method, plans["clinical"].imputations) == ("multiple_imputation", 3)
    assert plans["imaging_clinical"].method == "complete_cases"
    stack = pd.read_parquet(cohort / "cohort_run" / "data" / "landmark_stack.parquet")
    model = fit_model(config.model("imaging_clinical"), stack, None, seed=1, missing_data=config.missing_data)
    assert isinstance(model, MissingDataModel) and model.method == "complete_cases"
    everyone = load_config(_config(cohort, "all_mi", None))
    imputed = fit_model(everyone.model("imaging_clinical"), stack, None, seed=1, missing_data=everyone.missing_data)
    assert len(imputed.models_) == 3 and not imputed.fitted_once_


@pytest.mark.parametrize("imaging_method", ["multiple_imputation", "complete_cases"])
def test_every_stage_runs_and_reports(cohort: Path, imaging_method: str) -> None:
    path = _config(cohort, imaging_method, imaging_method)
    run_dir = B.copy_run(cohort / "cohort_run", cohort / f"run_{imaging_method}")
    results = B.run_stages(path, run_dir, LATER)
    tables = run_dir / "tables"
    coefficients = pd.read_csv(tables / "coefficients_imaging_clinical.csv").set_index("term")
    # the run read back calibrates on the same rows as the report (every model's predicted rows)
    back = FinishedRun(run_dir, manifest={}, config=load_config(path)).calibration("clinical", "2 years")
    stage = results["comparison"].calibration("clinical", "2 years")
    assert back.calibration.oe_ratio == pytest.approx(stage.calibration.oe_ratio, rel=1e-12)
    assert back.risk.size == stage.risk.size
    comparison = pd.read_csv(tables / "model_comparison.csv")
    assert len(comparison) > 0 and (tables / "discrimination.csv").exists()
    if imaging_method == "multiple_imputation":
        assert coefficients.loc["suspicion_score", "fraction_missing_info"] > 0.05
    else:
        assert (coefficients["fraction_missing_info"] == 0).all()
        cv = pd.read_parquet(run_dir / "data" / "cv_predictions.parquet")
        unpredicted = cv[cv["model"] == "imaging_clinical"]["risk"].isna().groupby(cv["row"]).all()
        assert 0.2 < unpredicted.mean() < 0.4  # the rows without a suspicion score
        notes = B.notes_of(run_dir)
        left_out = notes[notes["text"].str.contains("without a prediction from a complete-case model")]
        assert len(left_out) == 1 and "complete_cases" in left_out["text"].iloc[0]
