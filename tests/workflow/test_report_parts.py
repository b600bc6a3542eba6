"""Report parts are optional and never fatal (stage functions in-process, on demo-generator cohorts).

Each test runs the stages on a small synthetic cohort with one part switched off or one part that cannot be
computed for one model, and checks that the run still writes its report, that the part is missing, and that
the report's "Notes" section says why in the configuration's terms. The cohort stage runs once per cohort;
the later stages run on a copy of its output.
"""

from __future__ import annotations

import html
import importlib.util
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from riskbench.metrics import triage_operating_point
from riskbench.metrics.triage import TargetUnreachable
from riskbench.report.notes import Note, failed_models, load_notes, notes_html, save_notes
from riskbench.validation import ModelSpec, PrecomputedTables
from riskbench.validation.comparison import compare_specs
from riskbench.validation.optimism import bootstrap_optimism_result
from riskbench.workflow.stage_validation import failure_notes

_SPEC = importlib.util.spec_from_file_location("analysis_builder", Path(__file__).with_name("analysis_builder.py"))
B = importlib.util.module_from_spec(_SPEC)
_SPEC.loader.exec_module(B)

LATER = ("models", "validation", "comparison")


@pytest.fixture(scope="module")
def cohort(tmp_path_factory) -> Path:
    """300 patients (outcome and competing events), one of them with ``rare = 1``; the cohort stage run once."""
    folder = tmp_path_factory.mktemp("parts")
    B.write_data(folder, 300, rare_patients=1)
    config = B.write_config(folder, static=[*B.STATIC, "rare"])
    B.run_stages(config, folder / "cohort_run", ("cohort",))
    return folder


def _run_later(cohort: Path, name: str, **config) -> Path:
    path = B.write_config(cohort, static=[*B.STATIC, "rare"], name=name, **config)
    run_dir = B.copy_run(cohort / "cohort_run", cohort / name)
    B.run_stages(path, run_dir, LATER)
    return run_dir


def test_every_switch_off_leaves_its_part_out_with_a_note(cohort):
    path = B.write_config(
        cohort,
        static=[*B.STATIC, "rare"],
        name="all_off",
        report={"triage": False, "decision_curves": False, "example_timelines": False},
        validation={"optimism": False},
    )
    run_dir = cohort / "all_off"
    B.run_stages(path, run_dir)
    names = {p.stem for p in (run_dir / "tables").glob("*.csv")} | {p.stem for p in (run_dir / "figures").glob("*.png")}
    assert not {"triage_operating_point", "bootstrap_optimism", "example_timelines"} & names
    assert not [n for n in names if n.startswith("decision_curve")]
    assert {"discrimination", "calibration_summary", "model_comparison"} <= names  # the rest still reports
    notes = B.notes_of(run_dir)
    off = notes[notes["kind"] == "switched off"]["text"].tolist()
    for key in ("[report] triage", "[report] decision_curves", "[report] example_timelines", "[validation] optimism"):
        assert f"switched off by {key} = false." in off
    report = (run_dir / "report.html").read_text()
    assert '<section id="notes"><h2>Notes</h2>' in report
    assert html.escape("switched off by [report] decision_curves = false.") in report


def test_no_bootstrap_resamples_skips_optimism_and_comparison_with_notes(cohort):
    run_dir = _run_later(cohort, "no_resamples", validation={"bootstrap_resamples": 0, "optimism": False})
    notes = B.notes_of(run_dir)
    part = notes.set_index("part")["text"]
    assert "at least 2 bootstrap resamples" in part["comparison of the model sets"]
    assert not (run_dir / "tables" / "model_comparison.csv").exists()
    assert (run_dir / "report.html").is_file()


def test_weak_third_model_with_an_unreachable_npv_target_becomes_a_note(cohort):
    """The issue's failure: a weak third model and a high NPV target used to stop a finished run."""
    weak = {
        "name": "weak",
        "covariates": ["sex_male"],
        "params": {"landmark_effects": "none", "baseline": "stratified"},
    }
    run_dir = _run_later(cohort, "weak", models=[*B.DEFAULT_MODELS, weak], report={"triage_target_npv": 0.995})
    notes = B.notes_of(run_dir)
    triage = notes[notes["part"] == "triage operating point"]
    assert "weak" in set(triage["model"])
    text = triage.set_index("model").loc["weak", "text"]
    assert "no risk threshold of this model reaches NPV 0.995 by 2 years" in text
    assert "[report] triage_target_npv" in text
    assert "[report] triage = false" in text
    curves = pd.read_csv(next((run_dir / "tables").glob("decision_curve_*.csv")))
    assert set(curves["model_name"]) == {"clinical", "imaging_clinical", "weak"}  # other parts still report
    shown = (
        pd.read_csv(run_dir / "tables" / "triage_operating_point.csv")
        if (run_dir / "tables" / "triage_operating_point.csv").exists()
        else pd.DataFrame({"model": []})
    )
    assert set(shown["model"]) | set(triage["model"]) == {"clinical", "imaging_clinical", "weak"}
    assert "weak" not in set(shown["model"])
    assert html.escape(text) in (run_dir / "report.html").read_text()


