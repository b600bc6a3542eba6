"""Stage 4, comparison and report: performance of the cross-validated predictions, the paired comparison of
the two model sets, and the HTML report.

Reads ``data/landmark_stack``, ``data/counting_process`` and ``data/cv_predictions``. Writes
``tables/auc_by_horizon``, ``tables/discrimination``, ``tables/calibration_summary``,
``tables/decision_curve_<h>y``, ``tables/triage_operating_point``, ``tables/model_comparison``,
``tables/performance_by_landmark`` (+ ``_values``), ``tables/landmark_outcome_counts``
(CSV), ``figures/auc_curves``, ``figures/calibration_<h>y``, ``figures/decision_curve_<h>y`` (PNG, SVG),
``notes/comparison.json`` and ``report.html``. The outcome is status 1 and the predictions are cumulative
incidences; how each measure treats a competing event (2) is set out in :mod:`riskbench.validation.performance`.
The AUC curve, the decision curves and the performance per landmark and pooled, with their patient-level
bootstrap intervals, come from :mod:`riskbench.workflow.landmark_report`.

Every part is optional and none is fatal. Decision curves and triage can be switched off (``[report]
decision_curves``, ``triage``); a horizon with fewer outcomes before it than the small-count threshold gets
no AUC, concordance, Brier score or calibration; a part that fails for one model (a triage target no
threshold reaches, a measure that cannot be computed) becomes a note for that model, and the other models
and parts are reported. The notes of every stage are shown in the report's "Notes" section.
"""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import numpy as np
import pandas as pd

from riskbench.models.fit_warnings import FitWarning, count_warnings, recorded_warnings
from riskbench.models.missing_data import predicted_rows
from riskbench.report.notebook_views import ComparisonView, ConcordanceView
from riskbench.report.notes import failed_models, save_notes, switched_off
from riskbench.report.outputs import load_data, save_table
from riskbench.report.suppression import count_columns, format_count, suppress_counts
from riskbench.time_units import DAYS_PER_YEAR, format_duration
from riskbench.validation.comparison import compare_specs, comparison_plan
from riskbench.validation.comparison_statistics import (
    COMPARISON_METRICS,
    comparison_table,
    discrimination_table,
    prediction_column,
    risk_matrices,
)
from riskbench.validation.errors import ValidationInputError
from riskbench.validation.performance import evaluation_time, stack_outcome
from riskbench.validation.table_files import table_source
from riskbench.workflow.comparison_presentation import StageNotes, write_report, years_label
from riskbench.workflow.config import AnalysisConfig
from riskbench.workflow.fit_diagnosis import count_text
from riskbench.workflow.landmark_report import report_landmark_performance
from riskbench.workflow.shared_replicates import load_replicates, replicate_key
from riskbench.workflow.stage_calibration import calibration_part, model_target
from riskbench.workflow.stage_data import stage_tables
from riskbench.workflow.stage_result import ComparisonStageResult, StageResult
from riskbench.workflow.stage_validation import (
    bootstrap_resamples,
    comparison_specs,
    execution,
    failure_notes,
    outcome_horizons,
    outcomes_before,
    warning_notes,
)

#: Names other modules import from here (the statistics and words now live in their own modules).
__all__ = [
    "COMPARISON_METRICS",
    "comparison_table",
    "discrimination_table",
    "risk_matrices",
    "run_comparison_stage",
    "years_label",
]


def _switch(config: AnalysisConfig, name: str) -> bool:
    """A ``[report]`` switch (on unless the configuration says false)."""
    return bool(getattr(config.report, name, True))


