"""The comparison stage's performance per landmark and pooled, the AUC curve with its band and the decision
curves with bands: tables, figures and notes from :mod:`riskbench.validation.landmark_performance`.

Writes (through the stage's result) ``tables/performance_by_landmark`` (one row per model, landmark and report
horizon, each measure with its interval as text), ``tables/performance_by_landmark_values`` (the same numbers
at full precision, one per row), ``tables/landmark_outcome_counts`` (landmark rows and outcomes per landmark,
small counts hidden), ``tables/auc_by_horizon`` + ``figures/auc_curves`` and ``tables/decision_curve_<h>y`` +
``figures/decision_curve_<h>y``. Every interval comes from one bootstrap that resamples patients (all of a
patient's landmark rows together) and re-evaluates the fixed cross-validated predictions.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
import pandas as pd

from riskbench.metrics.inputs import MetricInputError
from riskbench.report.auc_plot import auc_curve_figure
from riskbench.report.decision_curve_plot import decision_curve_figure
from riskbench.report.outputs import save_figure
from riskbench.report.suppression import coarsen_sequence, complementary_hidden, format_count, round_to_base
from riskbench.time_units import DAYS_PER_YEAR, format_duration
from riskbench.validation.errors import ValidationInputError
from riskbench.validation.landmark_performance import (
    MIN_STABLE_RESAMPLES,
    EvaluationRows,
    LandmarkPerformance,
    landmark_performance,
)
from riskbench.validation.performance import evaluation_time
from riskbench.workflow.comparison_presentation import years_label
from riskbench.workflow.config import AnalysisConfig
from riskbench.workflow.stage_calibration import model_target
from riskbench.workflow.stage_result import StageResult
from riskbench.workflow.stage_validation import bootstrap_resamples, execution, outcomes_before

AddNote = Callable[..., None]  # add(part, text, model="", kind="not computed")

#: Column headings of the measures in ``performance_by_landmark``.
MEASURE_HEADINGS: dict[str, str] = {
    "harrell_c": "Harrell C",
    "uno_c": "Uno C",
    "auc": "AUC",
    "brier": "Brier score",
    "scaled_brier": "scaled Brier (IPA)",
    "oe_ratio": "observed/expected",
}

#: The pooled rows' landmark cell; the section text says that a patient counts at every landmark where at risk
#: and that the intervals resample patients with all their landmark rows.
POOLED_LABEL = "all landmarks pooled"

#: Number of thresholds on a decision curve.
DECISION_POINTS = 50


def decision_thresholds(config: AnalysisConfig) -> np.ndarray:
    """Thresholds of the decision curves: ``[report] decision_threshold_min`` to ``decision_threshold_max``
    (at most 0.99: at 1 the odds are infinite), :data:`DECISION_POINTS` points."""
    low = float(getattr(config.report, "decision_threshold_min", 0.0))
    high = min(float(config.report.decision_threshold_max), 0.99)
    return np.unique(np.round(np.linspace(low, max(high, low), DECISION_POINTS), 4))


def report_landmark_performance(
    config: AnalysisConfig,
    stack: pd.DataFrame,
    horizons: np.ndarray,
    risks: dict[str, np.ndarray],
    report_days: tuple[float, ...],
    result: StageResult,
    add: AddNote,
) -> LandmarkPerformance | None:
    """Compute and write the tables and figures of the module docstring for the rows of ``stack`` (the rows
    every model predicts) and the out-of-fold ``risks`` (model -> rows × ``horizons``); notes through ``add``.

    Returns the computed performance, or None (with a note) when it cannot be computed.
    """
    threshold = config.report.small_count_threshold
    rows = EvaluationRows.from_stack(stack)
    enough = [float(h) for h in horizons if outcomes_before(rows.time, rows.status, h) >= max(threshold, 1)]
    if len(enough) < len(horizons) and enough:
        shown = ", ".join(format_duration(h) for h in horizons if float(h) not in enough)
        add("time-dependent AUC", f"not shown at {shown}: fewer than {threshold} outcomes before them.")
    decisions = bool(getattr(config.report, "decision_curves", True)) and bool(report_days)
    n_boot = bootstrap_resamples(config)
    try:
        perf = landmark_performance(
            rows,
            horizons,
            risks,
            report_days=report_days,
            curve_days=enough,
            decision_days=max(report_days) if decisions else None,
            thresholds=decision_thresholds(config) if decisions else (),
            min_outcomes=threshold,
            targets={m: model_target(config, m) for m in risks},
            n_boot=max(n_boot, 0),
            seed=config.validation.seed,
            config=execution(config),
        )
    except (ValidationInputError, MetricInputError) as exc:
        add("performance per landmark", f"not computed: {exc}")
        return None
    _resample_caution(n_boot, add)
    _unmeasured_notes(perf, rows, report_days, threshold, add)
    _write_tables(perf, rows, report_days, threshold, result)
    _write_figures(perf, result, n_boot)
    return perf


def _resample_caution(n_boot: int, add: AddNote) -> None:
    what = (
        "the intervals of the performance per landmark and pooled, of the AUC curve, of the decision curves "
        "and of the comparison of the model sets"
    )
    if n_boot < 2:
        add(
            "bootstrap intervals",
            f"not computed: {what} need at least 2 bootstrap resamples "
            f"([validation] bootstrap_resamples = {n_boot}); estimates are shown without intervals.",
            kind="switched off",
        )
    elif n_boot < MIN_STABLE_RESAMPLES:
        add(
            "bootstrap intervals",
            f"{what} come from {n_boot} bootstrap resamples; percentile intervals from fewer "
            f"than {MIN_STABLE_RESAMPLES} resamples are unstable (common practice): their limits move from one seed "
            f"to the next. Raise [validation] bootstrap_resamples to {MIN_STABLE_RESAMPLES} or more for results to "
            "report.",
            kind="caution",
        )


def _unmeasured_notes(
    perf: LandmarkPerformance, rows: EvaluationRows, report_days: tuple[float, ...], threshold: int, add: AddNote
) -> None:
    """Notes for the landmarks and horizons left out for too few outcomes, and for measures that are undefined."""
    part = "performance per landmark"
    m = perf.measures
    measured = {(landmark_label(s), float(h)) for s, h in zip(m["landmark_days"], m["horizon_days"])}
    skipped = [
        f"{landmark_label(s)} within {format_duration(h)}"
        for s in [*np.unique(rows.landmark), np.nan]
        for h in report_days
        if (landmark_label(s), float(h)) not in measured
    ]
    if skipped:
        add(
            part,
            f"not computed for {'; '.join(skipped)}: fewer than {threshold} outcomes (the small-count "
            "threshold) among that landmark's rows before the horizon.",
        )
    for model, rows_of in m[m["estimate"].isna()].groupby("model", sort=False):
        cells = sorted(
            {
                f"{landmark_label(s)} within {format_duration(h)} ({metric})"
                for s, h, metric in zip(rows_of["landmark_days"], rows_of["horizon_days"], rows_of["metric"])
            }
        )
        add(
            part,
            f"undefined for {'; '.join(cells)}: no patient of that landmark was followed event-free beyond "
            "the horizon, or no pair of patients could be compared.",
            model,
        )


def landmark_label(days: float) -> str:
    """A landmark for the table: its time since entry in words ("at entry" for 0), or the pooled label for NaN."""
    if np.isnan(days):
        return POOLED_LABEL
    return "at entry" if days == 0 else f"{format_duration(float(days))} after entry"


def performance_table(measures: pd.DataFrame) -> pd.DataFrame:
    """One row per model, landmark and horizon; each measure as three numbers: ``<heading>`` (estimate),
    ``<heading>_low`` and ``<heading>_high`` (2.5% and 97.5% percentiles; NaN without resamples). The report
    shows each triple as "estimate (low–high)" (:mod:`riskbench.report.display_format`)."""
    rows = []
    for (model, landmark, horizon), group in measures.groupby(
        ["model", "landmark_days", "horizon_days"], sort=False, dropna=False
    ):
        row = {
            "model": model,
            "landmark": landmark_label(landmark),
            "horizon_years": horizon / DAYS_PER_YEAR,
            "obtained_by": "cross-validated",
        }
        by = group.set_index("metric")
        for metric, heading in MEASURE_HEADINGS.items():
            values = (
                by.loc[metric, ["estimate", "ci_low", "ci_high"]].to_numpy(float)
                if metric in by.index
                else np.full(3, np.nan)
            )
            row.update({heading: values[0], f"{heading}_low": values[1], f"{heading}_high": values[2]})
        row["bootstrap_resamples"] = int(group["resamples"].min())
        rows.append(row)
    return pd.DataFrame(rows)


def outcome_counts(rows: EvaluationRows, report_days: tuple[float, ...], threshold: int) -> pd.DataFrame:
    """Landmark rows (= patients at risk at that landmark) and outcomes / competing events before each horizon,
    per landmark and pooled, with small counts hidden.

    The per-landmark outcome counts add up to the pooled one, which exceeds the number of patients with the
    outcome: a patient at risk at several landmarks whose outcome falls within the horizon of each counts once
    per landmark. The pooled row also gives the distinct patients. Counts of the same patients at consecutive
    landmarks are rounded when a difference would reveal a few patients; per-landmark outcome counts hide a
    complementary cell when one small count could be derived from the pooled sum.
    """
    landmarks = np.unique(rows.landmark)
    table = pd.DataFrame({"landmark": [landmark_label(s) for s in landmarks] + [POOLED_LABEL]})
    at_risk = [int((rows.landmark == s).sum()) for s in landmarks]
    shown_at_risk = coarsen_sequence(at_risk, threshold)
    exact = all(text.isdigit() for text in shown_at_risk)  # otherwise the total would give a hidden one away
    table["landmark_rows"] = shown_at_risk + [
        format_count(rows.time.size, threshold) if exact else f"~{round_to_base(rows.time.size, threshold)}"
    ]
    table["distinct_patients"] = [""] * len(landmarks) + [format_count(np.unique(rows.patient).size, threshold)]
    for h in report_days:
        label = format_duration(h).replace(" ", "_")
        for code, what in ((1, "outcomes"), (2, "competing_events")):
            if code == 2 and not (rows.status == 2).any():
                continue  # no empty competing-event columns for a cohort without them
            counts = np.array([_events_before(rows, rows.landmark == s, h, code) for s in landmarks], float)
            hidden = complementary_hidden(counts, threshold)
            shown = [
                ("suppressed" if c >= threshold else f"<{threshold}") if hide else str(int(c))
                for c, hide in zip(counts, hidden)
            ]
            table[f"{what}_within_{label}"] = shown + [format_count(counts.sum(), threshold)]
        with_outcome = _before(rows, np.ones(rows.time.size, bool), h, 1)
        patients = np.unique(rows.patient[with_outcome]).size
        repeated = int(with_outcome.sum()) - patients  # outcome rows of patients counted at several landmarks
        patients_shown = (
            f"~{round_to_base(patients, threshold)}"
            if 0 < repeated < threshold <= patients
            else format_count(patients, threshold)
        )  # else the difference would count a few patients
        table[f"patients_with_outcome_within_{label}"] = [""] * len(landmarks) + [patients_shown]
    return table


def _before(rows: EvaluationRows, at: np.ndarray, h: float, code: int) -> np.ndarray:
    return at & (rows.time <= evaluation_time(float(h), rows.time)) & (rows.status == code)


def _events_before(rows: EvaluationRows, at: np.ndarray, h: float, code: int) -> int:
    return int(_before(rows, at, h, code).sum())


def _write_tables(
    perf: LandmarkPerformance, rows: EvaluationRows, report_days: tuple[float, ...], threshold: int, result: StageResult
) -> None:
    if len(perf.measures):
        values = perf.measures.assign(
            landmark=[landmark_label(s) for s in perf.measures["landmark_days"]],
            horizon_years=perf.measures["horizon_days"] / DAYS_PER_YEAR,
        )
        result.tables["performance_by_landmark"] = performance_table(perf.measures)
        result.tables["performance_by_landmark_values"] = values[
            [
                "model",
                "landmark",
                "landmark_days",
                "horizon_years",
                "horizon_days",
                "metric",
                "estimate",
                "ci_low",
                "ci_high",
                "resamples",
            ]
        ]
        result.tables["landmark_outcome_counts"] = outcome_counts(rows, report_days, threshold)
    if len(perf.auc_curve):
        curve = perf.auc_curve.assign(horizon_years=perf.auc_curve["horizon"] / DAYS_PER_YEAR)
        result.tables["auc_by_horizon"] = curve


def _write_figures(perf: LandmarkPerformance, result: StageResult, n_boot: int) -> None:
    band = f"pointwise 95% band from {n_boot} patient-level bootstrap resamples" if n_boot >= 2 else ""
    if len(perf.auc_curve):
        result.figures["auc_curves"] = save_figure(
            auc_curve_figure(perf.auc_curve, band_label=band), result.run_dir, "auc_curves"
        )
    if len(perf.decision_curve) and perf.decision_days is not None:
        days = float(perf.decision_days)
        name = f"decision_curve_{years_label(days)}"
        result.tables[name] = perf.decision_curve
        result.figures[name] = save_figure(
            decision_curve_figure(perf.decision_curve, horizon_days=days, band_label=band), result.run_dir, name
        )
