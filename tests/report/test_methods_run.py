"""The reviewer's items on real runs of the stages (demo-generator cohorts, stage functions in-process).

Two cohorts: with competing events and two nested landmark models (the demo's design), and without competing
events with three families (landmark Cox, time-varying Cox, forest). Checks: every item is written and shown,
each model's prediction is named for what it is, the proportional-hazards table covers exactly the Cox models
and the likelihood-ratio test is either computed (nested) or a note (not nested). The refitted Cox models'
own equivalences are checked in tests/models/test_cox_diagnostics.py.
"""

from __future__ import annotations

import importlib.util
from pathlib import Path

import pandas as pd
import pytest

from riskbench.report.methods_text import CAUSE_SPECIFIC, CUMULATIVE_INCIDENCE

_SPEC = importlib.util.spec_from_file_location(
    "analysis_builder", Path(__file__).parents[1] / "workflow" / "analysis_builder.py"
)
B = importlib.util.module_from_spec(_SPEC)
_SPEC.loader.exec_module(B)


def _run(folder: Path, **kwargs) -> Path:
    config = B.write_config(folder, **kwargs)
    B.run_stages(config, folder / "run")
    return folder / "run"


def _model_sentences(run: Path) -> dict[str, str]:
    text = (run / "tables" / "methods.txt").read_text()
    return {s.split("'")[1]: s for s in text.split("Model ")[1:]}


@pytest.fixture(scope="module")
def nested_run(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("nested")
    B.write_data(folder, 300)
    return _run(folder)


@pytest.fixture(scope="module")
def three_family_run(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("three")
    B.write_data(folder, 300, competing=False)
    models = (
        {"name": "clinical", "covariates": B.CLINICAL, "params": {"baseline": "stratified"}},
        {"name": "imaging_tv", "family": "time_varying_cox", "covariates": B.IMAGING},
        {"name": "trees", "family": "forest", "covariates": B.IMAGING, "params": {"n_estimators": 20}},
    )
    return _run(folder, models=models, validation={"candidate": "imaging_tv", "reference": "clinical"})


def test_nested_landmark_models_get_every_item(nested_run):
    tables = nested_run / "tables"
    for name in (
        "sample_size.csv",
        "follow_up.csv",
        "proportional_hazards.csv",
        "likelihood_ratio_test.csv",
        "reporting_items.csv",
        "methods.txt",
        "limitations.txt",
    ):
        assert (tables / name).exists(), name
    lr = pd.read_csv(tables / "likelihood_ratio_test.csv").iloc[0]
    coefficients = {m: len(pd.read_csv(tables / f"coefficients_{m}.csv")) for m in ("clinical", "imaging_clinical")}
    assert lr["df"] == coefficients["imaging_clinical"] - coefficients["clinical"] and lr["p_value"] < 0.05
    ph = pd.read_csv(tables / "proportional_hazards.csv")
    assert set(ph["model"]) == {"clinical", "imaging_clinical"} and (ph["term"] == "GLOBAL").sum() == 2
    sentences = _model_sentences(nested_run)
    assert all(CUMULATIVE_INCIDENCE in s for s in sentences.values())
    size = pd.read_csv(tables / "sample_size.csv")
    assert list(size["criterion"].unique()) == ["i", "ii", "iii"] and set(size["met"]) <= {"yes", "no"}
    limitations = (tables / "limitations.txt").read_text()
    assert "Only 3 bootstrap resamples" in limitations
    page = (nested_run / "report.html").read_text()
    for anchor in ("methods", "sample-size", "model-checks", "limitations", "reporting-items"):
        section = page.split(f'<section id="{anchor}">')[1].split("</section>")[0]
        assert "Not produced in this run" not in section, anchor


def test_three_families_without_competing_events(three_family_run):
    tables = three_family_run / "tables"
    sentences = _model_sentences(three_family_run)
    assert set(sentences) == {"clinical", "imaging_tv", "trees"}
    assert all("no competing events in the cohort" in s for s in sentences.values())
    assert CAUSE_SPECIFIC not in (tables / "limitations.txt").read_text()
    ph = pd.read_csv(tables / "proportional_hazards.csv")
    assert set(ph["model"]) == {"clinical", "imaging_tv"}  # the forest has no hazard ratios to test
    assert set(ph.loc[ph["model"] == "imaging_tv", "time_scale"]) == {"1 - Kaplan-Meier of time since entry"}
    assert not (tables / "likelihood_ratio_test.csv").exists()
    notes = B.notes_of(three_family_run)
    lr_note = notes[notes["part"] == "likelihood-ratio test"]["text"].iloc[0]
    assert "two Cox models of one family" in lr_note
    assert set(pd.read_csv(tables / "sample_size.csv")["model"]) == {"clinical", "imaging_tv"}


def test_no_competing_columns_or_boxes_without_competing_events(three_family_run):
    tables = three_family_run / "tables"
    assert "competing_events" not in pd.read_csv(tables / "landmark_summary.csv").columns
    assert "Competing event" not in set(pd.read_csv(tables / "cohort_flow.csv")["step"])


def test_sample_size_is_not_shown_with_fewer_outcomes_than_the_threshold(nested_run):
    """Rate, mean follow-up and patients would give the hidden number of outcomes away: no table then."""
    from riskbench.workflow.config import load_config
    from riskbench.workflow.review_items import sample_size_table

    config = load_config(nested_run.parent / "analysis.toml")
    patients = pd.DataFrame({"end_days": [400.0] * 50, "end_status": [1] * 9 + [0] * 41})
    assert sample_size_table(config, patients, n_landmarks=5).empty
    patients["end_status"] = [1] * 10 + [0] * 40
    assert len(sample_size_table(config, patients, n_landmarks=5)) == 6  # two models, three criteria
    patients["end_status"] = [1] * 12 + [2] * 3 + [0] * 35  # outcomes hidden so the 3 cannot be worked out
    assert sample_size_table(config, patients, n_landmarks=5).empty
