"""The report part of the performance per landmark: outcome counts per landmark (and why they add up to more
than the patients), the caution below 200 resamples (common practice), the decision thresholds from the
configuration, the table of intervals and the figures with bands."""

from __future__ import annotations

import io
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest

from riskbench.report.auc_plot import auc_curve_figure
from riskbench.report.decision_curve_plot import decision_curve_figure
from riskbench.report.display_format import display_table
from riskbench.report.outputs import csv_text
from riskbench.validation.landmark_performance import EvaluationRows

# _resample_caution and _unmeasured_notes are private on purpose: they decide the wording and kind of a note,
# which the public report_landmark_performance only shows after a full bootstrap run.
from riskbench.workflow.landmark_report import (
    POOLED_LABEL,
    _resample_caution,
    decision_thresholds,
    outcome_counts,
    performance_table,
)


def _rows() -> EvaluationRows:
    """40 patients; 30 of them at risk at a second landmark; 12 outcomes within 1 year of landmark 0 of which 11
    also fall within 1 year of landmark 180 (same patients, counted again there)."""
    patient = np.r_[np.arange(40), np.arange(30)]
    landmark = np.r_[np.zeros(40), np.full(30, 180.0)]
    time = np.r_[np.full(12, 300.0), np.full(28, 700.0), np.full(11, 120.0), np.full(19, 520.0)]
    status = np.r_[np.ones(12, int), np.zeros(28, int), np.ones(11, int), np.zeros(19, int)]
    return EvaluationRows(time, status, landmark, patient)


def test_outcome_counts_per_landmark_add_up_to_more_than_the_patients() -> None:
    table = outcome_counts(_rows(), (365.25,), threshold=5).set_index("landmark")
    assert list(table["outcomes_within_1_year"]) == ["12", "11", "23"]
    assert table.loc[POOLED_LABEL, "patients_with_outcome_within_1_year"] == "12"
    assert table.loc[POOLED_LABEL, "distinct_patients"] == "40"
    assert list(table["landmark_rows"]) == ["40", "30", "70"]
    assert not [c for c in table.columns if c.startswith("competing")]  # no competing events: no empty columns


def test_small_outcome_counts_are_hidden_with_a_complementary_cell() -> None:
    table = outcome_counts(_rows(), (365.25,), threshold=12)
    # 11 < 12 is hidden, and since the pooled 23 would give it away, 12 is hidden with it.
    assert list(table["outcomes_within_1_year"]) == ["suppressed", "<12", "23"]


def test_fewer_than_200_resamples_give_a_caution_and_fewer_than_2_no_intervals() -> None:
    said = []
    add = lambda part, text, model="", kind="not computed": said.append((part, text, kind))  # noqa: E731
    _resample_caution(200, add)
    assert said == []
    _resample_caution(20, add)
    assert said[-1][2] == "caution" and "20 bootstrap resamples" in said[-1][1] and "200" in said[-1][1]
    _resample_caution(0, add)
    assert said[-1][2] == "switched off" and "without intervals" in said[-1][1]


def test_decision_thresholds_run_from_the_configured_minimum() -> None:
    config = SimpleNamespace(report=SimpleNamespace(decision_threshold_min=0.0, decision_threshold_max=0.5))
    p = decision_thresholds(config)
    assert p[0] == 0.0 and p[-1] == 0.5 and len(p) == 50
    config.report.decision_threshold_max = 1.0  # odds at 1 are infinite: stop at 0.99
    assert decision_thresholds(config)[-1] == 0.99


def test_table_shows_each_estimate_with_its_interval_and_the_pooled_label() -> None:
    measures = pd.DataFrame(
        {
            "model": "m",
            "landmark_days": [0.0, 0.0, np.nan],
            "horizon_days": 730.5,
            "metric": ["auc", "brier", "auc"],
            "estimate": [0.71234, 0.1, 0.7],
            "ci_low": [0.68, np.nan, 0.69],
            "ci_high": [0.74, np.nan, 0.72],
            "resamples": [50, 0, 50],
        }
    )
    table = performance_table(measures)
    assert list(table["landmark"]) == ["at entry", POOLED_LABEL]
    assert list(table.loc[0, ["AUC", "AUC_low", "AUC_high"]]) == [0.71234, 0.68, 0.74]  # numbers, full precision
    assert table.loc[0, "Brier score"] == 0.1 and np.isnan(table.loc[0, "Brier score_low"])
    assert np.isnan(table.loc[1, "Harrell C"]) and table.loc[0, "horizon_years"] == pytest.approx(2.0)
    shown = display_table(pd.read_csv(io.StringIO(csv_text(table)), dtype=str, keep_default_na=False))
    assert shown.loc[0, "AUC (95% interval)"] == "0.712 (0.680–0.740)"  # the report merges the triple
    assert shown.loc[0, "Brier score"] == "0.100"  # no resamples: the estimate alone


