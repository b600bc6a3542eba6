"""riskbench.demo: the synthetic lung-nodule surveillance cohort with its known truth (clean and messy)."""

from riskbench.demo.generator import (
    DEFAULT_HORIZON_DAYS,
    DEFAULT_LANDMARKS_DAYS,
    GENERATOR_VERSION,
    VARIANTS,
    CohortTruth,
    DemoParameterError,
    SyntheticCohort,
    generate_cohort,
)
from riskbench.demo.parameters import COVARIATES, TRUE_COEFFICIENTS, CohortShift, GeneratorParameters
from riskbench.demo.storage import read_tables, write_cohort

__all__ = [
    "COVARIATES",
    "DEFAULT_HORIZON_DAYS",
    "DEFAULT_LANDMARKS_DAYS",
    "GENERATOR_VERSION",
    "TRUE_COEFFICIENTS",
    "VARIANTS",
    "CohortShift",
    "CohortTruth",
    "DemoParameterError",
    "GeneratorParameters",
    "SyntheticCohort",
    "generate_cohort",
    "read_tables",
    "write_cohort",
]
