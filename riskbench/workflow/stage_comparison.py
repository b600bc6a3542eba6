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

from pathlib import Path

import numpy as np
import pandas as pd

from riskbench import __version__
from riskbench.models.missing_data import predicted_rows
from riskbench.report.html_report import build_report
from riskbench.report.outputs import load_data, save_table
from riskbench.report.suppression import count_columns, format_count, suppress_counts
from riskbench.metrics.triage import TargetUnreachable
from riskbench.models.fit_warnings import FitWarning, count_warnings, recorded_warnings
from riskbench.report.notes import Note, failed_models, save_notes, switched_off
from riskbench.time_units import DAYS_PER_YEAR, format_duration
from riskbench.validation.comparison import Comparison, compare_specs
from riskbench.validation.errors import ValidationInputError
from riskbench.validation.parallel import execution_statement
from riskbench.validation.performance import evaluate_risks, evaluation_time, stack_outcome
from riskbench.validation.sources import PrecomputedTables
from riskbench.workflow.config import AnalysisConfig
from riskbench.workflow.fit_diagnosis import count_text, hide_small_numbers
from riskbench.workflow.landmark_report import report_landmark_performance
from riskbench.workflow.model_factory import model_spec
from riskbench.workflow.stage_models import FIT_ERRORS
from riskbench.workflow.stage_calibration import calibration_part, model_target
from riskbench.workflow.stage_result import StageResult
from riskbench.workflow.stage_validation import (
    bootstrap_resamples,
    execution,
    failure_notes,
    outcomes_before,
    warning_notes,
)

#: Measures shown in the comparison table (the validation stage computes a few more).
COMPARISON_METRICS: tuple[str, ...] = ("harrell_c", "uno_c", "auc", "brier", "scaled_brier",
                                       "calibration_slope", "ici", "nri", "idi")


def years_label(days: float) -> str:
    """``"2y"`` / ``"0_5y"``: a horizon in days as a short file-name label in years (letters, digits, ``_``)."""
    return f"{days / DAYS_PER_YEAR:g}y".replace(".", "_")


def risk_matrices(cv: pd.DataFrame, n_rows: int) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    """Horizons (days) and, per model, the ``(n_rows, n_horizons)`` out-of-fold risk matrix."""
    horizons = np.sort(cv["horizon"].unique().astype(float))
    out: dict[str, np.ndarray] = {}
    for model, rows in cv.groupby("model", sort=False):
        wide = rows.pivot(index="row", columns="horizon", values="risk").reindex(index=range(n_rows),
                                                                                  columns=horizons)
        if len(set(range(n_rows)) - set(rows["row"])):  # a NaN risk is a complete-case row left unpredicted
            raise ValueError(f"cv_predictions: model {model!r} lacks predictions for some rows; rerun stage 3")
        out[str(model)] = wide.to_numpy(float)
    return horizons, out


def discrimination_table(time: np.ndarray, status: np.ndarray, horizons: np.ndarray,
                         risks: dict[str, np.ndarray], report_days: tuple[float, ...],
                         targets: dict[str, str] | None = None) -> pd.DataFrame:
    """Every measure of :func:`riskbench.validation.performance.evaluate_risks` at the report horizons
    (``targets``: model -> what its risk estimates, default cumulative incidence)."""
    frames = []
    for model, risk in risks.items():
        by_h = {h: risk[:, _column(horizons, h)] for h in report_days}
        frame = evaluate_risks(time, status, by_h, target=(targets or {}).get(model, "cumulative_incidence"))
        frame.insert(0, "model", model)
        frames.append(frame)
    table = pd.concat(frames, ignore_index=True)
    table["horizon_years"] = table.pop("horizon_days") / DAYS_PER_YEAR
    table = table.drop(columns=["threshold"])
    return table.pivot_table(index=["horizon_years", "metric"], columns="model", values="value",
                             sort=False, dropna=False).reset_index()


def _column(horizons: np.ndarray, h: float) -> int:
    i = int(np.argmin(np.abs(horizons - h)))
    if abs(horizons[i] - h) > 1e-3:
        raise ValueError(f"no predictions at horizon {h} days; rerun stages 2 and 3 with this configuration")
    return i


def _interval(estimate: float, low: float, high: float) -> str:
    return f"{estimate:.3f} ({low:.3f} to {high:.3f})"


def comparison_table(comparison: Comparison, reference: str, candidate: str) -> pd.DataFrame:
    """One row per measure and horizon: each model's estimate and the difference, with 95% intervals."""
    perf = comparison.performance
    diff = comparison.differences
    diff = diff[(diff["reference"] == reference) & (diff["candidate"] == candidate)]
    rows = []
    for r in diff.itertuples(index=False):
        if r.metric not in COMPARISON_METRICS or not np.isnan(r.threshold):
            continue
        row = {"metric": r.metric, "horizon_years": round(r.horizon_days / DAYS_PER_YEAR, 4),
               "obtained_by": "out-of-bag bootstrap (mean over resamples)"}
        for name in (reference, candidate):
            p = perf[(perf["spec"] == name) & (perf["metric"] == r.metric) & (perf["horizon_days"] == r.horizon_days)
                     & perf["threshold"].isna()]
            row[name] = _interval(*p[["estimate", "ci_low", "ci_high"]].iloc[0]) if len(p) else ""
        row[f"{candidate} minus {reference}"] = _interval(r.estimate, r.ci_low, r.ci_high)
        row["better_if"] = r.better_if
        row["bootstrap_resamples"] = int(r.n_boot)
        rows.append(row)
    return pd.DataFrame(rows)


