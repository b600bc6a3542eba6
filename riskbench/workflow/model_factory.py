"""Turn ``[[models]]`` entries of the configuration into the validation stage's model specs and fits."""

from __future__ import annotations

from typing import Any

import pandas as pd

from riskbench.models.missing_data import MissingDataPlan
from riskbench.validation.model_specs import ModelSpec, fit_spec
from riskbench.validation.sources import ValidationTables
from riskbench.workflow.config import ConfigError, ModelConfig


def missing_data_plan(model: ModelConfig, analysis_plan: object | None = None) -> MissingDataPlan:
    """The missing-data plan of one model: ``[[models]] missing_data`` (a method name) overrides the method
    of ``[missing_data]`` (``analysis_plan``, the configuration's section; default multiple imputation).

    Raises
    ------
    ConfigError
        If a method name or a setting is not accepted (the message names the key).
    """
    try:
        base = MissingDataPlan.coerce(analysis_plan) or MissingDataPlan()
        override = model.missing_data
        return MissingDataPlan.coerce(override, default=base) or base
    except ValueError as exc:
        raise ConfigError(f"[[models]] {model.name!r}: {exc}") from None


def model_spec(model: ModelConfig, analysis_plan: object | None = None) -> ModelSpec:
    """The :class:`~riskbench.validation.model_specs.ModelSpec` of one ``[[models]]`` entry.

    ``analysis_plan`` is the configuration's ``[missing_data]`` section (``config.missing_data``).
    """
    return ModelSpec(
        model.name, tuple(model.covariates), model.family, dict(model.params), missing_data_plan(model, analysis_plan)
    )


def fit_model(
    model: ModelConfig,
    landmark_stack: pd.DataFrame,
    counting_process: pd.DataFrame | None,
    *,
    seed: int,
    missing_data: object | None = None,
) -> Any:
    """Fit one configured model (Cox family on the counting-process rows, others on the landmark stack).

    ``missing_data`` is the configuration's ``[missing_data]`` section (``config.missing_data``); with the
    model's own ``missing_data`` it decides the missing-data method (:func:`missing_data_plan`).

    Raises
    ------
    ConfigError
        If the model's covariates are not columns of the tables or its ``params`` are not accepted.
    """
    table = (
        counting_process if model.family in ("cox", "time_varying_cox", "shared_trajectory_joint") else landmark_stack
    )
    if table is not None:
        missing = [c for c in model.covariates if c not in table.columns]
        if missing:
            raise ConfigError(
                f"[[models]] {model.name!r}: covariate(s) {missing} are not columns of the cohort tables; "
                f"available: {', '.join(c for c in table.columns if c not in ('patient_id', 'status'))}"
            )
    try:
        return fit_spec(model_spec(model, missing_data), ValidationTables(landmark_stack, counting_process), seed=seed)
    except TypeError as exc:
        raise ConfigError(f"[[models]] {model.name!r}: params {dict(model.params)} not accepted: {exc}") from None


def missing_data_tables(config: Any, stack: pd.DataFrame, labels: Any = None) -> dict[str, pd.DataFrame]:
    """The report's missing-data tables for a configuration, small counts hidden.

    ``missing_data``: per covariate of the configured models and landmark, the share missing and the median
    staleness of the observed values (:func:`riskbench.report.missing_table.missing_data_table`);
    ``complete_cases`` (only when a model uses complete cases): the rows each such model drops per landmark.
    ``labels`` (a column -> readable label function) adds a ``label`` column to the first.
    """
    from riskbench.report.missing_table import complete_case_table, missing_data_table

    threshold = config.report.small_count_threshold
    covariates = list(dict.fromkeys(c for m in config.models for c in m.covariates))
    staleness = {}  # a variable's column and its derived columns share the variable's staleness
    for v in config.cohort.variables:
        for suffix in ("", "_change", "_slope_per_year", "_previous"):
            staleness[f"{v.column}{suffix}"] = v.staleness_column
    tables = {"missing_data": missing_data_table(stack, covariates, staleness, threshold=threshold, labels=labels)}
    plan = config.missing_data
    complete = {m.name: m.covariates for m in config.models if missing_data_plan(m, plan).method == "complete_cases"}
    if complete:
        tables["complete_cases"] = complete_case_table(stack, complete, threshold=threshold)
    return tables
