"""The functions the stage notebooks call; each does one stage's work and writes into the run folder.

Stage order: :func:`run_cohort_stage` -> :func:`run_models_stage` -> :func:`run_validation_stage` ->
:func:`run_comparison_stage`. Each reads the previous stages' ``data/*.parquet`` from the same run folder and
returns its result object (what it wrote and what it made: :mod:`riskbench.workflow.stage_result`).
"""

from riskbench.workflow.config import load_config
from riskbench.workflow.stage_cohort import run_cohort_stage
from riskbench.workflow.stage_comparison import run_comparison_stage
from riskbench.workflow.stage_models import run_models_stage
from riskbench.workflow.stage_result import (
    CohortStageResult,
    ComparisonStageResult,
    ModelsStageResult,
    StageResult,
    ValidationStageResult,
    show,
)
from riskbench.workflow.stage_validation import run_validation_stage

STAGE_FUNCTIONS = {
    "cohort": run_cohort_stage,
    "models": run_models_stage,
    "validation": run_validation_stage,
    "comparison": run_comparison_stage,
}

__all__ = [
    "STAGE_FUNCTIONS",
    "CohortStageResult",
    "ComparisonStageResult",
    "ModelsStageResult",
    "StageResult",
    "ValidationStageResult",
    "load_config",
    "run_cohort_stage",
    "run_comparison_stage",
    "run_models_stage",
    "run_validation_stage",
    "show",
]
