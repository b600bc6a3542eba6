"""Stage 2, models: fit every configured model on the whole cohort.

Writes ``tables/coefficients_<model>.csv`` (terms with hazard ratios and 95% intervals, for models that
have coefficients), ``figures/hazard_ratios`` (forest plot of the outcome hazard ratios), and
``data/apparent_predictions.parquet`` (``row, model, horizon, risk``: each landmark-stack row's predicted
risk at every evaluation horizon, horizons in days).
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from matplotlib.figure import Figure

from riskbench.models.risk_contract import risk_curve
from riskbench.report.outputs import load_data, save_data, save_figure, save_table
from riskbench.workflow.config import AnalysisConfig
from riskbench.workflow.model_factory import fit_model
from riskbench.workflow.stage_result import StageResult

DAYS_PER_YEAR = 365.25


def evaluation_horizons(config: AnalysisConfig, n_grid: int = 8) -> np.ndarray:
    """Horizons (days) at which risks are predicted: a grid up to the horizon plus the report horizons."""
    w = config.landmarks.horizon_days
    grid = np.linspace(w / n_grid, w, n_grid)
    return np.unique(np.round(np.r_[grid, config.report.horizons_days], 6))


def predictions_long(model: Any, stack: pd.DataFrame, name: str, horizons: np.ndarray,
                     rows: np.ndarray | None = None) -> pd.DataFrame:
    """Risks of ``model`` for the stack rows at each horizon, as ``row, model, horizon, risk``."""
    curve = np.asarray(risk_curve(model, stack, horizons), dtype=float)
    rows = np.arange(len(stack)) if rows is None else rows
    return pd.DataFrame({
        "row": np.repeat(rows, len(horizons)),
        "model": name,
        "horizon": np.tile(horizons, len(stack)),
        "risk": curve.reshape(-1),
    })


def outcome_hazard_ratios(summary: pd.DataFrame) -> pd.DataFrame:
    """The outcome terms of a model summary (the competing-event model is not reported; see ``summary()``)."""
    if "cause" in summary.columns:
        summary = summary[summary["cause"] == "outcome"]
    return summary.reset_index(drop=True)


def hazard_ratio_figure(tables: dict[str, pd.DataFrame], covariates: dict[str, tuple[str, ...]]) -> Figure:
    """Forest plot of each model's outcome hazard ratios for its covariates (main terms).

    For a landmark super-model the main term of a covariate is its effect at landmark 0 (entry); the
    landmark interactions are in the coefficient tables.
    """
    from riskbench.report.hazard_ratio_plot import hazard_ratio_figure as forest

    main = {}
    for name, table in tables.items():
        rows = table.set_index("term") if "term" in table.columns else table
        main[name] = rows.loc[[c for c in covariates[name] if c in rows.index]]
    return forest(main, title="Outcome hazard ratios (landmark models: at entry)")


def run_models_stage(config: AnalysisConfig, run_dir: str | Path) -> StageResult:
    """Run stage 2 (see the module docstring); return what it wrote."""
    run_dir = Path(run_dir)
    tables = {"counting_process": load_data(run_dir, "counting_process"),
              "landmark_stack": load_data(run_dir, "landmark_stack")}
    stack = tables["landmark_stack"]
    horizons = evaluation_horizons(config)
    result = StageResult(stage="models", run_dir=run_dir)
    predictions = []
    hazard_ratios: dict[str, pd.DataFrame] = {}
    for spec in config.models:
        model = fit_model(spec, stack, tables["counting_process"], seed=config.seed)
        predictions.append(predictions_long(model, stack, spec.name, horizons))
        if hasattr(model, "summary"):
            coefficients = outcome_hazard_ratios(model.summary())
            result.tables[f"coefficients_{spec.name}"] = coefficients
            hazard_ratios[spec.name] = coefficients
        else:
            result.notes.append(f"Model {spec.name!r} ({spec.family}) has no coefficients to show.")
    save_data(pd.concat(predictions, ignore_index=True), run_dir, "apparent_predictions")
    if hazard_ratios:
        covariates = {m.name: m.covariates for m in config.models}
        result.figures["hazard_ratios"] = save_figure(hazard_ratio_figure(hazard_ratios, covariates), run_dir,
                                                      "hazard_ratios")
    for name, table in result.tables.items():
        save_table(table, run_dir, name)
    return result
