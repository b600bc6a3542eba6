"""riskbench.cohort: read sources, check contracts, ledger, counting-process table and landmark stack."""

from riskbench.cohort.cohort import Cohort, build_cohort
from riskbench.cohort.errors import CohortInputError, SpecError
from riskbench.cohort.landmark import landmark_grid
from riskbench.cohort.reasons import RowState
from riskbench.cohort.sources import SourceSpec, TableSource
from riskbench.cohort.spec import CohortSpec, StaticSpec, VariableSpec

__all__ = [
    "Cohort",
    "CohortInputError",
    "CohortSpec",
    "RowState",
    "SourceSpec",
    "SpecError",
    "StaticSpec",
    "TableSource",
    "VariableSpec",
    "build_cohort",
    "landmark_grid",
]
