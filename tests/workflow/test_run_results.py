"""Stage results you can explore in a notebook, and a finished run read back with ``open_run``.

The stages run in-process once on a small demo-generator cohort (300 patients). Checks: each stage's result
holds what it made (the same numbers as the files it wrote), shows itself as escaped HTML with small counts
hidden, and draws figures; the documented recipe (open a run, look at the cohort, refit a model with a
covariate dropped, redraw a calibration) runs and reproduces the report's own numbers.
"""

from __future__ import annotations

import importlib.util
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from matplotlib.figure import Figure

from riskbench.report.notebook_views import CohortSummary
from riskbench.workflow.config import load_config
from riskbench.workflow.manifest import build_manifest, utc_now, write_manifest
from riskbench.workflow.model_factory import fit_model
from riskbench.workflow.run_results import RunFolderError, open_run
from riskbench.workflow.stage_result import show

_SPEC = importlib.util.spec_from_file_location("analysis_builder", Path(__file__).with_name("analysis_builder.py"))
B = importlib.util.module_from_spec(_SPEC)
_SPEC.loader.exec_module(B)


@pytest.fixture(scope="module")
def finished(tmp_path_factory) -> tuple[Path, dict]:
    """Every stage run in-process on 300 patients, with the manifest the runner would write."""
    folder = tmp_path_factory.mktemp("explore")
    B.write_data(folder, 300)
    config_path = B.write_config(folder)
    run_dir = folder / "run"
    results = B.run_stages(config_path, run_dir)
    write_manifest(
        build_manifest(load_config(config_path), run_dir, started=utc_now(), finished=utc_now(), stage_seconds={}),
        run_dir,
    )
    return run_dir, results


def test_each_stage_result_holds_what_it_wrote(finished):
    run_dir, results = finished
    cohort = results["cohort"]
    pd.testing.assert_frame_equal(
        cohort.landmark_stack.reset_index(drop=True), pd.read_parquet(run_dir / "data" / "landmark_stack.parquet")
    )
    assert cohort.summary.n_patients == len(pd.read_parquet(run_dir / "data" / "patients.parquet"))
    assert isinstance(cohort.summary.plot_flow(), Figure)

    models = results["models"]
    assert set(models.models) == {"clinical", "imaging_clinical"}
    stack = models.landmark_stack
    risk = models.models["clinical"].predict_risk(stack, 730.5)
    apparent = pd.read_parquet(run_dir / "data" / "apparent_predictions.parquet")
    saved = apparent[(apparent["model"] == "clinical") & np.isclose(apparent["horizon"], 730.5)]
    np.testing.assert_allclose(risk, saved.sort_values("row")["risk"], rtol=1e-12)
    pd.testing.assert_frame_equal(models.apparent_predictions, apparent)
    assert models.model_summary("clinical") is models.tables["coefficients_clinical"]  # no Cox summary object
    assert len(models.plot_hazard_ratios().axes[0].get_yticks()) >= len(B.IMAGING)
    with pytest.raises(KeyError, match="fitted: clinical, imaging_clinical"):
        models.model_summary("nonexistent")

    validation = results["validation"]
    pd.testing.assert_frame_equal(
        validation.cv_predictions.reset_index(drop=True), pd.read_parquet(run_dir / "data" / "cv_predictions.parquet")
    )
    cv = validation.cv_predictions
    by_hand = cv[(cv["model"] == "clinical") & np.isclose(cv["horizon"], 730.5)].sort_values("row")["risk"]
    np.testing.assert_array_equal(validation.risks("clinical", "2 years"), by_hand.to_numpy())

    comparison = results["comparison"]
    written = pd.read_csv(run_dir / "tables" / "calibration_summary.csv")
    view = comparison.calibration("imaging_clinical", "2 years")
    row = written[(written["model"] == "imaging_clinical") & np.isclose(written["horizon_years"], 2.0)].iloc[0]
    assert view.calibration.slope == pytest.approx(row["slope"], rel=1e-5)  # the CSV keeps 6 digits
    assert isinstance(view.plot(), Figure)
    assert set(comparison.concordance.table["metric"]) == {"harrell_c", "uno_c"}
    assert isinstance(comparison.concordance.plot(), Figure)
    paired = comparison.comparison
    assert paired is not None and paired.candidate == "imaging_clinical"
    pd.testing.assert_frame_equal(
        paired.table,
        pd.read_csv(run_dir / "tables" / "model_comparison.csv"),
        check_exact=False,
        rtol=1e-5,
        check_dtype=False,
    )
    assert isinstance(paired.plot(), Figure)
    with pytest.raises(KeyError, match="computed: "):
        comparison.calibration("imaging_clinical", "7 years")


