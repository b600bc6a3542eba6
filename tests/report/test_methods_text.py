"""Methods and limitations paragraphs, the prediction each model makes, and the reporting-items table.

The sentences are checked against the facts they are written from (no external source: these are the
report's own words); the reporting standards' item numbers are TRIPOD 2015 (Collins et al., BMJ
2015;350:g7594) and TRIPOD+AI 2024 (Collins et al., BMJ 2024;385:e078378), **from memory**.
"""

from __future__ import annotations

import dataclasses
import html

import pandas as pd

from riskbench.report.html_report import Section, build_report
from riskbench.report.methods_text import (
    CAUSE_SPECIFIC,
    CUMULATIVE_INCIDENCE,
    ModelFacts,
    StudyFacts,
    limitations_paragraph,
    methods_paragraphs,
    prediction_kind,
)
from riskbench.report.outputs import atomic_write_text, save_table
from riskbench.report.reporting_items import ITEMS, reporting_items_table
from riskbench.time_units import DAYS_PER_YEAR
from riskbench.validation.reclassification import nri_kind


def _facts(**change) -> StudyFacts:
    models = (
        ModelFacts(
            "clinical",
            "landmark_cox",
            ("Age at entry (years)",),
            2,
            "complete_cases",
            10,
            prediction_kind("landmark_cox", {}, True),
        ),
        ModelFacts(
            "imaging",
            "time_varying_cox",
            ("Age at entry (years)", "log nodule volume (log mm3)"),
            2,
            "multiple_imputation",
            7,
            prediction_kind("time_varying_cox", {}, True),
        ),
        ModelFacts(
            "trees", "forest", ("suspicion score",), 0, "missing_indicator", 10, prediction_kind("forest", {}, True)
        ),
    )
    facts = StudyFacts(
        n_patients=800,
        n_outcomes=90,
        n_competing=4,
        n_censored=706,
        follow_up_days=(3 * DAYS_PER_YEAR, 2 * DAYS_PER_YEAR, 4 * DAYS_PER_YEAR),
        time_varying=("log nodule volume (log mm3)",),
        static=("Age at entry (years)",),
        max_carry_days=365.25,
        lookback_days=180.0,
        landmarks_days=(0.0, DAYS_PER_YEAR / 2),
        horizon_days=2 * DAYS_PER_YEAR,
        report_horizons_days=(DAYS_PER_YEAR, 2 * DAYS_PER_YEAR),
        n_landmark_rows=1500,
        models=models,
        folds=5,
        bootstrap_resamples=20,
        optimism=True,
        reference="clinical",
        candidate="imaging",
        threshold=10,
        nri=nri_kind(None),
    )
    return dataclasses.replace(facts, **change)


def test_prediction_kind_follows_family_and_competing_events():
    assert prediction_kind("landmark_cox", {}, True) == CUMULATIVE_INCIDENCE
    assert prediction_kind("landmark_cox", {"competing": False}, True) == CAUSE_SPECIFIC
    assert prediction_kind("time_varying_cox", {}, True) == CAUSE_SPECIFIC
    assert prediction_kind("cox", None, True) == CAUSE_SPECIFIC
    assert prediction_kind("forest", {}, True) == CAUSE_SPECIFIC
    assert "no competing events" in prediction_kind("forest", {}, False)


