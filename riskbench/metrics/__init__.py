"""riskbench.metrics: discrimination, accuracy, calibration and usefulness of predicted risks.

Plain functions of arrays. ``time`` in days (any unit used consistently), ``event`` 0/1 (0/1/2 where a
competing event is supported), ``risk`` = predicted probability of the outcome by the horizon, or any score
where higher means worse.
"""

from riskbench.metrics.auc import AUCResult, auc_cumulative_dynamic, roc_at_horizon
from riskbench.metrics.brier import brier_score, integrated_brier_score
from riskbench.metrics.calibration import Calibration, DCalibration, calibration_at_horizon, d_calibration
from riskbench.metrics.censoring import aalen_johansen, censoring_survival, kaplan_meier
from riskbench.metrics.concordance import (
    Concordance,
    concordance_counting_process,
    concordance_harrell,
    concordance_uno,
)
from riskbench.metrics.inputs import MetricInputError
from riskbench.metrics.net_benefit import net_benefit
from riskbench.metrics.survival_curves import CurveEstimate, aalen_johansen_estimate, kaplan_meier_estimate
from riskbench.metrics.triage import triage_operating_point

__all__ = [
    "AUCResult",
    "Calibration",
    "Concordance",
    "CurveEstimate",
    "DCalibration",
    "MetricInputError",
    "aalen_johansen",
    "aalen_johansen_estimate",
    "auc_cumulative_dynamic",
    "brier_score",
    "calibration_at_horizon",
    "censoring_survival",
    "concordance_counting_process",
    "concordance_harrell",
    "concordance_uno",
    "d_calibration",
    "integrated_brier_score",
    "kaplan_meier",
    "kaplan_meier_estimate",
    "net_benefit",
    "roc_at_horizon",
    "triage_operating_point",
]
