"""Turn ``[[models]]`` entries of the configuration into the validation stage's model specs and fits."""

from __future__ import annotations

from typing import Any

import pandas as pd

from riskbench.validation.model_specs import ModelSpec, fit_spec
from riskbench.validation.sources import ValidationTables
from riskbench.workflow.config import ConfigError, ModelConfig


def model_spec(model: ModelConfig) -> ModelSpec:
    """The :class:`~riskbench.validation.model_specs.ModelSpec` of one ``[[models]]`` entry."""
    return ModelSpec(model.name, tuple(model.covariates), model.family, dict(model.params))


def fit_model(model: ModelConfig, landmark_stack: pd.DataFrame, counting_process: pd.DataFrame | None,
              *, seed: int) -> Any:
    """Fit one configured model (Cox family on the counting-process rows, others on the landmark stack).

    Raises
    ------
    ConfigError
        If the model's covariates are not columns of the tables or its ``params`` are not accepted.
    """
    table = counting_process if model.family == "cox" else landmark_stack
    if table is not None:
        missing = [c for c in model.covariates if c not in table.columns]
        if missing:
            raise ConfigError(
                f"[[models]] {model.name!r}: covariate(s) {missing} are not columns of the cohort tables; "
                f"available: {', '.join(c for c in table.columns if c not in ('patient_id', 'status'))}"
            )
    try:
        return fit_spec(model_spec(model), ValidationTables(landmark_stack, counting_process), seed=seed)
    except TypeError as exc:
        raise ConfigError(f"[[models]] {model.name!r}: params {dict(model.params)} not accepted: {exc}") from None
