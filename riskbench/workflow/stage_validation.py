"""Stage 3, validation: patient-grouped cross-validation and bootstrap optimism.

Writes ``data/cv_predictions.parquet`` (``row, model, horizon, risk, fold``: every landmark-stack row
predicted by the models fitted without its patient) and the bootstrap-validation table
``tables/bootstrap_optimism.csv`` when the plan asks for it (``[validation] optimism`` and
``bootstrap_resamples`` > 0): per model, measure and horizon the apparent value, the ``validated`` one and how
it was obtained (``obtained_by``: optimism-corrected for regression models, out-of-bag for forests;
:func:`riskbench.validation.optimism.validated_performance`), the optimism with its interval, the out-of-bag
and .632+ values. Fewer than 200 resamples (common practice) leave a caution note. The same refits also give
the comparison stage's paired bootstrap replicates (``data/paired_replicates*``,
:mod:`riskbench.workflow.shared_replicates`), so stage 4 refits nothing stage 3 already refitted.

Nothing here stops the run for a model that cannot be fitted: a model whose whole-cohort fit failed in
stage 2 is skipped; a model whose fit fails in a cross-validation fold gets no cross-validated predictions
(so no performance in the report); a bootstrap resample whose refit fails is dropped and counted. Each
case, and the fitting warnings of every fold and resample per model, is saved in ``notes/validation.json``.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from riskbench.errors import RiskbenchError
from riskbench.models.fit_warnings import FitWarning, count_warnings, recorded_warnings
from riskbench.models.missing_data import predicted_rows
from riskbench.report.notes import Note, failed_models, save_notes, switched_off
from riskbench.report.outputs import save_data, save_table
from riskbench.time_units import DAYS_PER_YEAR
from riskbench.validation.comparison import comparison_plan
from riskbench.validation.comparison_statistics import risk_matrices
from riskbench.validation.errors import ValidationInputError
from riskbench.validation.model_specs import ModelSpec
from riskbench.validation.optimism import bootstrap_optimism_result, validated_performance
from riskbench.validation.paired import Evaluation
from riskbench.validation.parallel import ExecutionConfig, run_replicates
from riskbench.validation.performance import evaluation_time, stack_outcome
from riskbench.validation.plans import patient_folds
from riskbench.validation.table_files import TableFiles, table_source
from riskbench.workflow.config import AnalysisConfig
from riskbench.workflow.fit_diagnosis import hide_small_numbers, terms_text
from riskbench.workflow.model_factory import model_spec
from riskbench.workflow.shared_replicates import forget_replicates, replicate_key, save_replicates
from riskbench.workflow.stage_data import stage_tables
from riskbench.workflow.stage_models import evaluation_horizons, fit_recorded
from riskbench.workflow.stage_result import StageResult, ValidationStageResult
from riskbench.workflow.temporal_validation import temporal_validation

CV_COLUMNS = ["row", "model", "horizon", "risk", "fold"]


def execution(config: AnalysisConfig) -> ExecutionConfig:
    """Where resampling replicates run (local processes or the configured Dask scheduler)."""
    return ExecutionConfig.from_plan(config.execution)  # [execution]: workers, scheduler, TLS; progress shown


def bootstrap_resamples(config: AnalysisConfig) -> int:
    """``[validation] bootstrap_resamples`` (read through the old name until the new schema is in)."""
    plan = config.validation
    return int(getattr(plan, "bootstrap_resamples", getattr(plan, "bootstrap_reps", 0)))


def outcomes_before(time: np.ndarray, status: np.ndarray, horizon: float) -> int:
    """Landmark rows with the outcome by ``horizon`` (days), as the horizon's measures see them."""
    return int(((time <= evaluation_time(horizon, time)) & (status == 1)).sum())


def measurable_horizons(config: AnalysisConfig, stack: pd.DataFrame) -> tuple[float, ...]:
    """Report horizons (days) with at least the small-count threshold of outcomes before them in ``stack``;
    at the others AUC, Brier score and calibration would rest on a handful of patients (the comparison stage
    notes them)."""
    return outcome_horizons(config, *stack_outcome(stack))


def fitted_models(config: AnalysisConfig, run_dir: Path) -> list[Any]:
    """The ``[[models]]`` entries whose whole-cohort fit succeeded in stage 2."""
    failed = failed_models(run_dir)
    return [m for m in config.models if m.name not in failed]


