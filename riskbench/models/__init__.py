"""riskbench.models"""

from riskbench.models.cox_diagnostics import proportional_hazards_test, schoenfeld_residuals
from riskbench.models.cox_engine import CoxFit, CoxInputError, fit_cox
from riskbench.models.cox_model import CoxModel
from riskbench.models.cox_summary import CoxSummary
from riskbench.models.forest import SurvivalForest
from riskbench.models.forest_io import ModelIntegrityError, load_forest, save_forest
from riskbench.models.joint_family import SharedTrajectoryModel
from riskbench.models.joint_model import JointModel
from riskbench.models.landmark import LandmarkSupermodel
from riskbench.models.risk_contract import ModelInputError, RiskModel, cumulative_incidence, risk_curve

__all__ = [
    "CoxFit",
    "CoxInputError",
    "CoxModel",
    "CoxSummary",
    "JointModel",
    "LandmarkSupermodel",
    "ModelInputError",
    "ModelIntegrityError",
    "RiskModel",
    "SharedTrajectoryModel",
    "SurvivalForest",
    "cumulative_incidence",
    "fit_cox",
    "load_forest",
    "proportional_hazards_test",
    "risk_curve",
    "save_forest",
    "schoenfeld_residuals",
]
