"""A run's joint model leaves the run: saved with its bundle, loaded, applied to raw tables and scored.

The models stage runs in-process on a small demo-generator cohort (tests/workflow/analysis_builder.py; a tenth
of the patients without any nodule measurement) with one joint model (family shared_trajectory_joint) beside a
landmark model. The reference for "same predictions" is the run itself (``data/apparent_predictions``): the
joint model's prediction reads each patient's marker measurements up to the landmark, which a saved model does
not hold, so these tests check that the history rebuilt from the raw tables with the model's own cohort rules
is the one the run used.
"""

from __future__ import annotations

import importlib.util
import json
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from riskbench.models.forest_io import ModelIntegrityError
from riskbench.models.joint_family import SharedTrajectoryModel
from riskbench.workflow.cli import main
from riskbench.workflow.manifest import output_digests
from riskbench.workflow.model_bundle import load_model

_SPEC = importlib.util.spec_from_file_location("analysis_builder", Path(__file__).with_name("analysis_builder.py"))
B = importlib.util.module_from_spec(_SPEC)
_SPEC.loader.exec_module(B)

JOINT = "nodule_joint"
MODELS = (
    {
        "name": JOINT,
        "family": "shared_trajectory_joint",
        "covariates": ["log_nodule_volume", "age_at_entry", "sex_male", "pack_years"],
        "params": {"prediction_draws": 20, "baseline_pieces": 3, "hermite_points": 3},
    },
    {"name": "clinical", "covariates": B.CLINICAL},
)


