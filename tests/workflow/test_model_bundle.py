"""Saved models of a run: files, bundle, integrity, and the same predictions from the run's own raw tables.

The models stage is run in-process on a small demo-generator cohort (tests/workflow/analysis_builder.py) in which
30% of the patients never had a suspicion score, so multiple imputation really imputes; one model of each
family is saved. The reference for "same predictions" is the run itself (``data/apparent_predictions``).
"""

from __future__ import annotations

import importlib.util
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from riskbench.models.forest_io import ModelIntegrityError
from riskbench.models.missing_data import MissingDataModel
from riskbench.models.risk_contract import ModelInputError
from riskbench.workflow.manifest import output_digests
from riskbench.workflow.model_bundle import load_model

_SPEC = importlib.util.spec_from_file_location("analysis_builder", Path(__file__).with_name("analysis_builder.py"))
B = importlib.util.module_from_spec(_SPEC)
_SPEC.loader.exec_module(B)

MODELS = (
    {"name": "imaging_clinical", "covariates": B.IMAGING, "params": {"baseline": "stratified"}},
    {"name": "clinical_indicator", "covariates": B.CLINICAL + ["suspicion_score"], "missing_data": "missing_indicator"},
    {"name": "clinical_cox", "family": "time_varying_cox", "covariates": B.CLINICAL},
    {
        "name": "forest",
        "family": "forest",
        "covariates": B.IMAGING,
        "params": {"n_estimators": 10, "min_samples_leaf": 20},
    },
)