class _Notes:
    """The comparison stage's notes, and a way to attempt one part for one model without stopping the run."""

    def __init__(self, threshold: int) -> None:
        self.notes: list[Note] = []
        self.threshold = threshold  # small numbers quoted from a library's message are hidden below it

    def add(self, part: str, text: str, model: str = "", kind: str = "not computed") -> None:
        self.notes.append(Note("comparison", part, text, model=model, kind=kind))

    def attempt(self, part: str, model: str, compute, *args, **kwargs):
        """``compute(*args, **kwargs)``, or None with a note when it fails with a data or numerical error."""
        try:
            return compute(*args, **kwargs)
        except TargetUnreachable as exc:
            reach = (f"the best threshold reaches {exc.best:.3f}" if np.isfinite(exc.best)
                     else "no threshold leaves any patient below it")
            self.add(part, f"not computed: no risk threshold of this model reaches {exc.what} by "
                     f"{format_duration(round(float(exc.horizon), 3))} after the landmark ({reach}); lower the target "
                     "([report] triage_target_npv) or switch the part off ([report] triage = false).", model)
        except FIT_ERRORS as exc:
            self.add(part, f"not computed: {type(exc).__name__}: {hide_small_numbers(str(exc), self.threshold)}",
                     model)
        return None


def _switch(config: AnalysisConfig, name: str) -> bool:
    """A ``[report]`` switch (on unless the configuration says false)."""
    return bool(getattr(config.report, name, True))


def run_comparison_stage(config: AnalysisConfig, run_dir: str | Path) -> StageResult:
    """Run stage 4 (see the module docstring) and write the report; return what it wrote."""
    run_dir = Path(run_dir)
    threshold = config.report.small_count_threshold
    stack = load_data(run_dir, "landmark_stack")
    cp = load_data(run_dir, "counting_process")
    cv = load_data(run_dir, "cv_predictions")
    time, status = stack_outcome(stack)
    result = StageResult(stage="comparison", run_dir=run_dir)
    notes = _Notes(threshold)
    fits: list[tuple[str, list[FitWarning]]] = []
    report_days: tuple[float, ...] = ()
    with recorded_warnings() as stray:
        if not _switch(config, "example_timelines"):
            notes.add("example timelines", "switched off by [report] example_timelines = false.",
                      kind="switched off")
        if len(cv):
            horizons, risks = risk_matrices(cv, len(stack))
            keep = predicted_rows([risks])  # the rows every model predicts (complete cases leave some out)
            if not keep.all():
                left_out = format_count(int((~keep).sum()), threshold)  # small counts hidden
                notes.add("performance", f"{left_out} landmark rows without a prediction from a "
                          "complete-case model are left out of every model's performance (table complete_cases).",
                          kind="not computed")
            time, status, risks = time[keep], status[keep], {m: r[keep] for m, r in risks.items()}
            report_days = _horizons_with_outcomes(config, time, status, threshold, notes)
            _performance(config, time, status, horizons, risks, report_days, result, notes)
            report_landmark_performance(config, stack[keep].reset_index(drop=True), horizons, risks, report_days,
                                        result, notes.add)
            calibration_part(config, time, status, stack["patient_id"].to_numpy()[keep],
                             {h: {m: r[:, _column(horizons, h)] for m, r in risks.items()} for h in report_days},
                             result, notes, years_label)
            _decisions(config, time, status, horizons, risks, report_days, result, notes)
        else:
            notes.add("performance", "not computed: no model has cross-validated predictions (see the notes of "
                      "the models and validation stages).")
        _comparison(config, stack, cp, cv, report_days, result, notes, fits)
    for table_name, table in result.tables.items():
        save_table(table, run_dir, table_name)
    from riskbench.workflow.review_items import write_review_items  # after every other table is written
    from riskbench.workflow.stage_cohort import covariate_labels

    notes.notes.extend(write_review_items(config, run_dir, stack, covariate_labels(config)))
    if stray:
        fits.append(("(outside the fits)", list(stray)))
    save_notes(run_dir, "comparison", notes.notes, count_warnings(fits))
    result.notes.extend(n.sentence() for n in notes.notes)
    build_report(
        run_dir, title=config.report.title, threshold=threshold,
        facts=[("riskbench", __version__), ("configuration", config.path.name if config.path else "(in memory)"),
               ("seed", str(config.seed)), ("validation seed", str(config.validation.seed)),
               ("landmarks", ", ".join(format_duration(s) for s in config.landmarks.landmarks_days)),
               ("prediction window", format_duration(config.landmarks.horizon_days)),
               ("data sent off this machine", execution_statement(config.execution))],
    )
    result.notes.append(f"Report written to {run_dir / 'report.html'}.")
    return result


