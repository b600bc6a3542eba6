"""riskbench.metrics: discrimination, accuracy, calibration and usefulness of predicted risks.

Plain functions of arrays. ``time`` in days (any unit used consistently), ``event`` 0/1 (0/1/2 where a
competing event is supported), ``risk`` = predicted probability of the outcome by the horizon, or any score
where higher means worse.
"""

from riskbench.metrics.auc import AUCResult, auc_cumulative_dynamic, roc_at_horizon
from riskbench.metrics.brier import brier_score, integrated_brier_score
from riskbench.metrics.censoring import aalen_johansen, censoring_survival, kaplan_meier
from riskbench.metrics.concordance import (
    Concordance,
    concordance_counting_process,
    concordance_harrell,
    concordance_uno,
)
from riskbench.metrics.inputs import MetricInputError

__all__ = [
    "AUCResult",
    "Concordance",
    "MetricInputError",
    "aalen_johansen",
    "auc_cumulative_dynamic",
    "brier_score",
    "censoring_survival",
    "concordance_counting_process",
    "concordance_harrell",
    "concordance_uno",
    "integrated_brier_score",
    "kaplan_meier",
    "roc_at_horizon",
]