def _fold_predictions(shared: dict[str, Any], i: int, _seed: np.random.SeedSequence) -> dict[str, Any]:
    """Fit every model without fold ``i``'s patients and predict that fold's landmark rows.

    Returns ``{"frame": predictions, "failures": {model: reason}, "fits": [(model, warnings)]}``.
    """
    split = shared["splits"][i]
    stack: pd.DataFrame = shared["tables"]["landmark_stack"]
    held_out = np.flatnonzero(stack["patient_id"].isin(split.eval_ids).to_numpy())
    cp: pd.DataFrame = shared["tables"]["counting_process"]
    fit_stack = stack[stack["patient_id"].isin(split.fit_ids)]
    fit_cp = cp[cp["patient_id"].isin(split.fit_ids)]
    frames, failures, fits = [], {}, []
    for spec in shared["models"]:
        fit = fit_recorded(
            spec,
            fit_stack,
            fit_cp,
            seed=shared["seed"],
            threshold=shared["threshold"],
            missing_data=shared["missing_data"],
            horizons=shared["horizons"],
            predict_stack=stack.iloc[held_out],
            predict_rows=held_out,
            where=f"in cross-validation fold {i + 1} (without that fold's patients)",
        )
        fits.append((spec.name, fit.warnings))
        if fit.failure is not None:
            failures[spec.name] = fit.failure
        else:
            frames.append(fit.predictions)
    frame = pd.concat(frames, ignore_index=True).assign(fold=i + 1) if frames else pd.DataFrame(columns=CV_COLUMNS)
    return {"frame": frame, "failures": failures, "fits": fits}


def cross_validated_predictions(
    config: AnalysisConfig, tables: Mapping[str, pd.DataFrame], models: list[Any] | None = None
) -> tuple[pd.DataFrame, list[Note], list]:
    """Out-of-fold risks at the evaluation horizons, notes on models that failed in a fold, and fold fits.

    A model whose fit fails in any fold is left out of the predictions (a performance estimate from some
    folds only would not describe the model fitted on every patient).

    Returns
    -------
    (DataFrame, list of Note, list of (model, warnings))
    """
    models = list(config.models) if models is None else models
    stack = tables["landmark_stack"]
    splits = patient_folds(
        stack["patient_id"].to_numpy(), stack["status"].to_numpy(), config.validation.folds, config.validation.seed
    )
    shared = {
        "splits": splits,
        "tables": tables,
        "models": models,
        "seed": config.seed,
        "horizons": evaluation_horizons(config),
        "threshold": config.report.small_count_threshold,
        "missing_data": config.missing_data,
    }
    parts = run_replicates(
        _fold_predictions,
        shared,
        config.validation.seed,
        len(splits),
        execution(config),
        description="cross-validation folds",
    )
    failed: dict[str, list[str]] = {}
    for part in parts:
        for name, reason in part["failures"].items():
            failed.setdefault(name, []).append(reason)
    notes = [
        Note(
            "validation",
            "cross-validation",
            f"the fit failed in {len(reasons)} of {len(splits)} folds, so the model has no cross-validated "
            f"predictions and no performance in the report. First failure: {reasons[0]}",
            model=name,
            kind="fit failed",
        )
        for name, reasons in failed.items()
    ]
    frames = [p["frame"] for p in parts if len(p["frame"])]
    cv = pd.concat(frames, ignore_index=True) if frames else pd.DataFrame(columns=CV_COLUMNS)
    cv = cv[~cv["model"].isin(failed)]
    cv = cv.sort_values(["model", "row", "horizon"], ignore_index=True)
    return cv, notes, [fit for p in parts for fit in p["fits"]]


def failure_notes(
    failures: tuple[tuple[str, str], ...], n_total: int, stage: str, part: str, threshold: int
) -> list[Note]:
    """One note per model: how many of ``n_total`` resamples its refit made fail (by error), and the first reason
    (small numbers in it hidden below ``threshold``).

    ``failures`` as in :attr:`riskbench.validation.comparison.Comparison.failures` (model "" = the measures
    failed after every refit succeeded).
    """
    by_model: dict[str, list[str]] = {}
    for model, reason in failures:
        by_model.setdefault(model, []).append(reason)
    notes = []
    for model, reasons in by_model.items():
        kinds = Counter(r.split(":")[0] for r in reasons)
        listed = ", ".join(f"{k} ×{n}" for k, n in kinds.most_common())
        what = "could not be refitted" if model else "could not be measured"
        notes.append(
            Note(
                stage,
                part,
                f"{len(reasons)} of {n_total} bootstrap resamples {what} and were dropped "
                f"({listed}); the estimates and intervals use the others. First reason: "
                f"{hide_small_numbers(reasons[0][:400], threshold)}",
                model=model,
                kind="resamples dropped",
            )
        )
    return notes


