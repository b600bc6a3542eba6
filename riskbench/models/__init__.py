"""riskbench.models"""

from riskbench.models.forest import SurvivalForest
from riskbench.models.forest_io import ModelIntegrityError, load_forest, save_forest
from riskbench.models.landmark import LandmarkSupermodel
from riskbench.models.risk_contract import ModelInputError, RiskModel, cumulative_incidence, risk_curve
from riskbench.models.cox_engine import CoxFit, CoxInputError, fit_cox
from riskbench.models.cox_model import CoxModel
from riskbench.models.cox_summary import CoxSummary
from riskbench.models.cox_diagnostics import proportional_hazards_test, schoenfeld_residuals