def test_unreachable_target_is_a_named_error_of_the_metric():
    """Constant risks leave nobody below any candidate threshold, so no NPV target can be met."""
    rng = np.random.default_rng(0)
    time = rng.uniform(10, 800, 200)
    event = (rng.uniform(size=200) < 0.2).astype(int)
    with pytest.raises(TargetUnreachable, match=r"no risk threshold reaches NPV 0.98 .*no candidate spares anyone"):
        triage_operating_point(time, event, np.full(200, 0.3), 365.25, target_npv=0.98, n_boot=0, check_direction=False)


def test_a_model_failing_in_a_cross_validation_fold_is_dropped_with_a_note(cohort):
    """``rare`` is 1 for one patient: without that patient's fold, the covariate is constant."""
    rare = {
        "name": "rare_model",
        "covariates": ["age_at_entry", "rare"],
        "params": {"landmark_effects": "none", "baseline": "stratified"},
    }
    run_dir = _run_later(cohort, "rare", models=[*B.DEFAULT_MODELS, rare])
    notes = B.notes_of(run_dir)
    failed = notes[(notes["stage"] == "validation") & (notes["kind"] == "fit failed")]
    assert failed["model"].tolist() == ["rare_model"]
    text = failed["text"].iloc[0]
    assert "the fit failed in 1 of 3 folds" in text
    assert "'rare' take a single value" in text and "[[models]] covariates of 'rare_model'" in text
    cv = pd.read_parquet(run_dir / "data" / "cv_predictions.parquet")
    assert set(cv["model"]) == {"clinical", "imaging_clinical"}
    discrimination = pd.read_csv(run_dir / "tables" / "discrimination.csv")
    assert {"clinical", "imaging_clinical"} <= set(discrimination.columns)
    assert "rare_model" not in discrimination.columns


def test_failing_resamples_are_counted_dropped_and_their_warnings_recorded(cohort):
    """One patient carries ``rare = 1``; a resample without that patient (probability about (1 - 1/n)^n,
    e^-1 = 0.37, **from memory**) cannot fit the covariate and is dropped, named and counted."""
    stack = pd.read_parquet(cohort / "cohort_run" / "data" / "landmark_stack.parquet")
    cp = pd.read_parquet(cohort / "cohort_run" / "data" / "counting_process.parquet")
    assert stack.groupby("patient_id")["rare"].first().sum() == 1
    spec = ModelSpec(
        "rare_model", ("age_at_entry", "rare"), "landmark_cox", {"landmark_effects": "none", "baseline": "stratified"}
    )
    source = PrecomputedTables(stack, cp)
    result = bootstrap_optimism_result([spec], source, [365.25], n_boot=8, seed=3)
    assert 0 < result.n_failed < 8
    assert all(model == "rare_model" and "CoxConstantCovariateError" in why for model, why in result.failures)
    assert len(result.failures) == result.n_failed
    assert set(result.table["n_boot"]) == {8 - result.n_failed}
    assert len(result.fit_log) == 8  # every refit's warnings recorded, the failing ones too
    notes = failure_notes(result.failures, 8, "validation", "bootstrap optimism", 10)
    assert [n.model for n in notes] == ["rare_model"]
    assert notes[0].text.startswith(f"{result.n_failed} of 8 bootstrap resamples could not be refitted")

    clinical = ModelSpec("clinical", ("age_at_entry", "sex_male"), "landmark_cox", {"landmark_effects": "none"})
    paired = compare_specs([clinical, spec], source, [365.25], n_boot=8, seed=3, pairs=[(0, 1)])
    assert paired.n_failed == len(paired.failures) > 0
    assert {m for m, _ in paired.failures} == {"rare_model"}


