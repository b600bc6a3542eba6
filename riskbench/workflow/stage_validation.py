"""Stage 3, validation: patient-grouped cross-validation and bootstrap optimism.

Writes ``data/cv_predictions.parquet`` (``row, model, horizon, risk, fold``: every landmark-stack row
predicted by the models fitted without its patient) and the bootstrap-optimism table
``tables/bootstrap_optimism.csv`` when the plan asks for bootstrap replicates.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from riskbench.report.outputs import load_data, save_data, save_table
from riskbench.validation.optimism import bootstrap_optimism
from riskbench.validation.parallel import ExecutionConfig, run_replicates
from riskbench.validation.plans import patient_folds
from riskbench.workflow.config import AnalysisConfig
from riskbench.validation.sources import PrecomputedTables
from riskbench.workflow.model_factory import fit_model, model_spec
from riskbench.workflow.stage_models import evaluation_horizons, predictions_long
from riskbench.workflow.stage_result import StageResult


def execution(config: AnalysisConfig) -> ExecutionConfig:
    """Where resampling replicates run (local processes or the configured Dask scheduler)."""
    return ExecutionConfig(n_jobs=config.validation.n_jobs, scheduler_address=config.validation.dask_address,
                           progress=False)


def _fold_predictions(shared: dict[str, Any], i: int, _seed: np.random.SeedSequence) -> pd.DataFrame:
    """Fit every model without fold ``i``'s patients and predict that fold's landmark rows."""
    split = shared["splits"][i]
    stack: pd.DataFrame = shared["tables"]["landmark_stack"]
    held_out = np.flatnonzero(stack["patient_id"].isin(split.eval_ids).to_numpy())
    cp: pd.DataFrame = shared["tables"]["counting_process"]
    fit_stack = stack[stack["patient_id"].isin(split.fit_ids)]
    fit_cp = cp[cp["patient_id"].isin(split.fit_ids)]
    frames = []
    for spec in shared["models"]:
        model = fit_model(spec, fit_stack, fit_cp, seed=shared["seed"])
        frames.append(predictions_long(model, stack.iloc[held_out], spec.name, shared["horizons"], held_out))
    return pd.concat(frames, ignore_index=True).assign(fold=i + 1)


def cross_validated_predictions(config: AnalysisConfig, tables: dict[str, pd.DataFrame]) -> pd.DataFrame:
    """Out-of-fold risks of every model for every landmark-stack row at the evaluation horizons."""
    stack = tables["landmark_stack"]
    splits = patient_folds(stack["patient_id"].to_numpy(), stack["status"].to_numpy(),
                           config.validation.folds, config.validation.seed)
    shared = {"splits": splits, "tables": tables, "models": config.models, "seed": config.seed,
              "horizons": evaluation_horizons(config)}
    parts = run_replicates(_fold_predictions, shared, config.validation.seed, len(splits), execution(config),
                           description="cross-validation folds")
    return pd.concat(parts, ignore_index=True).sort_values(["model", "row", "horizon"], ignore_index=True)


def run_validation_stage(config: AnalysisConfig, run_dir: str | Path) -> StageResult:
    """Run stage 3 (see the module docstring); return what it wrote."""
    run_dir = Path(run_dir)
    tables = {"counting_process": load_data(run_dir, "counting_process"),
              "landmark_stack": load_data(run_dir, "landmark_stack")}
    result = StageResult(stage="validation", run_dir=run_dir)
    cv = cross_validated_predictions(config, tables)
    save_data(cv, run_dir, "cv_predictions")
    result.notes.append(
        f"{config.validation.folds}-fold cross-validation grouped by patient (seed {config.validation.seed}): "
        f"{cv['row'].nunique()} landmark rows predicted by models fitted without their patient."
    )
    if config.validation.bootstrap_reps > 0:
        optimism = bootstrap_optimism(
            [model_spec(m) for m in config.models],
            PrecomputedTables(tables["landmark_stack"], tables["counting_process"]),
            list(config.report.horizons_days), n_boot=config.validation.bootstrap_reps,
            seed=config.validation.seed, config=execution(config))
        optimism = optimism.rename(columns={"spec": "model"})
        optimism.insert(2, "horizon_years", optimism.pop("horizon_days") / 365.25)
        result.tables["bootstrap_optimism"] = optimism.dropna(axis="columns", how="all")
        result.notes.append(
            f"Bootstrap optimism from {config.validation.bootstrap_reps} resamples of patients "
            "(Harrell, Lee & Mark 1996): corrected = apparent - mean optimism.")
    else:
        result.notes.append("Bootstrap optimism skipped ([validation] bootstrap_reps = 0).")
    for name, table in result.tables.items():
        save_table(table, run_dir, name)
    return result
