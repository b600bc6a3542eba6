"""riskbench.validation: patient-grouped resampling, bootstrap optimism, paired comparison of model specs,
reclassification, variable-group importance and parallel execution (joblib or Dask).

Typical use (time in days)::

    source = PrecomputedTables.from_cohort(cohort, landmarks_days, horizon_days)
    clinical = ModelSpec("clinical", ["serum_marker", "age_at_entry", "pack_years"])
    full = ModelSpec("imaging + clinical", [*clinical.covariates, "log_nodule_volume", "suspicion_score"])
    optimism = bootstrap_optimism([clinical, full], source, [365.25, 730.5], n_boot=200, seed=1)
    comparison = compare_specs([clinical, full], source, [730.5], n_boot=200, seed=1,
                               config=ExecutionConfig(n_jobs=2))   # or scheduler_address="tcp://..."

Every resampling step works on patients (all of a patient's rows move together) and every replicate
draws from its own seed spawned from ``seed``, so serial, joblib and Dask runs give identical numbers.
"""

from riskbench.validation.comparison import Comparison, compare_specs
from riskbench.validation.errors import ValidationInputError
from riskbench.validation.external import ExternalValidation, validate_externally
from riskbench.validation.holdout import evaluate_splits, external_validation
from riskbench.validation.importance import leave_group_out, permutation_importance
from riskbench.validation.likelihood_ratio import LikelihoodRatioTest, likelihood_ratio_test, nested_cox_lr_test
from riskbench.validation.model_specs import FAMILIES, ModelSpec, build_estimator, fit_spec
from riskbench.validation.optimism import bootstrap_optimism
from riskbench.validation.parallel import ExecutionConfig, replicate_seeds, run_replicates
from riskbench.validation.performance import evaluate_model, evaluate_risks
from riskbench.validation.plans import (
    Split,
    bootstrap_patient_draw,
    patient_folds,
    patient_outcome_status,
    temporal_split,
)
from riskbench.validation.reclassification import (
    IntegratedDiscrimination,
    NetReclassification,
    integrated_discrimination,
    net_reclassification,
)
from riskbench.validation.sources import CohortDerivation, PrecomputedTables, ValidationTables, draw_tables
from riskbench.validation.updating import UpdatedModel, closed_test, fit_update, update_model, updating_rows

__all__ = [
    "FAMILIES",
    "CohortDerivation",
    "Comparison",
    "ExecutionConfig",
    "ExternalValidation",
    "IntegratedDiscrimination",
    "LikelihoodRatioTest",
    "ModelSpec",
    "NetReclassification",
    "PrecomputedTables",
    "Split",
    "UpdatedModel",
    "ValidationInputError",
    "ValidationTables",
    "bootstrap_optimism",
    "bootstrap_patient_draw",
    "build_estimator",
    "closed_test",
    "compare_specs",
    "draw_tables",
    "evaluate_model",
    "evaluate_risks",
    "evaluate_splits",
    "external_validation",
    "fit_spec",
    "fit_update",
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
    "update_model",
    "updating_rows",
    "validate_externally",
]