def run_comparison_stage(config: AnalysisConfig, run_dir: str | Path) -> ComparisonStageResult:
    """Run stage 4 (see the module docstring) and write the report; return what it wrote."""
    run_dir = Path(run_dir)
    threshold = config.report.small_count_threshold
    stack = load_data(run_dir, "landmark_stack")
    cp = load_data(run_dir, "counting_process")
    cv = load_data(run_dir, "cv_predictions")
    time, status = stack_outcome(stack)
    result = ComparisonStageResult(stage="comparison", run_dir=run_dir)
    notes = StageNotes(threshold)
    fits: list[tuple[str, list[FitWarning]]] = []
    report_days: tuple[float, ...] = ()
    with recorded_warnings() as stray:
        if not _switch(config, "example_timelines"):
            notes.add("example timelines", "switched off by [report] example_timelines = false.", kind="switched off")
        if len(cv):
            horizons, risks = risk_matrices(cv, len(stack))
            keep = predicted_rows([risks])  # the rows every model predicts (complete cases leave some out)
            if not keep.all():
                left_out = format_count(int((~keep).sum()), threshold)  # small counts hidden
                notes.add(
                    "performance",
                    f"{left_out} landmark rows without a prediction from a "
                    "complete-case model are left out of every model's performance (table complete_cases).",
                    kind="not computed",
                )
            time, status, risks = time[keep], status[keep], {m: r[keep] for m, r in risks.items()}
            report_days = _horizons_with_outcomes(config, time, status, threshold, notes)
            _performance(config, time, status, horizons, risks, report_days, result, notes)
            report_landmark_performance(
                config, stack[keep].reset_index(drop=True), horizons, risks, report_days, result, notes.add
            )
            calibration_part(
                config,
                time,
                status,
                stack["patient_id"].to_numpy()[keep],
                {h: {m: r[:, prediction_column(horizons, h)] for m, r in risks.items()} for h in report_days},
                result,
                notes,
                years_label,
            )
            _decisions(config, time, status, horizons, risks, report_days, result, notes)
        else:
            notes.add(
                "performance",
                "not computed: no model has cross-validated predictions (see the notes of "
                "the models and validation stages).",
            )
        paired = _comparison(config, stack, cp, cv, report_days, result, notes, fits)
    for table_name, table in result.tables.items():
        save_table(table, run_dir, table_name)
    from riskbench.workflow.review_items import write_review_items  # after every other table is written
    from riskbench.workflow.stage_cohort import covariate_labels

    notes.notes.extend(write_review_items(config, run_dir, stack, covariate_labels(config)))
    if stray:
        fits.append(("(outside the fits)", list(stray)))
    save_notes(run_dir, "comparison", notes.notes, count_warnings(fits))
    result.notes.extend(n.sentence() for n in notes.notes)
    write_report(config, run_dir)
    result.notes.append(f"Report written to {run_dir / 'report.html'}.")
    discrimination = result.tables.get("discrimination")
    concordance = (
        None
        if discrimination is None
        else ConcordanceView.from_discrimination(discrimination, str(discrimination["obtained_by"].iloc[0]))
    )
    return replace(result, concordance=concordance, comparison=paired)


def _horizons_with_outcomes(
    config: AnalysisConfig, time: np.ndarray, status: np.ndarray, threshold: int, notes: StageNotes
) -> tuple[float, ...]:
    """Report horizons with at least ``threshold`` outcomes before them (a note for the others)."""
    kept = outcome_horizons(config, time, status)  # as the validation stage computes them for the replicates
    for h in config.report.horizons_days:
        if h not in kept:
            n = outcomes_before(time, status, h)
            notes.add(
                f"measures at {format_duration(h)}",
                f"AUC, concordance, Brier score and calibration not computed: {count_text(n, threshold)} "
                f"outcomes before {format_duration(h)} after the landmark (at least {threshold}, the "
                "small-count threshold, are needed); choose shorter or longer [report] report_horizons.",
            )
    return kept


def _performance(
    config: AnalysisConfig,
    time: np.ndarray,
    status: np.ndarray,
    horizons: np.ndarray,
    risks: dict[str, np.ndarray],
    report_days: tuple[float, ...],
    result: StageResult,
    notes: StageNotes,
) -> None:
    """Discrimination table of every model (AUC curve and performance per landmark: ``landmark_report``;
    calibration: ``stage_calibration``)."""
    if report_days:
        parts = [
            notes.attempt(
                "discrimination",
                m,
                discrimination_table,
                time,
                status,
                horizons,
                {m: r},
                report_days,
                {m: model_target(config, m)},
            )
            for m, r in risks.items()
        ]
        parts = [p for p in parts if p is not None]
        if parts:
            table = parts[0]
            for other in parts[1:]:
                table = table.merge(other, on=["horizon_years", "metric"], how="outer", sort=False)
            table.insert(2, "obtained_by", f"cross-validated ({config.validation.folds} folds grouped by patient)")
            result.tables["discrimination"] = table


