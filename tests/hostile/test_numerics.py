"""Numerical failures end in a report with notes in the user's terms, never in a traceback from the Cox engine.

The issue's case: a 60-patient cohort (demo generator) ended in ``array must not contain infs or NaNs`` deep in
the Cox engine. Now the stage functions finish, the model that cannot be fitted becomes a note naming the
model, the cause, the counts (small ones hidden) and the configuration keys that would change it, and no
warning escapes the stages.
"""

from __future__ import annotations

import html
import importlib.util
import json
import warnings
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest

from riskbench.models import LandmarkSupermodel
from riskbench.models.cox_engine import CoxCollinearityError, CoxNumericalError, MonotoneLikelihoodWarning, fit_cox
from riskbench.models.fit_warnings import count_warnings, recorded_warnings
from riskbench.workflow.fit_diagnosis import describe_fit_failure, describe_warnings

_SPEC = importlib.util.spec_from_file_location(
    "analysis_builder", Path(__file__).resolve().parents[1] / "workflow" / "analysis_builder.py"
)
B = importlib.util.module_from_spec(_SPEC)
_SPEC.loader.exec_module(B)


@pytest.fixture(scope="module")
def tiny(tmp_path_factory) -> tuple[Path, Path]:
    """The 60-patient demo cohort through the four stage functions; (configuration, run folder).

    A [[models]] entry is stood in for by a namespace with its fields (name, covariates, family, params)."""
    folder = tmp_path_factory.mktemp("tiny")
    B.write_data(folder, 60)
    # quadratic landmark effects (not the default): 21 coefficients for 7 covariates, so the fits break down
    models = [dict(m, params={**m["params"], "landmark_effects": "quadratic"}) for m in B.DEFAULT_MODELS]
    config = B.write_config(folder, models=models)
    run_dir = folder / "run"
    B.run_stages(config, run_dir, ("cohort",))
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        B.run_stages(config, run_dir, ("models", "validation", "comparison"))
    assert [str(w.message) for w in caught] == []  # every warning of the later stages is recorded, none escapes
    return config, run_dir


def test_sixty_patients_give_a_report_whose_failed_parts_are_notes(tiny):
    _, run_dir = tiny
    report = (run_dir / "report.html").read_text()
    assert "infs or NaNs" not in report
    notes = B.notes_of(run_dir)
    failed = notes[(notes["stage"] == "models") & (notes["kind"] == "fit failed")].set_index("model")["text"]
    assert "imaging_clinical" in failed.index
    text = failed["imaging_clinical"]
    # model, cause, counts (small counts hidden) and the keys that change it
    assert "broke down numerically" in text
    assert "fewer than 10 competing events for 21 coefficients, under 1 per coefficient" in text
    assert "running off to infinity" in text
    for key in ("[[models]] covariates of 'imaging_clinical'", "params landmark_effects", "[landmarks] landmarks"):
        assert key in text
    assert html.escape(text) in report
    saved = json.loads((run_dir / "notes" / "models.json").read_text())
    kinds = {(w["model"], w["kind"]) for w in saved["fit_warnings"]}
    assert ("imaging_clinical", "separation") in kinds  # counted per model and stage, shown in the report
    assert "Fitting warnings" in report


def test_sixty_patients_later_parts_say_why_they_are_missing(tiny):
    _, run_dir = tiny
    notes = B.notes_of(run_dir)
    comparison = notes[notes["stage"] == "comparison"].set_index("part")["text"]
    assert "could not be fitted" in comparison["comparison of the model sets"]
    stack = pd.read_parquet(run_dir / "data" / "landmark_stack.parquet")
    assert (stack["status"] == 1).sum() < 10  # the premise: fewer outcomes than coefficients


def test_the_engine_names_the_break_down_and_the_cause_specific_model(tiny):
    """The competing-event fit of the 60-patient stack is where the old traceback came from."""
    _, run_dir = tiny
    stack = pd.read_parquet(run_dir / "data" / "landmark_stack.parquet")
    with recorded_warnings(), pytest.raises(CoxNumericalError, match="broke down numerically") as info:
        LandmarkSupermodel(B.IMAGING, baseline="stratified", landmark_effects="quadratic").fit(stack)
    assert info.value.cause == "competing event"
    assert str(info.value).startswith("competing event model: ")
    assert info.value.terms  # the coefficients that were running off


def test_run_analysis_on_sixty_patients_finishes_with_clean_notebooks(tmp_path):
    """Once through papermill (about 40 s): the run succeeds and the executed notebooks show no warning."""
    import nbformat

    from riskbench.workflow.runner import run_analysis

    B.write_data(tmp_path, 60)
    result = run_analysis(B.write_config(tmp_path), tmp_path / "out", log=None)
    assert result.report.is_file()
    for path in sorted((tmp_path / "out" / "notebooks").glob("*.ipynb")):
        book = nbformat.read(path, as_version=4)
        stderr = [o.get("text", "") for c in book.cells for o in c.get("outputs", []) if o.get("name") == "stderr"]
        assert stderr == [], f"{path.name}: {stderr}"


