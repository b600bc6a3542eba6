"""``riskbench score-patients``: a saved model applied to raw tables through the command line.

The reference is the run itself: scoring the development cohort's own raw tables with its configuration (same
pseudonym key) must give the run's apparent predictions (``data/apparent_predictions``) for the same
pseudonymised patients and landmarks, exactly. Stage functions run in-process on a small demo-generator cohort
(tests/workflow/analysis_builder.py).
"""

from __future__ import annotations

import importlib.util
import json
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from riskbench.report.model_sheet import CAUTION
from riskbench.workflow.cli import main

_SPEC = importlib.util.spec_from_file_location("analysis_builder", Path(__file__).with_name("analysis_builder.py"))
B = importlib.util.module_from_spec(_SPEC)
_SPEC.loader.exec_module(B)

MODELS = (
    {"name": "imaging_clinical", "covariates": B.IMAGING, "params": {"baseline": "stratified"}},
    {"name": "clinical", "covariates": B.CLINICAL},
)


@pytest.fixture(scope="module")
def run(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("score")
    B.write_data(folder, 250, seed=3)
    config = B.write_config(folder, models=MODELS)
    config.write_text(
        config.read_text() + '\n[missing_data]\nmethod = "multiple_imputation"\nimputations = 2\nmax_iterations = 2\n'
    )
    B.run_stages(config, folder / "run", ("cohort", "models"))
    return folder


def _score(run: Path, out: Path, *args: str, model: str = "imaging_clinical") -> int:
    return main(["score-patients", str(run / "run" / "models" / f"{model}.bundle.json"), "--out", str(out), *args])


def _risks(out: Path) -> pd.DataFrame:
    return pd.read_csv(out / "risks.csv", float_precision="round_trip", keep_default_na=False, na_values={"risk": [""]})


def test_scoring_the_development_tables_reproduces_the_runs_predictions(run: Path, tmp_path: Path) -> None:
    out = tmp_path / "scored"
    assert _score(run, out, "--config", str(run / "analysis.toml"), "--horizons", "1 year", "2 years") == 0
    risks = _risks(out)
    stack = pd.read_parquet(run / "run" / "data" / "landmark_stack.parquet").reset_index(drop=True)
    predictions = pd.read_parquet(run / "run" / "data" / "apparent_predictions.parquet")
    for horizon in (365.25, 730.5):
        theirs = predictions[(predictions["model"] == "imaging_clinical") & np.isclose(predictions["horizon"], horizon)]
        expected = stack[["patient_id", "landmark"]].assign(risk=theirs.sort_values("row")["risk"].to_numpy())
        ours = risks[risks["horizon_days"] == horizon].rename(
            columns={"patient": "patient_id", "landmark_days": "landmark"}
        )
        merged = expected.merge(
            ours, on=["patient_id", "landmark"], how="outer", suffixes=("_run", "_scored"), indicator=True
        )
        # the same pseudonymised patients at the same landmarks
        assert len(merged) == len(stack) > 500 and (merged["_merge"] == "both").all()
        np.testing.assert_array_equal(merged["risk_scored"].to_numpy(), merged["risk_run"].to_numpy())
    readme = (out / "README.txt").read_text()
    assert CAUTION in readme and "SHA-256" in readme and "stayed on this machine" in readme


def test_ids_stay_out_of_the_output_unless_asked_for(run: Path, tmp_path: Path) -> None:
    ids = set(pd.read_csv(run / "data" / "patients.csv")["patient_id"].astype(str))
    pseudonymised = tmp_path / "pseudonyms"
    assert _score(run, pseudonymised, "--data", str(run / "data"), "--key-file", str(tmp_path / "k.key")) == 0
    for path in pseudonymised.iterdir():
        text = path.read_text()
        assert not any(i in text for i in ids), path.name
    kept = tmp_path / "ids"
    assert _score(run, kept, "--data", str(run / "data"), "--keep-ids") == 0
    risks = _risks(kept)
    assert set(risks["patient_id"].astype(str)) <= ids and len(set(risks["patient_id"])) > 100
    assert "keep it on this machine" in (kept / "README.txt").read_text()


def test_a_hostile_id_is_neutralised_in_the_csv(run: Path, tmp_path: Path) -> None:
    data = tmp_path / "data"
    shutil.copytree(run / "data", data)
    tables = {
        name: pd.read_csv(data / f"{name}.csv", dtype={"patient_id": str})
        for name in ("patients", "measurements", "outcomes")
    }
    first = tables["patients"]["patient_id"].iloc[0]
    for name, table in tables.items():
        table["patient_id"] = table["patient_id"].replace(first, '=HYPERLINK("http://x")')
        table.to_csv(data / f"{name}.csv", index=False)
    out = tmp_path / "scored"
    assert _score(run, out, "--data", str(data), "--keep-ids") == 0
    text = (out / "risks.csv").read_text()
    assert "'=HYPERLINK" in text and "\n=HYPERLINK" not in text


def test_the_output_folder_follows_the_run_folder_rules(run: Path, tmp_path: Path, capsys) -> None:
    study = tmp_path / "study"
    study.mkdir()
    (study / "notes.txt").write_text("mine")
    assert _score(run, study, "--data", str(run / "data"), "--overwrite") == 2
    assert (study / "notes.txt").read_text() == "mine"
    assert "not made by a riskbench run" in capsys.readouterr().err
    out = tmp_path / "scored"
    assert _score(run, out, "--data", str(run / "data")) == 0
    assert _score(run, out, "--data", str(run / "data")) == 2
    assert "--overwrite" in capsys.readouterr().err
    assert _score(run, out, "--data", str(run / "data"), "--overwrite") == 0


def test_a_date_gives_risks_with_a_smooth_baseline_and_a_reason_without(run: Path, tmp_path: Path) -> None:
    patients = pd.read_csv(run / "data" / "patients.csv")
    date = (pd.to_datetime(patients["entry_date"]).max() + pd.Timedelta(days=100)).date().isoformat()
    smooth = tmp_path / "smooth"
    assert _score(run, smooth, "--data", str(run / "data"), "--at-date", date, model="clinical") == 0
    risks = _risks(smooth)
    assert (risks["prediction_date"] == date).all() and risks["landmark_days"].between(100, 730.5).any()
    inside = risks["landmark_days"] <= 730.5
    assert risks.loc[inside, "risk"].between(0, 1).all() and risks.loc[inside, "not_predicted"].eq("").all()
    assert risks.loc[~inside, "risk"].isna().all()
    assert risks.loc[~inside, "not_predicted"].str.contains("landmark range").all()
    stratified = tmp_path / "stratified"
    assert _score(run, stratified, "--data", str(run / "data"), "--at-date", date) == 0
    other = _risks(stratified)
    off = ~np.isclose(other["landmark_days"].to_numpy()[:, None], [0, 182.625, 365.25, 547.875, 730.5]).any(axis=1)
    assert off.any() and other.loc[off, "risk"].isna().all()
    assert other.loc[off, "not_predicted"].str.contains("fitted landmarks").all()


def test_a_changed_model_is_refused_with_exit_status_2(run: Path, tmp_path: Path, capsys) -> None:
    models = tmp_path / "models"
    shutil.copytree(run / "run" / "models", models)
    doc = json.loads((models / "clinical.json").read_text())
    doc["outcome"]["coef"][0] += 0.5
    (models / "clinical.json").write_text(json.dumps(doc))
    status = main(
        [
            "score-patients",
            str(models / "clinical.bundle.json"),
            "--out",
            str(tmp_path / "o"),
            "--data",
            str(run / "data"),
        ]
    )
    assert status == 2 and "SHA-256" in capsys.readouterr().err
    assert not (tmp_path / "o").exists()


def test_rows_a_complete_case_model_cannot_predict_say_why(run: Path, tmp_path: Path) -> None:
    from riskbench.models.landmark import LandmarkSupermodel
    from riskbench.models.missing_data import MissingDataModel
    from riskbench.workflow.model_bundle import load_model, save_run_model

    stack = pd.read_parquet(run / "run" / "data" / "landmark_stack.parquet")
    model = MissingDataModel(LandmarkSupermodel(B.IMAGING, baseline="stratified"), method="complete_cases").fit(stack)
    spec = load_model(run / "run" / "models" / "clinical.bundle.json").cohort_spec()
    bundle = save_run_model(
        tmp_path / "run",
        "complete",
        "landmark_cox",
        model,
        cohort_rules=spec,
        development=stack,
        landmarks_days=[0.0, 182.625, 365.25, 547.875, 730.5],
        prediction_window_days=730.5,
        horizons_days=[730.5],
    )
    data = tmp_path / "data"
    shutil.copytree(run / "data", data)
    measurements = pd.read_csv(data / "measurements.csv")
    some = measurements["patient_id"].isin(measurements["patient_id"].unique()[:40])
    measurements[~(some & (measurements["variable"] == "suspicion_score"))].to_csv(
        data / "measurements.csv", index=False
    )
    out = tmp_path / "scored"
    assert main(["score-patients", str(bundle), "--out", str(out), "--data", str(data), "--keep-ids"]) == 0
    risks = _risks(out)
    missing = risks["missing_covariates"].str.contains("suspicion_score")
    assert missing.sum() >= 40
    assert risks.loc[missing, "risk"].isna().all() and risks.loc[~missing, "risk"].between(0, 1).all()
    assert risks.loc[missing, "not_predicted"].str.contains("complete cases").all()


def test_values_older_than_the_carry_forward_limit_are_flagged(run: Path, tmp_path: Path) -> None:
    """Patients whose measurements stop after half a year, scored at 4 years: their values are older than the
    3-year carry-forward limit of the model's cohort rules, so the row names those variables."""
    data = tmp_path / "data"
    shutil.copytree(run / "data", data)
    measurements = pd.read_csv(data / "measurements.csv")
    patients = pd.read_csv(data / "patients.csv")
    entry = pd.to_datetime(measurements["patient_id"].map(patients.set_index("patient_id")["entry_date"]))
    stopped = patients["patient_id"].iloc[:60]
    late = measurements["patient_id"].isin(stopped) & (
        pd.to_datetime(measurements["date"]) - entry > pd.Timedelta(days=180)
    )
    measurements[~late].to_csv(data / "measurements.csv", index=False)
    out = tmp_path / "scored"
    assert _score(run, out, "--data", str(data), "--keep-ids", "--landmarks", "4 years", model="clinical") == 0
    risks = _risks(out)
    old = risks["patient_id"].isin(stopped)
    assert old.any() and (~old).any()
    assert risks.loc[old, "older_than_carry_forward"].str.contains("serum_marker").all()
    assert risks.loc[old, "missing_covariates"].str.contains("serum_marker").all()
    assert not risks.loc[~old, "older_than_carry_forward"].str.contains("serum_marker").any()


def test_a_sources_only_configuration_with_its_own_column_names_and_date_format(run: Path, tmp_path: Path) -> None:
    """The new site names its columns and writes its dates its own way; a file holding only [sources] says how,
    and the scores equal those from the tables in our names (same key, so same pseudonyms)."""
    site = tmp_path / "site"
    site.mkdir()
    patients = pd.read_csv(run / "data" / "patients.csv")
    patients["entry_date"] = pd.to_datetime(patients["entry_date"]).dt.strftime("%d/%m/%Y")
    patients["birth_date"] = pd.to_datetime(patients["birth_date"]).dt.strftime("%d/%m/%Y")
    patients.rename(columns={"patient_id": "PatientNo", "entry_date": "FirstCT"}).to_csv(site / "p.csv", index=False)
    for name in ("measurements", "outcomes"):
        table = pd.read_csv(run / "data" / f"{name}.csv")
        table["date"] = pd.to_datetime(table["date"]).dt.strftime("%d/%m/%Y")
        table.rename(columns={"patient_id": "PatientNo"}).to_csv(site / f"{name[0]}.csv", index=False)
    (site / "site.toml").write_text(
        '[sources]\ndate_format = "%d/%m/%Y"\n'
        '[sources.patients]\npath = "p.csv"\ncolumns = { patient_id = "PatientNo", entry_date = "FirstCT" }\n'
        '[sources.measurements]\npath = "m.csv"\ncolumns = { patient_id = "PatientNo" }\n'
        '[sources.outcomes]\npath = "o.csv"\ncolumns = { patient_id = "PatientNo" }\n'
        f'[privacy]\nkey_file = "{tmp_path / "shared.key"}"\n'
    )
    ours, theirs = tmp_path / "ours", tmp_path / "theirs"
    assert _score(run, theirs, "--config", str(site / "site.toml")) == 0
    assert _score(run, ours, "--data", str(run / "data"), "--key-file", str(tmp_path / "shared.key")) == 0
    pd.testing.assert_frame_equal(_risks(theirs), _risks(ours))
    assert len(_risks(ours)) > 500


def test_patients_without_an_outcomes_table_are_scored_as_followed_until_a_date(run: Path, tmp_path: Path) -> None:
    """Without outcomes, every patient is last seen on --followed-until; the covariates at a landmark do not
    depend on what happened later, so each (patient, landmark) scored both ways has the same risk."""
    data = tmp_path / "data"
    data.mkdir()
    for name in ("patients", "measurements"):
        shutil.copy(run / "data" / f"{name}.csv", data / f"{name}.csv")
    until = pd.to_datetime(pd.read_csv(data / "measurements.csv")["date"]).max().date().isoformat()
    assert _score(run, tmp_path / "no_outcomes", "--data", str(data), "--keep-ids") == 2
    open_ = tmp_path / "open"
    assert _score(run, open_, "--data", str(data), "--keep-ids", "--followed-until", until, model="clinical") == 0
    known = tmp_path / "known"
    assert _score(run, known, "--data", str(run / "data"), "--keep-ids", model="clinical") == 0
    merged = _risks(known).merge(
        _risks(open_), on=["patient_id", "landmark_days", "horizon_days"], suffixes=("_known", "_open")
    )
    assert len(merged) == len(_risks(known))  # everyone at risk with outcomes known is scored without them
    np.testing.assert_array_equal(merged["risk_open"].to_numpy(), merged["risk_known"].to_numpy())
    assert len(_risks(open_)) > len(merged)  # and patients whose outcome came earlier are scored too