def run_validation_stage(config: AnalysisConfig, run_dir: str | Path) -> ValidationStageResult:
    """Run stage 3 (see the module docstring); return what it wrote."""
    run_dir = Path(run_dir)
    tables = stage_tables(run_dir)  # read once per worker process from data/*.parquet
    result = ValidationStageResult(stage="validation", run_dir=run_dir)
    models = fitted_models(config, run_dir)
    notes: list[Note] = []
    fits: list[tuple[str, list[FitWarning]]] = []
    with recorded_warnings() as stray:
        cv, cv_notes, cv_fits = cross_validated_predictions(config, tables, models)
        notes += cv_notes
        notes += warning_notes(
            count_warnings(cv_fits), "validation", "cross-validation", f"{config.validation.folds} folds"
        )
        fits += cv_fits
        save_data(cv, run_dir, "cv_predictions")
        result.frames["cv_predictions"] = cv
        result.notes.append(
            f"{config.validation.folds}-fold cross-validation grouped by patient (seed {config.validation.seed}): "
            f"{cv['row'].nunique()} landmark rows predicted by models fitted without their patient."
        )
        cv_failed = {n.model for n in cv_notes}
        refitted = [m for m in models if m.name not in cv_failed]
        paired = _paired_plan(config, tables, cv, {m.name for m in refitted})
        notes += _optimism(config, tables, refitted, result, fits, paired)
        notes += temporal_validation(config, run_dir, tables, models, result, fits)  # [validation] develop_before
    if stray:
        fits.append(("(outside the fits)", list(stray)))
    save_notes(run_dir, "validation", notes, count_warnings(fits))
    result.notes.extend(n.sentence() for n in notes)
    for name, table in result.tables.items():
        save_table(table, run_dir, name)
    return result


#: Bootstrap resamples below which the report warns (common practice; Steyerberg et al. 2001 used 100-200).
RECOMMENDED_RESAMPLES = 200

#: Column order of the report's bootstrap-validation table.
_VALIDATED_COLUMNS = [
    "model",
    "metric",
    "horizon_years",
    "threshold",
    "apparent",
    "validated",
    "obtained_by",
    "optimism",
    "optimism_low",
    "optimism_high",
    "out_of_bag",
    "dot632_plus",
    "n_boot",
]


def validated_table(table: pd.DataFrame, families: dict[str, str]) -> pd.DataFrame:
    """The bootstrap-optimism table as the report shows it: per model the validated estimate and how it was
    obtained (:func:`riskbench.validation.optimism.validated_performance`), horizons in years."""
    out = validated_performance(table, families).rename(columns={"spec": "model"})
    out["horizon_years"] = out.pop("horizon_days") / DAYS_PER_YEAR
    return out[_VALIDATED_COLUMNS]


def comparison_specs(config: AnalysisConfig) -> list[ModelSpec] | None:
    """The specs of the paired comparison, reference first (None when none is configured)."""
    try:
        pair = config.comparison
    except RiskbenchError:  # fewer than two models: no comparison
        return None
    if not pair or None in tuple(pair):
        return None
    candidate, reference = pair
    return [model_spec(config.model(name), config.missing_data) for name in (reference, candidate)]