def test_collinearity_is_phrased_with_the_model_and_its_keys(tiny):
    """``age`` at a landmark is ``age_at_entry`` plus the landmark time: with the smooth baseline's landmark
    terms the three columns are collinear."""
    _, run_dir = tiny
    stack = pd.read_parquet(run_dir / "data" / "landmark_stack.parquet")
    model = SimpleNamespace(
        name="ages",
        covariates=("age", "age_at_entry"),
        family="landmark_cox",
        params={"baseline": "smooth", "landmark_effects": "none"},
    )
    with pytest.raises(CoxCollinearityError) as info:
        LandmarkSupermodel(["age", "age_at_entry"], baseline="smooth", landmark_effects="none", competing=False).fit(
            stack
        )
    text = describe_fit_failure(model, info.value, stack, None, threshold=10)
    assert "covariates 'age', 'age_at_entry' together with the landmark terms of the smooth baseline" in text
    assert "[[models]] covariates of 'ages'" in text and 'params baseline = "stratified"' in text


def test_separation_is_phrased_as_a_covariate_that_separates(tiny):
    """A 0/1 covariate equal to 1 for exactly the patients with the outcome: the textbook monotone likelihood
    (Heinze & Schemper 2001, Biometrics 57:114-119)."""
    _, run_dir = tiny
    stack = pd.read_parquet(run_dir / "data" / "landmark_stack.parquet")
    stack = stack.assign(flag=(stack["status"] == 1).astype(float))
    with recorded_warnings() as log:
        fit_cox(
            stack[["flag", "age_at_entry"]],
            stack["time"],
            (stack["status"] == 1).astype(float),
            names=["flag", "age_at_entry"],
        )
    assert any(w.kind == "separation" and "flag" in w.terms for w in log)
    assert isinstance(MonotoneLikelihoodWarning("x", ["flag"]).terms, tuple)
    model = SimpleNamespace(name="flagged", covariates=("flag", "age_at_entry"), family="landmark_cox", params={})
    text = describe_warnings(model, log, stack, None, threshold=10)
    assert "covariate(s) 'flag' perfectly separate events from non-events" in text
    assert "run off to infinity" in text
    counts = count_warnings([("flagged", log), ("flagged", [])])
    row = counts[counts["kind"] == "separation"].iloc[0]
    assert (row["fits_warned"], row["fits"]) == (1, 2)


def test_recorded_warnings_sort_by_kind():
    with recorded_warnings() as log:
        warnings.warn("overflow encountered in exp", RuntimeWarning, stacklevel=1)
        warnings.warn(MonotoneLikelihoodWarning("runs off", ["x:s"]), stacklevel=1)
        warnings.warn("something else", UserWarning, stacklevel=1)
    assert [(w.kind, w.terms) for w in log] == [("numerical", ()), ("separation", ("x:s",)), ("other", ())]
    assert np.array_equal(count_warnings([("m", log)])["kind"].to_numpy(), ["separation", "numerical", "other"])


def test_an_ill_conditioned_information_matrix_warns_and_counts_as_numerical():
    """A singular 2x2 matrix has no Cholesky factor (**common practice**: positive definiteness is what a
    Cholesky factorisation needs); the engine falls back to least squares and now says so.

    The solver is private on purpose: no public fit reaches a singular information matrix reliably (the engine
    refuses collinear and constant columns before it gets there), so the fallback is tested directly."""
    from riskbench.models.cox_engine import CoxIllConditionedWarning, _inverse_pd, _solve_pd

    singular = np.array([[1.0, 1.0], [1.0, 1.0]])
    with recorded_warnings() as log:
        _solve_pd(singular, np.array([1.0, 1.0]))
        _inverse_pd(singular)
    assert [w.kind for w in log] == ["numerical", "numerical"]
    with pytest.warns(CoxIllConditionedWarning, match="not positive definite"):
        _inverse_pd(singular)


def test_risks_too_coarse_for_the_smoother_leave_only_the_calibration_measures_missing():
    """Three distinct risks: the 10th, 50th and 90th percentiles coincide, so the restricted cubic spline of
    the smoothed calibration has no knots to place; concordance, AUC and Brier score are still computed."""
    from riskbench.validation.performance import evaluate_risks

    rng = np.random.default_rng(1)
    time = rng.uniform(10, 900, 300)
    status = (rng.uniform(size=300) < 0.3).astype(int)
    risk = np.where(np.arange(300) < 5, 0.1, 0.2)
    risk[-3:] = 0.5
    table = evaluate_risks(time, status, {365.25: risk}).set_index("metric")["value"]
    assert np.isnan(table[["calibration_slope", "ici"]]).all()
    # the observed/expected ratio needs no smoother (Aalen-Johansen over the mean risk): still computed
    assert np.isfinite(table[["harrell_c", "uno_c", "auc", "brier", "oe_ratio"]]).all()


def test_small_numbers_quoted_from_library_messages_are_hidden():
    """Notes leave the machine with the report: a count below the threshold in a quoted message is hidden
    like any small count (**common practice**, the report's suppression rule)."""
    from riskbench.workflow.fit_diagnosis import hide_small_numbers

    text = "only 3 outcomes in rows 12, 40 (x_2 at 0.98, horizon 730.5 days, 1e-9)"
    assert hide_small_numbers(text, 10) == "only <10 outcomes in rows 12, 40 (x_2 at 0.98, horizon 730.5 days, 1e-9)"
    assert hide_small_numbers("0 events", 10) == "0 events"
