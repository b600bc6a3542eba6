"""riskbench.validation: patient-grouped resampling, bootstrap optimism, paired comparison of model specs,
reclassification, variable-group importance and parallel execution (joblib or Dask)."""

from riskbench.validation.comparison import Comparison, compare_specs
from riskbench.validation.errors import ValidationInputError
from riskbench.validation.holdout import evaluate_splits, external_validation
from riskbench.validation.importance import leave_group_out, permutation_importance
from riskbench.validation.likelihood_ratio import LikelihoodRatioTest, likelihood_ratio_test, nested_cox_lr_test
from riskbench.validation.model_specs import FAMILIES, ModelSpec, build_estimator, fit_spec
from riskbench.validation.optimism import bootstrap_optimism
from riskbench.validation.parallel import ExecutionConfig, replicate_seeds, run_replicates
from riskbench.validation.performance import evaluate_model, evaluate_risks
from riskbench.validation.plans import Split, bootstrap_patient_draw, patient_folds, patient_outcome_status, temporal_split
from riskbench.validation.reclassification import (
    IntegratedDiscrimination,
    NetReclassification,
    integrated_discrimination,
    net_reclassification,
)
from riskbench.validation.sources import CohortDerivation, PrecomputedTables, ValidationTables, draw_tables

__all__ = [
    "FAMILIES",
    "CohortDerivation",
    "Comparison",
    "ExecutionConfig",
    "IntegratedDiscrimination",
    "LikelihoodRatioTest",
    "ModelSpec",
    "NetReclassification",
    "PrecomputedTables",
    "Split",
    "ValidationInputError",
    "ValidationTables",
    "bootstrap_optimism",
    "bootstrap_patient_draw",
    "build_estimator",
    "compare_specs",
    "draw_tables",
    "evaluate_model",
    "evaluate_risks",
    "evaluate_splits",
    "external_validation",
    "fit_spec",
    "integrated_discrimination",
    "leave_group_out",
    "likelihood_ratio_test",
    "nested_cox_lr_test",
    "net_reclassification",
    "patient_folds",
    "patient_outcome_status",
    "permutation_importance",
    "replicate_seeds",
    "run_replicates",
    "temporal_split",
]
