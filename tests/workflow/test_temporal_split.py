"""Temporal split inside one analysis (``[validation] develop_before``): the key is checked, the cohort stage
marks each patient's part without writing dates, and the validation stage fits on the earlier patients and
evaluates on the later ones."""

from __future__ import annotations

import importlib.util
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from riskbench.config_problems import Problem
from riskbench.workflow.config import ConfigError, load_config
from riskbench.workflow.model_factory import fit_model
from riskbench.workflow.temporal_parts import DEVELOPS

_SPEC = importlib.util.spec_from_file_location("analysis_builder", Path(__file__).with_name("analysis_builder.py"))
B = importlib.util.module_from_spec(_SPEC)
_SPEC.loader.exec_module(B)

CUTOFF = "2016-01-01"  # the generator's entries are uniform over 2014-01-01 .. 2018-01-01: about half each side


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("temporal")
    B.write_data(folder, 500)
    config = B.write_config(folder, validation={"develop_before": CUTOFF})
    results = B.run_stages(config, folder / "run", ("cohort", "models", "validation"))
    return folder, config, results


def test_key_is_read_and_bad_dates_are_refused(tmp_path):
    B.write_data(tmp_path, 30)
    assert (
        load_config(B.write_config(tmp_path, validation={"develop_before": CUTOFF})).validation.develop_before == CUTOFF
    )
    assert load_config(B.write_config(tmp_path, name="plain")).validation.develop_before is None
    with pytest.raises(ConfigError, match="develop_before"):
        load_config(B.write_config(tmp_path, name="bad", validation={"develop_before": "2016-13-01"}))
    with pytest.raises(ConfigError, match="develop_before") as caught:
        load_config(B.write_config(tmp_path, name="late", validation={"develop_before": "2030-01-01"}), check_data=True)
    assert any(isinstance(p, Problem) and "no patient entered on or after" in p.message for p in caught.value.problems)


def test_cohort_stage_marks_the_parts_and_writes_no_dates(run):
    folder, _, _ = run
    patients = pd.read_parquet(folder / "run" / "data" / "patients.parquet")
    assert patients[DEVELOPS].dtype == bool
    assert not any("date" in c for c in patients.columns)
    source = pd.read_csv(folder / "data" / "patients.csv")
    assert int(patients[DEVELOPS].sum()) == int((pd.to_datetime(source["entry_date"]) < CUTOFF).sum())


def test_models_are_fitted_on_the_earlier_patients_and_scored_on_the_later(run):
    folder, config_path, results = run
    tables = results["validation"].tables
    split = tables["temporal_split"]
    assert list(split["part"].str.split().str[0]) == ["development", "validation"]
    assert CUTOFF in (folder / "run" / "tables" / "temporal_plan.txt").read_text()
    measures = tables["temporal_validation"]
    pooled = measures[
        measures["landmark_years"].isna() & (measures["metric"] == "harrell_c") & (measures["horizon_years"] == 2.0)
    ].set_index("model")
    assert pooled.loc["imaging_clinical", "estimate"] > pooled.loc["clinical", "estimate"] > 0.5

    # the same number by hand: fit on the earlier patients, predict the later ones, Harrell's C at 2 years
    from riskbench.validation.performance import horizon_measures

    config = load_config(config_path)
    data = folder / "run" / "data"
    stack = pd.read_parquet(data / "landmark_stack.parquet")
    cp = pd.read_parquet(data / "counting_process.parquet")
    patients = pd.read_parquet(data / "patients.parquet")
    early = set(patients.loc[patients[DEVELOPS], "patient_id"])
    in_dev = stack["patient_id"].isin(early).to_numpy()
    spec = config.model("imaging_clinical")
    model = fit_model(
        spec, stack[in_dev], cp[cp["patient_id"].isin(early)], seed=config.seed, missing_data=config.missing_data
    )
    later = stack[~in_dev]
    risk = model.predict_risk(later, 730.5)
    by_hand = horizon_measures(later["time"].to_numpy(float), later["status"].to_numpy(int), np.asarray(risk), 730.5)[
        "harrell_c"
    ]
    assert pooled.loc["imaging_clinical", "estimate"] == pytest.approx(by_hand, abs=1e-12)


def test_methods_and_limitations_state_the_split():
    """The comparison stage's methods and limitations drafts say that a temporal validation was done."""
    import dataclasses

    from riskbench.report.methods_text import StudyFacts, limitations_paragraph, methods_paragraphs

    facts = StudyFacts(
        n_patients=800,
        n_outcomes=90,
        n_competing=40,
        n_censored=670,
        follow_up_days=(1000.0, 700.0, 1400.0),
        time_varying=("log nodule volume",),
        static=("age at entry",),
        max_carry_days=365.25,
        lookback_days=180.0,
        landmarks_days=(0.0, 182.625),
        horizon_days=730.5,
        report_horizons_days=(730.5,),
        n_landmark_rows=1500,
        models=(),
        folds=5,
        bootstrap_resamples=200,
        optimism=True,
        reference=None,
        candidate=None,
        threshold=10,
    )
    plain = " ".join(methods_paragraphs(facts)) + limitations_paragraph(facts)
    assert "temporal" not in plain
    split = dataclasses.replace(facts, develop_before=CUTOFF)
    assert f"entered before {CUTOFF}" in " ".join(methods_paragraphs(split))
    assert f"temporal validation on the patients entering from {CUTOFF}" in limitations_paragraph(split)


def test_a_small_part_is_hidden_and_cannot_be_worked_out_from_the_other():
    """The table builder is tested private on purpose (the report shows its output only inside a run): the two
    parts add up to the cohort's totals, which the report
    shows elsewhere, so a part below the threshold hides the other part's count too (complementary
    suppression, common practice)."""
    from riskbench.workflow.temporal_validation import _split_table

    develops = pd.Series([True] * 100 + [False] * 4, index=[f"p{i}" for i in range(104)])
    stack = pd.DataFrame({"patient_id": develops.index, "time": 100.0, "status": [1] * 30 + [0] * 74})
    table = _split_table(stack, develops, 730.5, 10, CUTOFF)
    assert list(table["patients"]) == ["suppressed", "<10"]
    assert list(table["landmark_rows"]) == ["suppressed", "<10"]
    assert list(table["outcomes_within_window"]) == ["30", "0"]  # nothing small to hide