def test_notes_round_trip_and_are_escaped_in_the_report_section(tmp_path):
    hostile = "<img src=x onerror=alert(1)>"
    save_notes(tmp_path, "models", [Note("models", "fit", f"failed: {hostile}", model="m1", kind="fit failed")])
    save_notes(tmp_path, "comparison", [Note("comparison", "triage operating point", "switched off")])
    notes, _ = load_notes(tmp_path)
    assert [n.stage for n in notes] == ["models", "comparison"]  # stage order, not file-name order
    assert failed_models(tmp_path) == {"m1": f"failed: {hostile}"}
    section = notes_html(tmp_path)
    assert hostile not in section and html.escape(hostile) in section
    with pytest.raises(ValueError, match="note kind"):
        Note("models", "fit", "text", kind="bad kind")


def test_no_competing_events_runs_without_empty_competing_columns(tmp_path):
    B.write_data(tmp_path, 300, competing=False)
    path = B.write_config(tmp_path)
    run_dir = tmp_path / "run"
    B.run_stages(path, run_dir)
    stack = pd.read_parquet(run_dir / "data" / "landmark_stack.parquet")
    assert not (stack["status"] == 2).any()
    notes = B.notes_of(run_dir).set_index("part")["text"]
    assert notes["competing-event model"].startswith("not fitted: the cohort has no competing events")
    for name in ("coefficients_clinical", "coefficients_imaging_clinical"):
        table = pd.read_csv(run_dir / "tables" / f"{name}.csv")
        assert set(table["cause"]) == {"outcome"}
    for csv in (run_dir / "tables").glob("*.csv"):
        table = pd.read_csv(csv, dtype=str, keep_default_na=False)
        empty = [c for c in table.columns if (table[c] == "").all()]
        assert not empty, f"{csv.name}: empty columns {empty}"
    assert (run_dir / "tables" / "triage_operating_point.csv").exists()
    assert (run_dir / "report.html").is_file()


def test_a_horizon_with_too_few_outcomes_gets_a_note_instead_of_measures(cohort):
    """Fewer outcomes before a report horizon than the small-count threshold: no AUC, concordance, Brier
    score or calibration there (they would rest on a handful of patients), a note, and the other horizon reports."""
    stack = pd.read_parquet(cohort / "cohort_run" / "data" / "landmark_stack.parquet")
    assert ((stack["time"] <= 91.3125) & (stack["status"] == 1)).sum() < 10  # the premise
    run_dir = _run_later(cohort, "short", report={"report_horizons": ["3 months", "2 years"]})
    notes = B.notes_of(run_dir).set_index("part")["text"]
    text = notes["measures at 0.25 years"]
    assert "fewer than 10 outcomes before 0.25 years" in text and "[report] report_horizons" in text
    assert "resamples dropped" not in set(B.notes_of(run_dir)["kind"])  # the comparison skips that horizon too
    assert set(pd.read_csv(run_dir / "tables" / "discrimination.csv")["horizon_years"]) == {2.0}
    assert set(pd.read_csv(run_dir / "tables" / "calibration_summary.csv")["horizon_years"]) == {2.0}
    assert not list((run_dir / "figures").glob("calibration_*_0_25y.png"))
    assert set(pd.read_csv(run_dir / "tables" / "auc_by_horizon.csv")["horizon"]) >= {730.5}


def test_a_model_that_cannot_be_fitted_on_the_whole_cohort_is_a_note_and_the_others_report(cohort):
    """``age`` at a landmark is ``age_at_entry`` plus the landmark time, so with the smooth baseline's landmark
    term the design is collinear: that model fails, the two others go through every stage."""
    ages = {
        "name": "ages",
        "covariates": ["age", "age_at_entry"],
        "params": {"landmark_effects": "none", "baseline": "smooth"},
    }
    run_dir = _run_later(cohort, "ages", models=[*B.DEFAULT_MODELS, ages])
    notes = B.notes_of(run_dir)
    failed = notes[notes["kind"] == "fit failed"]
    assert failed[["stage", "model"]].values.tolist() == [["models", "ages"]]  # not tried again later
    text = failed["text"].iloc[0]
    assert "covariates 'age', 'age_at_entry' together with the landmark terms of the smooth baseline" in text
    assert "[[models]] covariates of 'ages'" in text and "left out of the rest of the report" in text
    assert not (run_dir / "tables" / "coefficients_ages.csv").exists()
    assert set(pd.read_parquet(run_dir / "data" / "cv_predictions.parquet")["model"]) == {
        "clinical",
        "imaging_clinical",
    }
    assert (run_dir / "tables" / "model_comparison.csv").exists()
    assert html.escape(text) in (run_dir / "report.html").read_text()