def _decisions(
    config: AnalysisConfig,
    time: np.ndarray,
    status: np.ndarray,
    horizons: np.ndarray,
    risks: dict[str, np.ndarray],
    report_days: tuple[float, ...],
    result: StageResult,
    notes: StageNotes,
) -> None:
    """Decision curves and the triage operating point at the longest report horizon with enough outcomes."""
    from riskbench import metrics

    threshold = config.report.small_count_threshold
    wanted = {
        "decision curves": _switch(config, "decision_curves"),
        "triage operating point": _switch(config, "triage"),
    }
    keys = {"decision curves": "[report] decision_curves", "triage operating point": "[report] triage"}
    for part, on in wanted.items():
        if not on:
            notes.notes.append(switched_off("comparison", part, keys[part]))
        elif not report_days:
            notes.add(part, "not computed: no report horizon has enough outcomes before it (see the notes above).")
    if not report_days:
        return
    main = max(report_days)
    t_main = evaluation_time(main, time)
    column = prediction_column(horizons, main)
    # The decision curves (with bands) are drawn by landmark_report.report_landmark_performance.
    if wanted["triage operating point"]:
        triage = []
        for m, r in risks.items():
            op = notes.attempt(
                "triage operating point",
                m,
                metrics.triage_operating_point,
                time,
                status,
                r[:, column],
                t_main,
                target_npv=config.report.triage_target_npv,
                n_boot=max(bootstrap_resamples(config), 20),
                seed=config.validation.seed,
            )
            if op is not None:
                op.insert(0, "model", m)
                op.insert(1, "horizon_years", main / DAYS_PER_YEAR)
                triage.append(op)
        if triage:
            table = pd.concat(triage, ignore_index=True)
            result.tables["triage_operating_point"] = suppress_counts(table, count_columns(table), threshold)


def _comparison(
    config: AnalysisConfig,
    stack: pd.DataFrame,
    cp: pd.DataFrame,
    cv: pd.DataFrame,
    report_days: tuple[float, ...],
    result: StageResult,
    notes: StageNotes,
    fits: list,
) -> ComparisonView | None:
    """The paired bootstrap comparison of the candidate against the reference at the report horizons with
    enough outcomes (or a note why not); its view for the notebook."""
    part = "comparison of the model sets"
    pair = getattr(config, "comparison", None)
    if not pair or None in tuple(pair):
        notes.add(
            part,
            "not computed: no candidate and reference models are configured ([validation] candidate, reference).",
            kind="switched off",
        )
        return None
    candidate, reference = pair
    n_boot = bootstrap_resamples(config)
    if n_boot < 2:
        notes.add(
            part,
            f"not computed: it needs at least 2 bootstrap resamples ([validation] bootstrap_resamples = {n_boot}).",
            kind="switched off",
        )
        return None
    failed = failed_models(result.run_dir)
    absent = [m for m in (reference, candidate) if m in failed or m not in set(cv["model"])]
    if absent:
        notes.add(
            part,
            f"not computed: model(s) {', '.join(repr(m) for m in absent)} could not be fitted (see the notes above).",
        )
        return None
    if not report_days:
        notes.add(part, "not computed: no report horizon has enough outcomes before it (see the notes above).")
        return None
    specs = comparison_specs(config) or []
    tables = stage_tables(result.run_dir)
    source = table_source(tables)  # workers read Parquet
    try:
        plan = comparison_plan(specs, list(report_days), source.full_tables().landmark_stack, pairs=[(0, 1)])
        key = replicate_key(plan, config.validation.seed, n_boot, tables.files["landmark_stack"].sha256)
        comparison = compare_specs(
            specs,
            source,
            list(report_days),
            n_boot=n_boot,
            seed=config.validation.seed,
            pairs=[(0, 1)],
            config=execution(config),
            known=load_replicates(result.run_dir, key),  # measured by the validation stage from its refits
        )
    except ValidationInputError as exc:  # every resample failed; the message gives the first reasons
        notes.add(part, f"not computed: {exc}")
        return None
    table = comparison_table(comparison, reference, candidate)
    result.tables["model_comparison"] = table
    fits += comparison.fit_log
    notes.notes.extend(
        failure_notes(comparison.failures, n_boot, "comparison", part, config.report.small_count_threshold)
    )
    notes.notes.extend(warning_notes(comparison.fit_warnings, "comparison", part, f"{n_boot} bootstrap resamples"))
    return ComparisonView(comparison, table, reference, candidate)