def test_figures_draw_the_bands() -> None:
    auc = pd.DataFrame(
        {
            "model": "m",
            "horizon": [365.25, 730.5],
            "auc": [0.7, 0.72],
            "auc_lower": [0.65, 0.66],
            "auc_upper": [0.75, 0.78],
        }
    )
    fig = auc_curve_figure(auc, band_label="pointwise 95% band")
    assert len(fig.axes[0].collections) == 1 and "pointwise 95% band" in fig.axes[0].get_xlabel()
    curve = pd.DataFrame(
        {
            "threshold": [0.0, 0.1, 0.2],
            "model": [0.1, 0.06, 0.03],
            "model_lower": [0.08, 0.04, 0.01],
            "model_upper": [0.12, 0.08, 0.05],
            "treat_all": [0.1, 0.0, -0.1],
            "treat_all_lower": [0.08, -0.02, -0.12],
            "treat_all_upper": [0.12, 0.02, -0.08],
            "treat_none": 0.0,
        }
    )
    fig = decision_curve_figure(curve, horizon_days=730.5)
    assert len(fig.axes[0].collections) == 2 and "2 years" in fig.axes[0].get_title()
    assert fig.axes[0].get_xlim()[0] == 0.0


def test_the_stage_part_writes_tables_figures_and_the_caution(tmp_path) -> None:
    """The demo configuration (20 resamples) on a simulated stack with competing events: every table and figure
    of the part, bands on the AUC curve, decision curves from threshold 0, and the caution below 200."""
    from pathlib import Path

    from riskbench.workflow.config import load_config
    from riskbench.workflow.landmark_report import report_landmark_performance
    from riskbench.workflow.stage_result import StageResult

    from ..validation.conftest import simulate_stack

    config = load_config(Path(__file__).parents[2] / "configs" / "demo.toml")
    stack = simulate_stack(300, 5, landmarks=(0.0, 182.625, 365.25))[0]
    rng = np.random.default_rng(5)
    stack.loc[(stack["status"] == 0) & (stack["time"] < 600) & (rng.random(len(stack)) < 0.3), "status"] = 2
    horizons = np.array([182.625, 365.25, 730.0])
    rate = (1 / 1500) * np.exp(0.6 * stack["clinical"] + 0.8 * stack["imaging"]).to_numpy()
    risks = {
        "clinical": 1 - np.exp(-(1 / 1500) * np.exp(0.6 * stack["clinical"].to_numpy())[:, None] * horizons),
        "imaging_clinical": 1 - np.exp(-rate[:, None] * horizons),
    }
    said = []
    result = StageResult(stage="comparison", run_dir=tmp_path)
    perf = report_landmark_performance(
        config,
        stack,
        horizons,
        risks,
        (365.25, 730.0),
        result,
        lambda part, text, model="", kind="not computed": said.append((part, kind)),
    )
    assert perf is not None and perf.n_boot == 20
    curve = [n for n in result.tables if n.startswith("decision_curve_")]
    assert len(curve) == 1 and {"auc_curves", curve[0]} <= set(result.figures)
    assert {
        "performance_by_landmark",
        "performance_by_landmark_values",
        "landmark_outcome_counts",
        "auc_by_horizon",
    } <= set(result.tables)
    assert (tmp_path / "figures" / "auc_curves.png").is_file()
    assert result.tables[curve[0]]["threshold"].min() == 0.0
    assert result.tables["auc_by_horizon"][["auc_lower", "auc_upper"]].notna().all().all()
    assert ("bootstrap intervals", "caution") in said
    counts = result.tables["landmark_outcome_counts"]
    assert any(c.startswith("competing_events_within") for c in counts.columns)


def test_landmarks_left_out_for_few_outcomes_get_a_note() -> None:
    from riskbench.validation.landmark_performance import LandmarkPerformance
    from riskbench.workflow.landmark_report import _unmeasured_notes

    measures = pd.DataFrame(
        {
            "model": "m",
            "landmark_days": [0.0, np.nan],
            "horizon_days": 365.25,
            "metric": "auc",
            "estimate": [0.7, np.nan],
            "ci_low": np.nan,
            "ci_high": np.nan,
            "resamples": 0,
        }
    )
    said = []
    _unmeasured_notes(
        LandmarkPerformance(measures, pd.DataFrame(), pd.DataFrame(), 0),
        _rows(),
        (365.25,),
        10,
        lambda part, text, model="", kind="not computed": said.append((text, model)),
    )
    assert "not computed for 180 days after entry within 1 year: fewer than 10" in said[0][0]
    assert said[1][1] == "m" and POOLED_LABEL in said[1][0] and "(auc)" in said[1][0]