def test_methods_state_timing_carry_forward_outcome_models_and_validation():
    text = " ".join(methods_paragraphs(_facts()))
    assert "800 included patients" in text and "<10 had the competing event" in text  # small count hidden
    # 800 - 90 - 706 would give the 4 competing events away: the smaller shown count is hidden too
    # (complementary suppression, riskbench.report.suppression.complementary_hidden)
    assert "a suppressed number had the outcome" in text and "706 were censored" in text
    assert "90" not in text.split("Median follow-up")[0]
    shown = " ".join(methods_paragraphs(_facts(n_competing=40, n_censored=670)))
    assert "90 had the outcome" in shown and "40 had the competing event" in shown and "670 were censored" in shown
    assert "3.0 years (interquartile range 2.0 years to 4.0 years)" in text and "reverse Kaplan–Meier" in text
    assert "carried forward for at most 1 year" in text and "180 days before entry" in text
    assert "within 2 years after each landmark time (0, 0.5 years" in text and "1500 landmark rows" in text
    model_sentences = {s.split("'")[1]: s for s in text.split("Model ")[1:]}
    assert CUMULATIVE_INCIDENCE in model_sentences["clinical"] and "complete cases" in model_sentences["clinical"]
    assert CAUSE_SPECIFIC in model_sentences["imaging"] and "7 imputations" in model_sentences["imaging"]
    assert CAUSE_SPECIFIC in model_sentences["trees"] and "outcome coefficients" not in model_sentences["trees"]
    assert "5-fold cross-validation" in text and "20 paired bootstrap resamples" in text
    assert "category-free (continuous) NRI" in text


def test_methods_without_competing_events_or_follow_up_estimate():
    text = " ".join(
        methods_paragraphs(
            _facts(
                n_competing=0,
                follow_up_days=(float("inf"),) * 3,
                max_carry_days=None,
                lookback_days=0.0,
                candidate=None,
            )
        )
    )
    assert "none had a competing event" in text and "could not be estimated" in text
    assert "without a time limit" in text and "before entry" not in text and "paired bootstrap" not in text


def test_limitations_follow_the_facts():
    text = limitations_paragraph(_facts(unmet_sample_size=("imaging",), ph_violations=("clinical",)))
    assert "internal" in text and "correlated" in text
    assert "Only 20 bootstrap resamples" in text and "200" in text
    assert "'imaging' and 'trees' are cause-specific" in text
    assert "Complete-case" in text and "Riley et al. (2020) for 'imaging'" in text and "'clinical' (global p" in text
    quiet = limitations_paragraph(_facts(bootstrap_resamples=500, landmarks_days=(0.0,), models=_facts().models[:1]))
    assert "bootstrap resamples" not in quiet and "correlated" not in quiet and "cause-specific" not in quiet


def test_nri_kind_says_which_nri():
    assert nri_kind(None).startswith("category-free")
    assert nri_kind([0.05, 0.1, 0.2]) == "categorical NRI with risk categories cut at 0.05, 0.1 and 0.2"


def test_reporting_items_status_follows_the_files(tmp_path):
    save_table(pd.DataFrame({"a": [1]}), tmp_path, "sample_size")
    atomic_write_text(tmp_path / "tables" / "methods.txt", "x\n")
    table = reporting_items_table(tmp_path).set_index("item")
    assert table.loc["Sample size", "status"] == "covered" and table.loc["Sample size", "tripod_2015"] == "8"
    assert table.loc["Predictors", "files"] == "methods"
    assert table.loc["Limitations", "status"].startswith("not produced")
    assert table.loc["Funding", "status"].startswith("for the authors")
    assert len(table) == len(ITEMS) and {"10", "26"} <= set(table["tripod_ai_2024"])


def test_text_files_become_escaped_paragraphs(tmp_path):
    atomic_write_text(tmp_path / "tables" / "methods.txt", "Model '<script>x</script>' is fine.\nSecond.\n")
    page = build_report(
        tmp_path, title="t", threshold=10, sections=(Section("methods", "Methods", "intro", texts=("methods",)),)
    ).read_text()
    assert "<script>" not in page and html.escape("'<script>x</script>'") in page
    assert "<p>Second.</p>" in page and "Not produced in this run" not in page


def test_comparison_tables_name_the_nri_type():
    """The comparison's ``nri`` rows are the category-free NRI (riskbench.validation.paired); ``nri_cat`` the
    categorical one: the report's tables say which."""
    from riskbench.report.display_format import display_table

    shown = display_table(pd.DataFrame({"metric": ["nri", "nri_cat"], "estimate": ["0.1", "0.2"]}))
    assert list(shown["Metric"]) == ["NRI (category-free)", "NRI (categorical)"]
