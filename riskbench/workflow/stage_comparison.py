"""Stage 4, comparison and report: performance of the cross-validated predictions, the paired comparison of
the two model sets, and the HTML report.

Reads ``data/landmark_stack``, ``data/counting_process`` and ``data/cv_predictions``. Writes
``tables/auc_by_horizon``, ``tables/discrimination``, ``tables/calibration_summary``,
``tables/decision_curve_<h>y``, ``tables/triage_operating_point``, ``tables/model_comparison``
(CSV), ``figures/auc_curves``, ``figures/calibration_<h>y``, ``figures/decision_curve_<h>y`` (PNG, SVG) and
``report.html``. The outcome is status 1 and the predictions are cumulative incidences; how each measure
treats a competing event (2) is set out in :mod:`riskbench.validation.performance`.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from riskbench import __version__
from riskbench.report.auc_plot import auc_curve_figure
from riskbench.report.html_report import build_report
from riskbench.report.outputs import load_data, save_figure, save_table
from riskbench.report.suppression import count_columns, suppress_counts
from riskbench.validation.comparison import Comparison, compare_specs
from riskbench.validation.performance import evaluate_risks, evaluation_time, stack_outcome
from riskbench.validation.sources import PrecomputedTables
from riskbench.workflow.config import DAYS_PER_YEAR, AnalysisConfig
from riskbench.workflow.model_factory import model_spec
from riskbench.workflow.stage_result import StageResult
from riskbench.workflow.stage_validation import execution

#: Measures shown in the comparison table (the validation stage computes a few more).
COMPARISON_METRICS: tuple[str, ...] = ("harrell_c", "uno_c", "auc", "brier", "scaled_brier",
                                       "calibration_slope", "ici", "nri", "idi")


def years_label(days: float) -> str:
    """``"2y"`` / ``"0_5y"``: a horizon in days as a short file-name label in years (letters, digits, ``_``)."""
    return f"{days / DAYS_PER_YEAR:g}y".replace(".", "_")


def risk_matrices(cv: pd.DataFrame, n_rows: int) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    """Horizons (days) and, per model, the ``(n_rows, n_horizons)`` out-of-fold risk matrix."""
    horizons = np.sort(cv["horizon"].unique())
    out: dict[str, np.ndarray] = {}
    for model, rows in cv.groupby("model", sort=False):
        wide = rows.pivot(index="row", columns="horizon", values="risk").reindex(index=range(n_rows),
                                                                                  columns=horizons)
        if wide.isna().any().any():
            raise ValueError(f"cv_predictions: model {model!r} lacks predictions for some rows; rerun stage 3")
        out[str(model)] = wide.to_numpy(float)
    return horizons, out


def auc_table(time: np.ndarray, status: np.ndarray, horizons: np.ndarray,
              risks: dict[str, np.ndarray]) -> pd.DataFrame:
    """Cumulative/dynamic AUC of each model at each horizon (days); a competing event (status 2) before the
    horizon makes a control."""
    from riskbench.metrics import auc_cumulative_dynamic

    frames = []
    usable = [i for i, h in enumerate(horizons) if ((time <= h) & (status == 1)).any()]
    at = [evaluation_time(float(horizons[i]), time) for i in usable]
    for model, risk in risks.items():
        result = auc_cumulative_dynamic(time, status, risk[:, usable], at)
        frames.append(pd.DataFrame({"model": model, "horizon": horizons[usable],
                                    "auc": np.asarray(result.table["auc"], float)}))
    return pd.concat(frames, ignore_index=True)


def discrimination_table(time: np.ndarray, status: np.ndarray, horizons: np.ndarray,
                         risks: dict[str, np.ndarray], report_days: tuple[float, ...]) -> pd.DataFrame:
    """Every measure of :func:`riskbench.validation.performance.evaluate_risks` at the report horizons."""
    frames = []
    for model, risk in risks.items():
        by_h = {h: risk[:, _column(horizons, h)] for h in report_days}
        frame = evaluate_risks(time, status, by_h)
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
        row = {"metric": r.metric, "horizon_years": round(r.horizon_days / DAYS_PER_YEAR, 4)}
        for name in (reference, candidate):
            p = perf[(perf["spec"] == name) & (perf["metric"] == r.metric) & (perf["horizon_days"] == r.horizon_days)
                     & perf["threshold"].isna()]
            row[name] = _interval(*p[["estimate", "ci_low", "ci_high"]].iloc[0]) if len(p) else ""
        row[f"{candidate} minus {reference}"] = _interval(r.estimate, r.ci_low, r.ci_high)
        row["better_if"] = r.better_if
        row["bootstrap_resamples"] = int(r.n_boot)
        rows.append(row)
    return pd.DataFrame(rows)


def run_comparison_stage(config: AnalysisConfig, run_dir: str | Path) -> StageResult:
    """Run stage 4 (see the module docstring) and write the report; return what it wrote."""
    from riskbench import metrics
    from riskbench.report.calibration_plot import calibration_figure
    from riskbench.report.decision_curve_plot import decision_curve_figure

    run_dir = Path(run_dir)
    threshold = config.report.small_count_threshold
    stack = load_data(run_dir, "landmark_stack")
    cp = load_data(run_dir, "counting_process")
    cv = load_data(run_dir, "cv_predictions")
    time, status = stack_outcome(stack)
    event = (status == 1).astype(int)  # the one-cause smoothed calibration counts competing events as censored
    horizons, risks = risk_matrices(cv, len(stack))
    result = StageResult(stage="comparison", run_dir=run_dir)

    auc = auc_table(time, status, horizons, risks)
    result.tables["auc_by_horizon"] = auc.assign(horizon_years=auc["horizon"] / DAYS_PER_YEAR)
    result.figures["auc_curves"] = save_figure(auc_curve_figure(auc), run_dir, "auc_curves")
    result.tables["discrimination"] = discrimination_table(time, status, horizons, risks,
                                                           config.report.horizons_days)

    # Observed/expected uses status 0/1/2 (observed risk by Aalen-Johansen, comparable with a predicted
    # cumulative incidence); the smoothed curve, slope and ICI are cause-specific (competing events
    # censored), as in riskbench.validation.performance. Net benefit and triage use 0/1/2.
    summaries = []
    for h in config.report.horizons_days:
        t_eval = evaluation_time(h, time)
        for model, risk in risks.items():
            r = risk[:, _column(horizons, h)]
            whole = metrics.calibration_at_horizon(time, status, r, t_eval, n_boot=0)
            cause = metrics.calibration_at_horizon(time, event, r, t_eval, seed=config.validation.seed)
            name = f"calibration_{model}_{years_label(h)}"
            result.figures[name] = save_figure(
                calibration_figure(cause, r, model_name=model, min_group_size=threshold), run_dir, name)
            summaries.append({"model": model, "horizon_years": h / DAYS_PER_YEAR,
                              "observed_expected": whole.oe_ratio, "oe_lower": whole.oe_lower,
                              "oe_upper": whole.oe_upper, "slope": cause.slope, "slope_se": cause.slope_se,
                              "ici": cause.ici, "e50": cause.e50, "e90": cause.e90})
    result.tables["calibration_summary"] = pd.DataFrame(summaries)

    main = max(config.report.horizons_days)
    t_main = evaluation_time(main, time)
    thresholds = np.round(np.linspace(0.01, config.report.decision_threshold_max, 50), 4)
    curves = pd.concat([metrics.net_benefit(time, status, r[:, _column(horizons, main)], t_main, thresholds)
                        .assign(model_name=m) for m, r in risks.items()], ignore_index=True)
    name = f"decision_curve_{years_label(main)}"
    result.tables[name] = curves
    result.figures[name] = save_figure(decision_curve_figure(curves, horizon_days=main), run_dir, name)

    triage = []
    for m, r in risks.items():
        op = metrics.triage_operating_point(time, status, r[:, _column(horizons, main)], t_main,
                                            target_npv=config.report.triage_target_npv,
                                            n_boot=max(config.validation.bootstrap_reps, 20),
                                            seed=config.validation.seed)
        op.insert(0, "model", m)
        op.insert(1, "horizon_years", main / DAYS_PER_YEAR)
        triage.append(op)
    triage_table = pd.concat(triage, ignore_index=True)
    result.tables["triage_operating_point"] = suppress_counts(triage_table, count_columns(triage_table), threshold)

    candidate, reference = config.comparison
    specs = [model_spec(config.model(reference)), model_spec(config.model(candidate))]
    comparison = compare_specs(specs, PrecomputedTables(stack, cp), list(config.report.horizons_days),
                               n_boot=config.validation.bootstrap_reps, seed=config.validation.seed,
                               pairs=[(0, 1)], config=execution(config))
    result.tables["model_comparison"] = comparison_table(comparison, reference, candidate)
    if comparison.n_failed:
        result.notes.append(f"{comparison.n_failed} bootstrap resamples failed to fit and were dropped.")

    for table_name, table in result.tables.items():
        save_table(table, run_dir, table_name)
    build_report(
        run_dir, title=config.report.title, threshold=threshold,
        facts=[("riskbench", __version__), ("configuration", config.path.name if config.path else "(in memory)"),
               ("seed", str(config.seed)), ("validation seed", str(config.validation.seed)),
               ("landmarks (years)", ", ".join(f"{s:g}" for s in config.landmarks.landmarks_years)),
               ("horizon (years)", f"{config.landmarks.horizon_years:g}")],
    )
    result.notes.append(f"Report written to {run_dir / 'report.html'}.")
    return result