def _horizons_with_outcomes(config: AnalysisConfig, time: np.ndarray, status: np.ndarray, threshold: int,
                            notes: _Notes) -> tuple[float, ...]:
    """Report horizons with at least ``threshold`` outcomes before them (a note for the others)."""
    kept = []
    for h in config.report.horizons_days:
        n = outcomes_before(time, status, h)
        if n >= max(threshold, 1):
            kept.append(h)
        else:
            notes.add(f"measures at {format_duration(h)}",
                      f"AUC, concordance, Brier score and calibration not computed: {count_text(n, threshold)} "
                      f"outcomes before {format_duration(h)} after the landmark (at least {threshold}, the "
                      "small-count threshold, are needed); choose shorter or longer [report] report_horizons.")
    return tuple(kept)


def _performance(config: AnalysisConfig, time: np.ndarray, status: np.ndarray, horizons: np.ndarray,
                 risks: dict[str, np.ndarray], report_days: tuple[float, ...], result: StageResult,
                 notes: _Notes) -> None:
    """Discrimination table of every model (AUC curve and performance per landmark: ``landmark_report``;
    calibration: ``stage_calibration``)."""
    if report_days:
        parts = [notes.attempt("discrimination", m, discrimination_table, time, status, horizons, {m: r},
                               report_days, {m: model_target(config, m)}) for m, r in risks.items()]
        parts = [p for p in parts if p is not None]
        if parts:
            table = parts[0]
            for other in parts[1:]:
                table = table.merge(other, on=["horizon_years", "metric"], how="outer", sort=False)
            table.insert(2, "obtained_by", f"cross-validated ({config.validation.folds} folds grouped by patient)")
            result.tables["discrimination"] = table


def _decisions(config: AnalysisConfig, time: np.ndarray, status: np.ndarray, horizons: np.ndarray,
               risks: dict[str, np.ndarray], report_days: tuple[float, ...], result: StageResult,
               notes: _Notes) -> None:
    """Decision curves and the triage operating point at the longest report horizon with enough outcomes."""
    from riskbench import metrics

    threshold = config.report.small_count_threshold
    wanted = {"decision curves": _switch(config, "decision_curves"), "triage operating point": _switch(config, "triage")}
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
    column = _column(horizons, main)
    # The decision curves (with bands) are drawn by landmark_report.report_landmark_performance.
    if wanted["triage operating point"]:
        triage = []
        for m, r in risks.items():
            op = notes.attempt("triage operating point", m, metrics.triage_operating_point, time, status,
                               r[:, column], t_main, target_npv=config.report.triage_target_npv,
                               n_boot=max(bootstrap_resamples(config), 20), seed=config.validation.seed)
            if op is not None:
                op.insert(0, "model", m)
                op.insert(1, "horizon_years", main / DAYS_PER_YEAR)
                triage.append(op)
        if triage:
            table = pd.concat(triage, ignore_index=True)
            result.tables["triage_operating_point"] = suppress_counts(table, count_columns(table), threshold)


def _comparison(config: AnalysisConfig, stack: pd.DataFrame, cp: pd.DataFrame, cv: pd.DataFrame,
                report_days: tuple[float, ...], result: StageResult, notes: _Notes, fits: list) -> None:
    """The paired bootstrap comparison of the candidate against the reference at the report horizons with
    enough outcomes (or a note why not)."""
    part = "comparison of the model sets"
    pair = getattr(config, "comparison", None)
    if not pair or None in tuple(pair):
        notes.add(part, "not computed: no candidate and reference models are configured "
                  "([validation] candidate, reference).", kind="switched off")
        return
    candidate, reference = pair
    n_boot = bootstrap_resamples(config)
    if n_boot < 2:
        notes.add(part, f"not computed: it needs at least 2 bootstrap resamples ([validation] bootstrap_resamples "
                  f"= {n_boot}).", kind="switched off")
        return
    failed = failed_models(result.run_dir)
    absent = [m for m in (reference, candidate) if m in failed or m not in set(cv["model"])]
    if absent:
        notes.add(part, f"not computed: model(s) {', '.join(repr(m) for m in absent)} could not be fitted "
                  "(see the notes above).")
        return
    if not report_days:
        notes.add(part, "not computed: no report horizon has enough outcomes before it (see the notes above).")
        return
    specs = [model_spec(config.model(reference), config.missing_data),
             model_spec(config.model(candidate), config.missing_data)]
    try:
        comparison = compare_specs(specs, PrecomputedTables(stack, cp), list(report_days),
                                   n_boot=n_boot, seed=config.validation.seed, pairs=[(0, 1)],
                                   config=execution(config))
    except ValidationInputError as exc:  # every resample failed; the message gives the first reasons
        notes.add(part, f"not computed: {exc}")
        return
    result.tables["model_comparison"] = comparison_table(comparison, reference, candidate)
    fits += comparison.fit_log
    notes.notes.extend(failure_notes(comparison.failures, n_boot, "comparison", part,
                                     config.report.small_count_threshold))
    notes.notes.extend(warning_notes(comparison.fit_warnings, "comparison", part, f"{n_boot} bootstrap resamples"))
