"""The calibration part of the comparison stage: one calibration per model and report horizon, its figure and
one row of ``tables/calibration_summary``.

Each model is judged against what it predicts (:func:`riskbench.models.prediction_target.prediction_target`):
a cumulative incidence against the Aalen–Johansen estimate with the competing event, a cause-specific 1 − S
against 1 − Kaplan–Meier with competing events censored. Landmark rows of one patient are one cluster for the
standard errors and the band. The figure and the table read the same :class:`~riskbench.metrics.Calibration`,
so they show one O/E. A model whose calibration cannot be computed gets a note; the others are reported.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from riskbench.metrics.calibration import calibration_at_horizon
from riskbench.models.prediction_target import TARGET_WORDS, prediction_target
from riskbench.report.calibration_plot import calibration_figure
from riskbench.report.notebook_views import CalibrationView
from riskbench.report.outputs import save_figure
from riskbench.report.suppression import format_count
from riskbench.time_units import DAYS_PER_YEAR, format_duration
from riskbench.validation.performance import evaluation_time
from riskbench.workflow.config import AnalysisConfig, ConfigError
from riskbench.workflow.stage_result import ComparisonStageResult, StageResult


def model_target(config: AnalysisConfig, model: str) -> str:
    """The estimand of a configured model (cumulative incidence unless the configuration says otherwise)."""
    try:
        entry = config.model(model)
    except ConfigError:  # predictions of a model no longer in the configuration: assume the default
        return prediction_target("landmark_cox")
    return prediction_target(entry.family, entry.params)


def calibration_part(
    config: AnalysisConfig,
    time: np.ndarray,
    status: np.ndarray,
    patient: np.ndarray,
    risks_at: dict[float, dict[str, np.ndarray]],
    result: StageResult,
    notes: Any,
    file_label: Any,
) -> None:
    """Calibration figures and ``calibration_summary`` for every model at every report horizon.

    Parameters
    ----------
    config
        The analysis configuration (small-count threshold, validation seed, each model's family).
    time, status
        Days from the landmark and 0/1/2 status of the evaluated landmark rows.
    patient
        The patient (pseudonym) of each row: rows of one patient form one cluster.
    risks_at
        Report horizon (days) -> model -> cross-validated risk per row.
    result
        Receives the figures and the table.
    notes
        The stage's notes (``attempt(part, model, compute, ...)`` returns None and notes a failure).
    file_label
        Horizon (days) -> short label for file names.
    """
    threshold = config.report.small_count_threshold
    n_patients = int(pd.unique(patient).size)
    summaries = []
    for h, by_model in risks_at.items():
        for model, risk in by_model.items():
            target = model_target(config, model)
            t_eval = evaluation_time(h, time)
            cal = notes.attempt(
                f"calibration at {format_duration(h)}",
                model,
                calibration_at_horizon,
                time,
                status,
                risk,
                t_eval,
                target=target,
                cluster=patient,
                seed=config.validation.seed,
            )
            if cal is None:
                continue
            name = f"calibration_{model}_{file_label(h)}"
            result.figures[name] = save_figure(
                calibration_figure(
                    cal, risk, model_name=model, min_group_size=threshold, row_unit="landmark rows", horizon_days=h
                ),
                result.run_dir,
                name,
            )
            row = summary_row(model, h, cal, risk.size, n_patients, threshold)
            summaries.append(row)
            if isinstance(result, ComparisonStageResult):  # the calibration object, for the notebook
                result.calibrations[(model, h)] = CalibrationView(cal, risk, model, h, row, threshold)
    if summaries:
        result.tables["calibration_summary"] = pd.DataFrame(summaries)


def summary_row(
    model: str, horizon_days: float, cal: Any, n_rows: int, n_patients: int, threshold: int
) -> dict[str, Any]:
    """One row of ``calibration_summary``: the measures of ``cal`` with what the prediction is and what it
    was compared with."""
    return {
        "model": model,
        "prediction": TARGET_WORDS[cal.target],
        "observed_by": (
            "Aalen–Johansen" if cal.target == "cumulative_incidence" else "1 − Kaplan–Meier, competing events censored"
        ),
        "horizon_years": horizon_days / DAYS_PER_YEAR,
        "landmark_rows": format_count(n_rows, threshold),
        "patients": format_count(n_patients, threshold),
        "observed_risk": cal.observed,
        "mean_predicted": cal.expected,
        "observed_expected": cal.oe_ratio,
        "oe_lower": cal.oe_lower,
        "oe_upper": cal.oe_upper,
        "calibration_intercept": cal.intercept,
        "intercept_se": cal.intercept_se,
        "slope": cal.slope,
        "slope_se": cal.slope_se,
        "ici": cal.ici,
        "e50": cal.e50,
        "e90": cal.e90,
    }
