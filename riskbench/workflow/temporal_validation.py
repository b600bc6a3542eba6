"""Temporal validation inside one analysis: develop on patients who entered before a date, validate on the others.

With ``[validation] develop_before = "YYYY-MM-DD"`` the cohort stage marks each patient's part (column
``develops`` of ``data/patients``: True when the entry date is before the cutoff; the date itself never leaves
the stage), and the validation stage fits every model on the landmark rows (and counting-process rows) of the
development patients only and evaluates it on the rows of the later patients
(:func:`riskbench.validation.plans.temporal_split` is the same rule on dates). The measures are those of the
per-landmark performance table (Harrell's and Uno's C, AUC, Brier, scaled Brier, observed/expected against each
model's estimand) with percentile intervals from a seeded bootstrap of the later patients
(:func:`riskbench.validation.landmark_performance.landmark_performance`).

Tables: ``temporal_split`` (patients, landmark rows and outcomes within the prediction window in each part, small
counts hidden) and ``temporal_validation`` (measures of every model on the later patients).
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from riskbench.models.fit_warnings import FitWarning
from riskbench.models.prediction_target import prediction_target
from riskbench.report.notes import Note
from riskbench.report.outputs import TABLES, atomic_write_text, load_data
from riskbench.report.suppression import complementary_hidden, format_count, is_suppressed
from riskbench.time_units import DAYS_PER_YEAR
from riskbench.validation.landmark_performance import EvaluationRows, landmark_performance
from riskbench.validation.performance import stack_outcome
from riskbench.workflow.stage_models import fit_recorded
from riskbench.workflow.temporal_parts import DEVELOPS

__all__ = ["temporal_validation"]


def _split_table(stack: pd.DataFrame, develops: pd.Series, window: float, threshold: int, cutoff: str) -> pd.DataFrame:
    time, status = stack_outcome(stack)
    part = stack["patient_id"].map(develops).fillna(False).astype(bool).to_numpy()
    masks = (part, ~part)
    counts = {
        "patients": np.array([int(develops.sum()), int((~develops).sum())]),
        "landmark_rows": np.array([int(m.sum()) for m in masks]),
        "outcomes_within_window": np.array([int(((status == 1) & (time <= window) & m).sum()) for m in masks]),
    }
    table = pd.DataFrame(
        {"part": [f"development (entered before {cutoff})", f"validation (entered on or after {cutoff})"]}
    )
    for column, values in counts.items():
        # the two parts add up to totals shown elsewhere: a hidden part must not follow from the other
        hidden = complementary_hidden(values, threshold)
        table[column] = [
            ("suppressed" if not is_suppressed(v, threshold) else format_count(v, threshold))
            if h
            else format_count(v, threshold)
            for v, h in zip(values, hidden)
        ]
    return table


def _write_plan(run_dir: str | Path, cutoff: str | None) -> None:
    """``tables/temporal_plan.txt``: the sentence the report shows whether or not a split was configured."""
    if cutoff:
        text = (
            f"Split: patients who entered before {cutoff} developed the models; those who entered on or after "
            "it validated them."
        )
    else:
        text = (
            "No temporal split was configured: performance comes from cross-validation and the bootstrap. "
            "Set [validation] develop_before to a date to develop on earlier and validate on later patients."
        )
    atomic_write_text(Path(run_dir) / TABLES / "temporal_plan.txt", text + "\n")


def temporal_validation(
    config: Any,
    run_dir: str | Path,
    tables: Any,
    models: list[Any],
    result: Any,
    fits: list[tuple[str, list[FitWarning]]],
) -> list[Note]:
    """Fit every model on the development patients, evaluate it on the later ones; add the two tables to
    ``result.tables`` and return notes for what could not be done."""
    cutoff = config.validation.develop_before
    _write_plan(run_dir, cutoff)
    if not cutoff:
        return []
    threshold = int(config.report.small_count_threshold)
    patients = load_data(run_dir, "patients")
    if DEVELOPS not in patients.columns:
        return [
            Note(
                "validation",
                "temporal validation",
                "the cohort stage did not mark the development and "
                "validation parts; rerun the run from the cohort stage",
                kind="not computed",
            )
        ]
    develops = pd.Series(patients[DEVELOPS].to_numpy(bool), index=patients["patient_id"])
    stack: pd.DataFrame = tables["landmark_stack"]
    cp: pd.DataFrame = tables["counting_process"]
    window = float(config.landmarks.horizon_days)
    result.tables["temporal_split"] = _split_table(stack, develops, window, threshold, cutoff)
    in_dev = stack["patient_id"].map(develops).fillna(False).astype(bool).to_numpy()
    later = np.flatnonzero(~in_dev)
    dev_ids = set(develops.index[develops.to_numpy()])
    horizons = np.asarray(config.report.horizons_days, float)
    if in_dev.sum() == 0 or later.size == 0:
        return [
            Note(
                "validation",
                "temporal validation",
                f"develop_before = {cutoff} leaves one part empty; choose a date inside the entry dates",
                kind="not computed",
            )
        ]
    risks: dict[str, np.ndarray] = {}
    notes: list[Note] = []
    for spec in models:
        fit = fit_recorded(
            spec,
            stack[in_dev],
            cp[cp["patient_id"].isin(dev_ids)],
            seed=config.seed,
            threshold=threshold,
            missing_data=config.missing_data,
            horizons=horizons,
            predict_stack=stack.iloc[later],
            predict_rows=np.arange(later.size),
            where=f"on the patients who entered before {cutoff}",
        )
        fits.append((spec.name, fit.warnings))
        if fit.failure is not None:
            notes.append(Note("validation", "temporal validation", fit.failure, model=spec.name, kind="fit failed"))
            continue
        assert fit.predictions is not None  # a fit without a failure has predictions
        wide = fit.predictions.pivot(index="row", columns="horizon", values="risk").reindex(
            index=np.arange(later.size), columns=horizons
        )
        risks[spec.name] = wide.to_numpy(float)
    if not risks:
        return notes
    rows = EvaluationRows.from_stack(stack.iloc[later])
    targets = {m.name: prediction_target(m.family, m.params) for m in models if m.name in risks}
    report_days = tuple(float(h) for h in horizons)
    perf = landmark_performance(
        rows,
        report_days,
        risks,
        report_days=report_days,
        targets=targets,
        min_outcomes=max(threshold, 1),
        n_boot=int(config.validation.bootstrap_resamples),
        seed=int(config.validation.seed),
    )
    table = perf.measures.copy()
    table.insert(1, "landmark_years", table.pop("landmark_days") / DAYS_PER_YEAR)
    table.insert(2, "horizon_years", table.pop("horizon_days") / DAYS_PER_YEAR)
    result.tables["temporal_validation"] = table
    return notes