def predicted_outcomes(stack: pd.DataFrame, cv: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """Follow-up and status of the landmark rows every model predicts (complete-case models leave some out):
    the rows the comparison stage measures."""
    time, status = stack_outcome(stack)
    _, risks = risk_matrices(cv, len(stack))
    keep = predicted_rows([risks])
    return time[keep], status[keep]


def outcome_horizons(config: AnalysisConfig, time: np.ndarray, status: np.ndarray) -> tuple[float, ...]:
    """Report horizons (days) with at least the small-count threshold of outcomes before them."""
    least = max(config.report.small_count_threshold, 1)
    return tuple(h for h in config.report.horizons_days if outcomes_before(time, status, h) >= least)


def _paired_plan(
    config: AnalysisConfig, tables: Mapping[str, pd.DataFrame], cv: pd.DataFrame, refitted: set[str]
) -> Evaluation | None:
    """What the comparison stage's paired bootstrap will measure, when the bootstrap optimism refits both of
    its models (:mod:`riskbench.workflow.shared_replicates`); None otherwise."""
    specs = comparison_specs(config)
    if specs is None or bootstrap_resamples(config) < 2 or not len(cv) or any(s.name not in refitted for s in specs):
        return None
    stack = tables["landmark_stack"]
    time, status = predicted_outcomes(stack, cv)
    days = outcome_horizons(config, time, status)
    if not days:
        return None
    try:
        return comparison_plan(specs, list(days), stack, pairs=[(0, 1)])
    except ValidationInputError:
        return None


def _optimism(
    config: AnalysisConfig,
    tables: Mapping[str, pd.DataFrame],
    models: list[Any],
    result: StageResult,
    fits: list,
    paired: Evaluation | None = None,
) -> list[Note]:
    """Bootstrap optimism of ``models`` into ``result.tables`` (and the paired comparison's replicates from
    the same refits, saved for the comparison stage); the notes it leads to."""
    forget_replicates(result.run_dir)
    n_boot = bootstrap_resamples(config)
    if not getattr(config.validation, "optimism", True):
        return [switched_off("validation", "bootstrap optimism", "[validation] optimism")]
    if n_boot <= 0:
        return [
            Note(
                "validation",
                "bootstrap optimism",
                "skipped: [validation] bootstrap_resamples = 0.",
                kind="switched off",
            )
        ]
    if not models:
        return [
            Note(
                "validation",
                "bootstrap optimism",
                "not computed: no model could be fitted in every cross-validation fold.",
            )
        ]
    horizons = measurable_horizons(config, tables["landmark_stack"])
    if not horizons:
        return [
            Note(
                "validation",
                "bootstrap optimism",
                "not computed: no report horizon has enough outcomes "
                "before it ([report] report_horizons, small_count_threshold).",
            )
        ]
    try:
        outcome = bootstrap_optimism_result(
            [model_spec(m, config.missing_data) for m in models],
            table_source(tables),
            list(horizons),
            n_boot=n_boot,
            seed=config.validation.seed,
            config=execution(config),
            paired=paired,
        )
    except ValidationInputError as exc:  # every resample failed (the message gives the first reasons)
        return [Note("validation", "bootstrap optimism", f"not computed: {exc}")]
    if paired is not None and outcome.paired and isinstance(tables, TableFiles):
        stack_file = tables.files["landmark_stack"].sha256
        save_replicates(
            result.run_dir, replicate_key(paired, config.validation.seed, n_boot, stack_file), outcome.paired
        )
    fits += outcome.fit_log
    optimism = validated_table(outcome.table, {m.name: m.family for m in models})
    result.tables["bootstrap_optimism"] = optimism.dropna(axis="columns", how="all")
    result.notes.append(
        f"Bootstrap validation from {n_boot} resamples of patients: optimism-corrected = apparent - mean optimism "
        "(Harrell, Lee & Mark 1996) for regression models; out-of-bag (refits scored on the patients their "
        "resample left out) for forests, whose apparent performance is near perfect by construction."
    )
    notes = failure_notes(
        outcome.failures, n_boot, "validation", "bootstrap optimism", config.report.small_count_threshold
    )
    if n_boot < RECOMMENDED_RESAMPLES:
        notes.append(
            Note(
                "validation",
                "bootstrap optimism",
                f"only {n_boot} bootstrap resamples: fewer than "
                f"{RECOMMENDED_RESAMPLES} (common practice) make the percentile intervals and the validated "
                "estimates vary from run to run; set [validation] bootstrap_resamples = "
                f"{RECOMMENDED_RESAMPLES} for a report others will read.",
                kind="caution",
            )
        )
    notes += warning_notes(outcome.fit_warnings, "validation", "bootstrap optimism", f"{n_boot} bootstrap resamples")
    return notes


_WARNED_OF = {"numerical": "floating-point trouble", "other": "something else"}


def warning_notes(counts: pd.DataFrame, stage: str, part: str, over: str) -> list[Note]:
    """One note per model summarising the fitting warnings of its refits (a ``count_warnings`` table);
    ``over`` says over what, e.g. ``"20 bootstrap resamples"``."""
    notes = []
    for model, rows in counts.groupby("model", sort=False):
        said = "; ".join(
            f"{int(r.fits_warned)} of {int(r.fits)} refits warned of {_WARNED_OF.get(r.kind, r.kind)}"
            + (f" ({terms_text(str(r.terms).split(', '))})" if r.terms else "")
            for r in rows.itertuples(index=False)
        )
        notes.append(Note(stage, part, f"over {over}: {said}.", model=str(model), kind="fitting warnings"))
    return notes