@pytest.fixture(scope="module")
def run(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("bundle")
    data = B.write_data(folder, 300)
    measurements = pd.read_csv(data / "measurements.csv")
    ids = measurements["patient_id"].unique()
    never = set(ids[np.random.default_rng(1).uniform(size=len(ids)) < 0.3])
    gone = measurements["patient_id"].isin(never) & (measurements["variable"] == "suspicion_score")
    measurements[~gone].to_csv(data / "measurements.csv", index=False)
    config = B.write_config(
        folder, models=MODELS, validation={"candidate": "imaging_clinical", "reference": "clinical_cox"}
    )
    config.write_text(
        config.read_text() + '\n[missing_data]\nmethod = "multiple_imputation"\nimputations = 3\nmax_iterations = 3\n'
    )
    B.run_stages(config, folder / "run", ("cohort", "models"))
    return folder


def _bundle(run: Path, stem: str) -> Path:
    return run / "run" / "models" / f"{stem}.bundle.json"


def test_every_model_is_saved_with_bundle_sheet_and_manifest_digest(run: Path) -> None:
    folder = run / "run" / "models"
    stems = [p.name.removesuffix(".bundle.json") for p in sorted(folder.glob("*.bundle.json"))]
    assert len(stems) == len(MODELS)
    assert "clinical_cox" in stems and "forest" in stems and "imaging_clinical" in stems
    digests = output_digests(run / "run")
    for stem in stems:
        assert (folder / f"{stem}.md").is_file()
        doc = json.loads((folder / f"{stem}.bundle.json").read_text())
        for part in doc["parts"]:
            assert f"models/{part['file']}" in digests and digests[f"models/{part['file']}"] == part["sha256"]
        assert f"models/{stem}.bundle.json" in digests
    imaging = json.loads(_bundle(run, "imaging_clinical").read_text())
    assert len(imaging["parts"]) == 3 and imaging["missing_data"]["fitted_once"] is False  # 3 imputations
    assert imaging["cohort_rules"]["max_carry_days"] == pytest.approx(3 * 365.25)
    assert imaging["development_ranges"]["sex_male"]["values"] == [0.0, 1.0]


def test_loaded_models_reproduce_the_runs_apparent_predictions_exactly(run: Path) -> None:
    predictions = pd.read_parquet(run / "run" / "data" / "apparent_predictions.parquet")
    stack = pd.read_parquet(run / "run" / "data" / "landmark_stack.parquet")
    assert stack["suspicion_score"].isna().any()  # the imputer of the saved model is used
    for bundle in sorted((run / "run" / "models").glob("*.bundle.json")):
        saved = load_model(bundle)
        ours = predictions[predictions["model"] == saved.name]
        assert len(ours)
        for horizon, rows in ours.groupby("horizon"):
            risk = saved.model.predict_risk(stack, float(horizon))
            np.testing.assert_array_equal(risk, rows.sort_values("row")["risk"].to_numpy(), err_msg=saved.name)


def test_the_model_applied_to_its_own_raw_tables_reproduces_the_run(run: Path) -> None:
    """Rows rebuilt from the development cohort's raw CSV files with the model's saved cohort rules give the
    run's own apparent predictions exactly (same rows in the same order, same risks)."""
    saved = load_model(_bundle(run, "imaging_clinical"))
    data = run / "data"
    result = saved.predict(
        sources=(data / "patients.csv", data / "measurements.csv", data / "outcomes.csv"), horizons_days=[365.25, 730.5]
    )
    predictions = pd.read_parquet(run / "run" / "data" / "apparent_predictions.parquet")
    for horizon in (365.25, 730.5):
        ours = result[result["horizon_days"] == horizon]
        theirs = predictions[(predictions["model"] == saved.name) & np.isclose(predictions["horizon"], horizon)]
        np.testing.assert_array_equal(ours["risk"].to_numpy(), theirs.sort_values("row")["risk"].to_numpy())
    stack = pd.read_parquet(run / "run" / "data" / "landmark_stack.parquet")
    first = result[result["horizon_days"] == 730.5]
    np.testing.assert_array_equal(first["landmark"].to_numpy(), stack["landmark"].to_numpy())
    missing = first["missing_covariates"].str.contains("suspicion_score").to_numpy()
    np.testing.assert_array_equal(missing, stack["suspicion_score"].isna().to_numpy())


def test_a_model_file_named_instead_of_the_bundle_loads_the_same_model(run: Path) -> None:
    a = load_model(run / "run" / "models" / "clinical_cox.json")
    b = load_model(_bundle(run, "clinical_cox"))
    assert a.name == b.name == "clinical_cox" and a.family == "time_varying_cox"
    assert isinstance(a.model, MissingDataModel)
    assert a.covariates == tuple(B.CLINICAL) and a.landmarks_days == b.landmarks_days
    spec = a.cohort_spec()
    assert [v.name for v in spec.variables] == ["nodule_volume", "suspicion_score", "serum_marker"]


def test_the_missing_indicator_model_keeps_its_medians(run: Path) -> None:
    saved = load_model(_bundle(run, "clinical_indicator"))
    assert saved.missing_data["method"] == "missing_indicator"
    assert saved.missing_data["indicator_columns"] == ["suspicion_score_missing"]
    assert 0 <= saved.missing_data["medians"]["suspicion_score"] <= 1


def _copy_models(run: Path, tmp_path: Path) -> Path:
    import shutil

    target = tmp_path / "models"
    shutil.copytree(run / "run" / "models", target)
    return target


def test_a_changed_model_file_is_refused(run: Path, tmp_path: Path) -> None:
    folder = _copy_models(run, tmp_path)
    path = folder / "clinical_cox.json"
    doc = json.loads(path.read_text())
    doc["fit"]["coef"][0] *= 2
    path.write_text(json.dumps(doc, indent=1))
    with pytest.raises(ModelIntegrityError, match="SHA-256"):
        load_model(folder / "clinical_cox.bundle.json")


def test_a_changed_imputer_or_forest_is_refused_before_unpickling(run: Path, tmp_path: Path) -> None:
    folder = _copy_models(run, tmp_path)
    for name, bundle in (("imaging_clinical.imputer.joblib", "imaging_clinical"), ("forest.joblib", "forest")):
        path = folder / name
        path.write_bytes(path.read_bytes() + b"\0")
        with pytest.raises(ModelIntegrityError, match="changed or replaced"):
            load_model(folder / f"{bundle}.bundle.json")


def test_foreign_missing_and_escaping_files_are_clear_errors(run: Path, tmp_path: Path) -> None:
    folder = _copy_models(run, tmp_path)
    foreign = folder / "other.bundle.json"
    foreign.write_text(json.dumps({"format": "something else"}))
    with pytest.raises(ModelInputError, match="not a riskbench model bundle"):
        load_model(foreign)
    with pytest.raises(ModelInputError, match="no model bundle"):
        load_model(folder / "absent.bundle.json")
    doc = json.loads((folder / "clinical_cox.bundle.json").read_text())
    doc["parts"][0]["file"] = "../../clinical_cox.json"
    (folder / "escape.bundle.json").write_text(json.dumps(doc))
    with pytest.raises(ModelInputError, match="not a file beside it"):
        load_model(folder / "escape.bundle.json")
    (folder / "clinical_cox.json").unlink()
    with pytest.raises(ModelInputError, match="copy the whole"):
        load_model(folder / "clinical_cox.bundle.json")


def test_rows_at_a_date_match_the_landmark_rows(run: Path) -> None:
    """A prediction date equal to each patient's entry plus a landmark gives that landmark's stack row."""
    saved = load_model(_bundle(run, "clinical_cox"))
    data = run / "data"
    sources = (data / "patients.csv", data / "measurements.csv", data / "outcomes.csv")
    at_landmark = saved.build_tables(*sources, landmarks_days=[365.25])
    patients = pd.read_csv(data / "patients.csv")
    entry = pd.to_datetime(patients.set_index("patient_id")["entry_date"])
    dates = {str(p): (entry[p] + pd.Timedelta(days=365)).date() for p in entry.index}
    at_date = saved.build_tables(*sources, at_date=dates)
    merged = at_landmark.assign(patient_id=at_landmark["patient_id"].astype(str)).merge(
        at_date.assign(patient_id=at_date["patient_id"].astype(str)), on="patient_id", suffixes=("", "_d")
    )
    assert len(merged) >= 0.9 * len(at_landmark)
    assert (merged["landmark_d"] == 365.0).all()
    for column in ("age_at_entry", "pack_years", "log_nodule_volume"):
        np.testing.assert_allclose(merged[f"{column}_d"], merged[column])
    stale = merged["nodule_volume_staleness_days_d"] - merged["nodule_volume_staleness_days"]
    np.testing.assert_allclose(stale.dropna(), -0.25)  # the clock advanced to day 365, not 365.25


def test_flags_name_the_out_of_range_stale_and_missing_covariates(run: Path) -> None:
    saved = load_model(_bundle(run, "imaging_clinical"))
    stack = pd.read_parquet(run / "run" / "data" / "landmark_stack.parquet").head(3).copy()
    stack["age_at_entry"] = [saved.development_ranges["age_at_entry"]["max"] + 1, 50.0, 50.0]
    stack["sex_male"] = [0.0, 0.5, 1.0]
    stack["serum_marker"] = [1.0, np.nan, 1.0]
    stack["serum_marker_staleness_days"] = [10.0, 2000.0, 10.0]
    flags = saved.flags(stack)
    assert flags.loc[0, "outside_development_range"] == "age_at_entry"
    assert flags.loc[1, "outside_development_range"] == "sex_male"
    assert flags.loc[1, "older_than_carry_forward"] == "serum_marker"
    assert "serum_marker" in flags.loc[1, "missing_covariates"]
    assert flags.loc[2, "older_than_carry_forward"] == ""


def test_inside_a_run_folder_a_changed_bundle_is_refused_by_the_manifest(run: Path, tmp_path: Path) -> None:
    import shutil

    folder = tmp_path / "run"
    shutil.copytree(run / "run" / "models", folder / "models")
    (folder / "manifest.json").write_text(json.dumps({"riskbench_run": 1, "outputs_sha256": output_digests(folder)}))
    assert load_model(folder / "models" / "clinical_cox.bundle.json").name == "clinical_cox"
    bundle = folder / "models" / "clinical_cox.bundle.json"
    doc = json.loads(bundle.read_text())
    doc["development_ranges"]["age_at_entry"]["max"] = 200.0  # widen what the model claims to have seen
    bundle.write_text(json.dumps(doc, indent=1))
    with pytest.raises(ModelIntegrityError, match="manifest"):
        load_model(bundle)


def test_a_patient_last_seen_on_the_prediction_date_is_scored_one_with_an_event_then_is_not(run: Path) -> None:
    saved = load_model(_bundle(run, "clinical_cox"))
    data = run / "data"
    outcomes = pd.read_csv(data / "outcomes.csv", dtype={"patient_id": str})
    last = outcomes.sort_values("date").groupby("patient_id").tail(1)
    dates = dict(zip(last["patient_id"], last["date"]))
    rows = saved.build_tables(data / "patients.csv", data / "measurements.csv", data / "outcomes.csv", at_date=dates)
    scored = set(rows["patient_id"].astype(str))
    censored = set(last.loc[last["kind"] == "end_of_follow_up", "patient_id"])
    events = set(last.loc[last["kind"] != "end_of_follow_up", "patient_id"])
    assert len(censored & scored) >= 0.9 * len(censored) and not events & scored
    assert rows[["age_at_entry", "pack_years"]].notna().all().all()


def test_a_model_family_that_cannot_be_saved_is_refused_before_anything_is_written(run: Path, tmp_path: Path) -> None:
    from riskbench.workflow.model_bundle import save_run_model

    class Unsaveable:
        covariates = ("age_at_entry",)

    spec = load_model(_bundle(run, "clinical_cox")).cohort_spec()
    with pytest.raises(ModelInputError, match="cannot be saved"):
        save_run_model(
            tmp_path,
            "other",
            "landmark_cox",
            Unsaveable(),
            cohort_rules=spec,
            development=pd.DataFrame({"age_at_entry": [50.0]}),
            landmarks_days=[0.0],
            prediction_window_days=365.25,
            horizons_days=[365.25],
        )
    assert not any((tmp_path / "models").glob("*"))
