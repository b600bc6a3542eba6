"""Bootstrap validation that holds for a forest: out-of-bag and .632+ estimates (Efron & Tibshirani 1997,
J Am Stat Assoc 92:548-560), and which estimate the report calls validated.

The .632+ rule is checked against the paper's eq. 32 in its published form,
Err.632+ = Err.632 + (Err1' − err)·(0.368·0.632·R')/(1 − 0.368·R') with Err.632 = 0.368·err + 0.632·Err1',
which our implementation writes as the weighted mean (1 − w)·err + w·Err1' with w = 0.632/(1 − 0.368·R').
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from riskbench.cohort import build_cohort
from riskbench.demo import COVARIATES, generate_cohort
from riskbench.demo.cohort_spec import demo_cohort_spec
from riskbench.metrics import concordance_harrell
from riskbench.validation import ModelSpec, PrecomputedTables, fit_spec
from riskbench.validation.optimism import bootstrap_optimism, dot632_plus, validated_performance
from riskbench.validation.performance import evaluation_time, predict_horizons, stack_outcome
from riskbench.validation.plans import patient_folds


def _published_632_plus(c_app: float, c_oob: float, gamma: float = 0.5) -> float:
    err, err1 = 1 - c_app, min(1 - c_oob, gamma)
    r = (err1 - err) / (gamma - err) if (err1 > err and gamma > err) else 0.0
    err632 = 0.368 * err + 0.632 * err1
    return 1 - (err632 + (err1 - err) * (0.368 * 0.632 * r) / (1 - 0.368 * r))


@settings(max_examples=60, deadline=None)
@given(st.floats(0.3, 1.0), st.floats(0.3, 1.0))
def test_632_plus_equals_the_published_formula_and_lies_between_oob_and_apparent(c_app, c_oob):
    ours = float(dot632_plus(np.array([c_app]), np.array([c_oob]))[0])
    assert ours == pytest.approx(_published_632_plus(c_app, c_oob), abs=1e-12)
    if c_oob <= c_app and c_oob >= 0.5:
        assert c_oob - 1e-12 <= ours <= c_app + 1e-12


def test_632_plus_limits():
    """No overfit (out-of-bag = apparent): the estimate is that value; out-of-bag no better than chance: the
    relative overfit R is 1, w = 1 and the estimate is the no-information value 0.5."""
    np.testing.assert_allclose(dot632_plus([0.8, 0.95], [0.8, 0.45]), [0.8, 0.5])
    assert np.isnan(dot632_plus([np.nan], [0.7])[0])


def test_validated_estimate_follows_the_family():
    table = pd.DataFrame(
        {
            "spec": ["cox", "cox", "forest", "forest"],
            "metric": ["harrell_c", "brier"] * 2,
            "apparent": [0.8, 0.1, 0.97, 0.02],
            "corrected": [0.78, 0.11, 0.9, 0.03],
            "out_of_bag": [0.77, 0.12, 0.79, 0.031],
            "dot632_plus": [0.785, np.nan, 0.83, np.nan],
        }
    )
    out = validated_performance(table, {"cox": "landmark_cox", "forest": "forest"})
    assert out["validated"].tolist() == [0.78, 0.11, 0.79, 0.031]
    assert out["obtained_by"].tolist() == [
        "optimism-corrected bootstrap",
        "optimism-corrected bootstrap",
        "out-of-bag bootstrap",
        "out-of-bag bootstrap",
    ]


LANDMARKS = (0.0, 182.625, 365.25)
HORIZON = 730.5


def _tables(n: int, seed: int) -> PrecomputedTables:
    c = generate_cohort(n, seed, n_risk_paths=0)
    return PrecomputedTables.from_cohort(
        build_cohort(c.patients, c.measurements, c.outcomes, demo_cohort_spec()),
        LANDMARKS,
        HORIZON,
        with_counting_process=False,
    )


def _harrell(stack: pd.DataFrame, risk: np.ndarray) -> float:
    time, status = stack_outcome(stack)
    t = evaluation_time(HORIZON, time)
    return concordance_harrell(np.minimum(time, t), np.where(time <= t, status, 0), risk).estimate


@pytest.fixture(scope="module")
def forest_validation():
    """A 50-tree forest on the demo generator's true covariates: 3000 patients (8692 landmark rows) for
    development, 5 bootstrap resamples, 5-fold cross-validation grouped by patient, and a fresh cohort of
    4000 patients from the generator with another seed. About a minute on one core."""
    development = _tables(3000, 101)
    stack = development.full_tables().landmark_stack
    spec = ModelSpec("forest", list(COVARIATES), family="forest", params={"n_estimators": 50, "random_state": 1})
    table = validated_performance(
        bootstrap_optimism(spec, development, [HORIZON], n_boot=5, seed=3), {"forest": "forest"}
    )
    row = table.set_index("metric").loc["harrell_c"]
    risk = np.full(len(stack), np.nan)
    for split in patient_folds(stack["patient_id"].to_numpy(), stack["status"].to_numpy(), 5, 7):
        fit_rows = stack["patient_id"].isin(split.fit_ids).to_numpy()
        model = fit_spec(spec, PrecomputedTables(stack[fit_rows], None).full_tables(), seed=1)
        risk[~fit_rows] = predict_horizons(model, stack[~fit_rows], [HORIZON])[HORIZON]
    model = fit_spec(spec, development.full_tables(), seed=1)
    fresh = _tables(4000, 202).full_tables().landmark_stack
    return row, _harrell(stack, risk), _harrell(fresh, predict_horizons(model, fresh, [HORIZON])[HORIZON])


def test_forest_validated_c_is_coherent_with_cross_validation_and_a_fresh_cohort(forest_validation):
    """Issue 12: the forest's validated C lies within 0.02 of its cross-validated C and of its C in new
    patients from the generator, where apparent − optimism (what the report used before) does not.

    Measured here (seeds fixed): apparent 0.968, apparent − optimism 0.896, out-of-bag (validated) 0.778,
    .632+ 0.826, cross-validated 0.778, fresh cohort 0.779. The tolerance 0.02 is the issue's; it is not a
    sampling bound: with 1500 development patients and a fresh cohort of 3000 (200 trees) the out-of-bag C was
    0.799, cross-validated 0.789, but the fresh cohort's 0.832 (.632+ 0.844), so the fresh-cohort check rests on
    this cohort size; the forest's own C varies that much between development samples.
    """
    row, c_cv, c_fresh = forest_validation
    assert row["obtained_by"] == "out-of-bag bootstrap" and row["validated"] == row["out_of_bag"]
    assert abs(row["validated"] - c_cv) < 0.02, (row.to_dict(), c_cv)
    assert abs(row["validated"] - c_fresh) < 0.02, (row.to_dict(), c_fresh)
    assert row["out_of_bag"] <= row["dot632_plus"] <= row["apparent"]
    assert row["corrected"] - c_fresh > 0.04  # why apparent − optimism is not used for forests