def test_results_show_as_escaped_html_with_small_counts_hidden(finished):
    _, results = finished
    for result in results.values():
        page = result._repr_html_()
        assert page.startswith("<div>") and "<script" not in page
        assert "Research software, not a medical device" in page
    assert "Research software, not a medical device" in results["comparison"]._repr_html_()
    hostile = CohortSummary(
        tables={"cohort_flow": pd.DataFrame({"step": ["<script>alert(1)</script>"], "n_patients": ["<10"]})},
        flow=None,
        n_patients=7,
        n_intervals=3000,
        n_landmark_rows=4,
        threshold=10,
    )
    page = hostile._repr_html_()
    assert "<script>" not in page and "&lt;script&gt;" in page
    assert "&lt;10 patients included" in page and "3000 counting-process intervals" in page
    assert "7 patients" not in page and " 4 landmark rows" not in page


def test_show_still_prints_outside_jupyter(finished, capsys, monkeypatch):
    _, results = finished
    monkeypatch.setitem(__import__("sys").modules, "IPython.display", None)  # as without IPython
    show(results["cohort"])
    assert "cohort_flow" in capsys.readouterr().out


def test_the_documented_recipe_runs_on_a_finished_run(finished):
    """README, "Looking closer at a finished run": the same lines, on a small run."""
    run_dir, results = finished
    run = open_run(run_dir)
    assert "Cohort" in run.cohort._repr_html_()
    assert isinstance(run.cohort.plot_flow(), Figure)
    refit = run.refit("imaging_clinical", drop=["serum_marker"])
    redrawn = run.calibration("imaging_clinical", "2 years")
    assert isinstance(redrawn.plot(), Figure)
    assert isinstance(run.calibration(refit, "2 years").plot(), Figure)

    # the refit is the configured model with one covariate fewer, fitted on the run's tables
    config = load_config(run.manifest["configuration_path"])
    spec = config.model("imaging_clinical")
    direct = fit_model(
        type(spec)(
            spec.name,
            tuple(c for c in spec.covariates if c != "serum_marker"),
            spec.family,
            spec.params,
            spec.missing_data,
        ),
        run.landmark_stack,
        run.counting_process,
        seed=config.seed,
        missing_data=config.missing_data,
    )
    terms = refit.summary()
    assert "serum_marker" not in set(terms.get("term", terms.index))
    pd.testing.assert_frame_equal(terms, direct.summary())
    # the cross-validated calibration read back is the one the report shows
    stage_view = results["comparison"].calibration("imaging_clinical", 730.5)
    assert redrawn.calibration.oe_ratio == pytest.approx(stage_view.calibration.oe_ratio, rel=1e-12)
    assert redrawn.calibration.slope == pytest.approx(stage_view.calibration.slope, rel=1e-12)
    assert run.table("model_comparison")["imaging_clinical"].dtype == float  # numbers, not text
    saved = run.saved_models()  # the models the models stage saved, loaded back: same risks as in the run
    assert set(saved) == {"clinical", "imaging_clinical"}
    apparent = run.apparent_predictions
    by_2y = apparent[(apparent["model"] == "clinical") & np.isclose(apparent["horizon"], 730.5)].sort_values("row")
    np.testing.assert_allclose(
        saved["clinical"].model.predict_risk(run.landmark_stack, 730.5), by_2y["risk"], rtol=1e-12
    )


def test_open_run_refuses_a_folder_that_is_not_a_finished_run(tmp_path):
    with pytest.raises(RunFolderError, match=r"manifest\.json"):
        open_run(tmp_path)


def test_a_cox_model_of_the_models_stage_gives_its_summary_object(finished):
    """A time-varying Cox model answers ``model_summary`` with its summary object (fitted on the (start, stop]
    rows it was fitted on); the events are the counting-process rows that end in the outcome."""
    from riskbench.models.cox_model import CoxModel
    from riskbench.workflow.stage_result import ModelsStageResult

    _, results = finished
    cp = results["cohort"].counting_process
    cox = CoxModel(["age_at_entry", "pack_years"]).fit(cp)
    result = ModelsStageResult(
        stage="models",
        run_dir=Path("."),
        models={"tv": cox},
        landmark_stack=results["cohort"].landmark_stack,
        counting_process=cp,
    )
    summary = result.model_summary("tv")
    assert summary.n_rows == len(cp) and summary.n_events == int((cp["status"] == 1).sum())
    assert "Cox proportional-hazards model" in summary._repr_html_()
