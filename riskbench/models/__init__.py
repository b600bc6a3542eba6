"""riskbench.models"""

from riskbench.models.forest import SurvivalForest
from riskbench.models.forest_io import ModelIntegrityError, load_forest, save_forest
from riskbench.models.landmark import LandmarkSupermodel
from riskbench.models.risk_contract import ModelInputError, RiskModel, cumulative_incidence, risk_curve