@pytest.fixture(scope="module")
def run(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("joint_bundle")
    data = B.write_data(folder, 250, seed=3)
    # a tenth of the patients never had their nodule measured: their rows have no marker value
    measurements = pd.read_csv(data / "measurements.csv")
    ids = measurements["patient_id"].unique()
    never = set(ids[np.random.default_rng(2).uniform(size=len(ids)) < 0.1])
    gone = measurements["patient_id"].isin(never) & (measurements["variable"] == "nodule_volume")
    measurements[~gone].to_csv(data / "measurements.csv", index=False)
    config = B.write_config(folder, models=MODELS, validation={"candidate": JOINT, "reference": "clinical"})
    B.run_stages(config, folder / "run", ("cohort", "models"))
    return folder


def _bundle(run: Path) -> Path:
    return run / "run" / "models" / f"{JOINT}.bundle.json"


def _run_risks(run: Path, horizon: float) -> np.ndarray:
    predictions = pd.read_parquet(run / "run" / "data" / "apparent_predictions.parquet")
    ours = predictions[(predictions["model"] == JOINT) & np.isclose(predictions["horizon"], horizon)]
    return ours.sort_values("row")["risk"].to_numpy()


def test_the_joint_model_is_saved_with_its_bundle_sheet_and_digests(run: Path) -> None:
    doc = json.loads(_bundle(run).read_text())
    assert doc["family"] == "shared_trajectory_joint" and [p["kind"] for p in doc["parts"]] == ["joint"]
    digests = output_digests(run / "run")
    assert digests[f"models/{doc['parts'][0]['file']}"] == doc["parts"][0]["sha256"]
    assert f"models/{JOINT}.bundle.json" in digests and (run / "run" / "models" / f"{JOINT}.md").is_file()
    notes = B.notes_of(run / "run")
    assert not notes["text"].str.contains("not saved").any()
    # the model file holds no patient (run pseudonyms included) and no measurement
    text = (run / "run" / "models" / doc["parts"][0]["file"]).read_text()
    cp = pd.read_parquet(run / "run" / "data" / "counting_process.parquet")
    assert not any(str(p) in text for p in cp["patient_id"].unique())


def test_the_loaded_model_with_the_runs_history_reproduces_the_run(run: Path) -> None:
    saved = load_model(_bundle(run))
    assert isinstance(saved.model, SharedTrajectoryModel) and saved.marker_history is not None
    stack = pd.read_parquet(run / "run" / "data" / "landmark_stack.parquet")
    cp = pd.read_parquet(run / "run" / "data" / "counting_process.parquet")
    model = saved.model_with_history(saved.model.history_from(cp))
    # a row's risk depends on the row and the model only, so the reload repeats the run exactly
    curve = model.predict_curve(stack, [365.25, 730.5])
    for j, horizon in enumerate((365.25, 730.5)):
        np.testing.assert_array_equal(curve[:, j], _run_risks(run, horizon))


def test_the_saved_model_applied_to_its_own_raw_tables_reproduces_the_run(run: Path) -> None:
    """Rows and marker histories rebuilt from the development cohort's raw CSV files with the model's saved
    cohort rules give the run's apparent predictions exactly (same rows in the same order, same risks)."""
    saved = load_model(_bundle(run))
    data = run / "data"
    result = saved.predict(
        sources=(data / "patients.csv", data / "measurements.csv", data / "outcomes.csv"), horizons_days=[365.25, 730.5]
    )
    stack = pd.read_parquet(run / "run" / "data" / "landmark_stack.parquet")
    for horizon in (365.25, 730.5):
        ours = result[result["horizon_days"] == horizon]
        np.testing.assert_array_equal(ours["landmark"].to_numpy(), stack["landmark"].to_numpy())
        np.testing.assert_array_equal(ours["risk"].to_numpy(), _run_risks(run, horizon))
    # without the history each row's is rebuilt from the row alone: other (cautious) risks
    rows = saved.build_tables(data / "patients.csv", data / "measurements.csv", data / "outcomes.csv")
    alone = saved.predict(rows, horizons_days=[730.5])["risk"].to_numpy()
    assert not np.allclose(alone, _run_risks(run, 730.5))


def test_score_patients_with_the_joint_model_reproduces_the_run(run: Path, tmp_path: Path) -> None:
    out = tmp_path / "scored"
    args = ["score-patients", str(_bundle(run)), "--out", str(out), "--config", str(run / "analysis.toml")]
    assert main([*args, "--horizons", "1 year", "2 years"]) == 0
    risks = pd.read_csv(
        out / "risks.csv", float_precision="round_trip", keep_default_na=False, na_values={"risk": [""]}
    )
    stack = pd.read_parquet(run / "run" / "data" / "landmark_stack.parquet").reset_index(drop=True)
    assert stack["log_nodule_volume"].isna().any()  # rows without a marker value are scored all the same
    for horizon in (365.25, 730.5):
        expected = stack[["patient_id", "landmark"]].assign(risk=_run_risks(run, horizon))
        ours = risks[risks["horizon_days"] == horizon].rename(
            columns={"patient": "patient_id", "landmark_days": "landmark"}
        )
        merged = expected.merge(ours, on=["patient_id", "landmark"], how="outer", suffixes=("_run", "_scored"))
        assert len(merged) == len(stack) and merged["not_predicted"].eq("").all()
        np.testing.assert_array_equal(merged["risk_scored"].to_numpy(), merged["risk_run"].to_numpy())


def test_a_changed_joint_model_file_is_refused(run: Path, tmp_path: Path) -> None:
    folder = tmp_path / "models"
    shutil.copytree(run / "run" / "models", folder)
    path = folder / f"{JOINT}.json"
    doc = json.loads(path.read_text())
    doc["joint"]["parameters"][0]["estimate"] += 0.1
    path.write_text(json.dumps(doc, indent=1))
    with pytest.raises(ModelIntegrityError, match="SHA-256"):
        load_model(folder / f"{JOINT}.bundle.json")


def test_validate_model_scores_the_joint_model_with_the_new_patients_histories(run: Path, tmp_path: Path) -> None:
    """``riskbench validate-model`` on the development cohort itself: the original model's risks (one horizon per
    call) are those of the loaded model reading the run's own measurement histories."""
    from riskbench.workflow.external_command import validate_saved_model

    _, ev = validate_saved_model(
        _bundle(run),
        tmp_path / "external",
        config_path=run / "analysis.toml",
        resamples=0,
        horizons_days=[365.25, 730.5],
    )
    saved = load_model(_bundle(run))
    stack = pd.read_parquet(run / "run" / "data" / "landmark_stack.parquet")
    cp = pd.read_parquet(run / "run" / "data" / "counting_process.parquet")
    model = saved.model_with_history(saved.model.history_from(cp))
    assert ev.horizons == (365.25, 730.5)
    for j, horizon in enumerate(ev.horizons):
        np.testing.assert_array_equal(ev.risks["original"][:, j], model.predict_risk(stack, horizon))
