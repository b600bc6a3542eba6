"""Which estimand each configured model family predicts (what its calibration is judged against).

Outside check: the landmark super-model with a competing model gives the cumulative incidence by the
Aalen–Johansen product-integral of the two cause-specific hazards (Putter, Fiocco & Geskus 2007, Stat Med);
a model of the outcome's cause-specific hazard alone gives 1 − S, the risk without the competing event
(same source, section 3: "1 − KM" of a cause is not its cumulative incidence).
"""

import pytest

from riskbench.models.family_registry import FAMILIES
from riskbench.models.prediction_target import CAUSE_SPECIFIC, CUMULATIVE_INCIDENCE, TARGET_WORDS, prediction_target


def test_landmark_model_with_competing_event_predicts_cumulative_incidence():
    assert prediction_target("landmark_cox", {}) == CUMULATIVE_INCIDENCE
    assert prediction_target("landmark_cox", {"competing": True}) == CUMULATIVE_INCIDENCE
    assert prediction_target("landmark_cox", {"competing": False}) == CAUSE_SPECIFIC


@pytest.mark.parametrize("name", ["time_varying_cox", "cox", "forest"])
def test_cause_specific_families(name):
    assert prediction_target(name) == CAUSE_SPECIFIC


def test_every_family_has_a_target_and_unknown_families_are_refused():
    assert {prediction_target(f) for f in FAMILIES} <= set(TARGET_WORDS)
    with pytest.raises(KeyError):
        prediction_target("no_such_family")


def test_fitted_models_say_what_they_predict():
    """A landmark super-model fitted with its competing model gives a cumulative incidence; without it, and a
    forest, a cause-specific 1 − S; a missing-data wrapper answers for the model it wraps."""
    import numpy as np
    import pandas as pd

    from riskbench.models.forest import SurvivalForest
    from riskbench.models.landmark import LandmarkSupermodel
    from riskbench.models.missing_data import MissingDataModel
    from riskbench.models.prediction_target import fitted_target

    rng = np.random.default_rng(0)
    n = 400
    x = rng.normal(size=n)
    stack = pd.DataFrame(
        {
            "patient_id": np.arange(n),
            "landmark": 0.0,
            "time": rng.uniform(1, 700, n),
            "status": rng.choice([0, 1, 2], n, p=[0.6, 0.25, 0.15]),
            "x": x,
        }
    )
    with_competing = LandmarkSupermodel(covariates=["x"], landmark_effects="none").fit(stack)
    assert fitted_target(with_competing) == CUMULATIVE_INCIDENCE
    without = LandmarkSupermodel(covariates=["x"], landmark_effects="none", competing=False).fit(stack)
    assert fitted_target(without) == CAUSE_SPECIFIC
    forest = SurvivalForest(covariates=["x"], n_estimators=5, random_state=0).fit(stack)
    assert fitted_target(forest) == CAUSE_SPECIFIC
    wrapped = MissingDataModel(
        LandmarkSupermodel(covariates=["x"], landmark_effects="none"), method="complete_cases"
    ).fit(stack)
    assert fitted_target(wrapped) == CUMULATIVE_INCIDENCE
