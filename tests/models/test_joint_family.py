"""The joint model as a workflow family (fits on the counting-process table, predicts landmark-stack rows)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from riskbench.models.family_registry import family, param_problems
from riskbench.models.joint_family import SharedTrajectoryModel, patient_key
from riskbench.models.risk_contract import ModelInputError


@pytest.fixture(scope="module")
def demo_tables() -> tuple[pd.DataFrame, pd.DataFrame]:
    from riskbench.cohort import build_cohort
    from riskbench.demo import generate_cohort
    from riskbench.demo.cohort_spec import demo_cohort_spec

    data = generate_cohort(600, 3, n_risk_paths=0)
    cohort = build_cohort(data.patients, data.measurements, data.outcomes, demo_cohort_spec())
    stack = cohort.landmark_stack([0.0, 365.25, 730.5], 730.5)
    return cohort.counting_process, stack


@pytest.fixture(scope="module")
def fitted(demo_tables) -> SharedTrajectoryModel:
    counting, _ = demo_tables
    return SharedTrajectoryModel(["log_nodule_volume", "age_at_entry"], prediction_draws=30).fit(counting)


def test_registry_checks_the_family_parameters():
    assert family("shared_trajectory_joint").table == "counting_process"
    assert param_problems("shared_trajectory_joint", {"association": "value_slope", "time_knots": 2}) == []
    problems = param_problems("shared_trajectory_joint", {"association": "area", "hermite_points": 1})
    assert {p[0] for p in problems} == {"association", "hermite_points"}


def test_fits_and_predicts_the_stack(fitted, demo_tables):
    _, stack = demo_tables
    risk = fitted.predict_risk(stack, 730.5)
    assert risk.shape == (len(stack),) and np.all((risk >= 0) & (risk <= 1))
    assert fitted.competing_ is True
    # larger, growing nodules are at higher risk (the generator's truth: +0.5 per ln mm3 of volume)
    big = stack["log_nodule_volume"] > stack["log_nodule_volume"].median()
    assert risk[big.to_numpy()].mean() > 1.5 * risk[~big.to_numpy()].mean()


def test_unseen_patient_uses_the_values_on_its_row_and_a_copy_shares_its_history(fitted, demo_tables):
    """A held-out patient's history is rebuilt from its row (current value dated landmark - staleness, first
    value from the change column): a larger current value gives a larger risk. A bootstrap copy ``<id>#<k>``
    is predicted exactly as its patient."""
    _, stack = demo_tables
    rows = stack[stack["landmark"] == 365.25].head(20).copy()
    known = fitted.predict_risk(rows, 730.5)
    copies = rows.assign(patient_id=[f"{p}#3" for p in rows["patient_id"]])
    np.testing.assert_array_equal(fitted.predict_risk(copies, 730.5), known)
    unseen = rows.assign(patient_id=[f"NEW{i}" for i in range(len(rows))])
    low = fitted.predict_risk(unseen, 730.5)
    high = fitted.predict_risk(unseen.assign(log_nodule_volume=unseen["log_nodule_volume"] + 1.0), 730.5)
    assert np.all(high > low)
    assert list(patient_key(["A#1", "B", "C#x"])) == ["A", "B", "C#x"]


def test_time_varying_baseline_covariate_is_refused(demo_tables):
    counting, _ = demo_tables
    with pytest.raises(ModelInputError, match="changes within patients"):
        SharedTrajectoryModel(["log_nodule_volume", "suspicion_score"]).fit(counting)


def test_validation_fits_it_on_the_counting_process_table(demo_tables):
    from riskbench.validation.model_specs import ModelSpec, fit_spec, prediction_columns
    from riskbench.validation.sources import ValidationTables

    counting, stack = demo_tables
    spec = ModelSpec(
        "joint",
        ("log_nodule_volume", "age_at_entry"),
        "shared_trajectory_joint",
        {"prediction_draws": 20},
        "multiple_imputation",
    )
    model = fit_spec(spec, ValidationTables(stack, counting), seed=1)
    assert isinstance(model, SharedTrajectoryModel)
    assert "patient_id" in prediction_columns(spec, stack.columns)


def test_summary_has_the_hazard_terms_in_the_common_layout(fitted):
    """The models stage reads hazard ratios from every family's summary in one layout."""
    table = fitted.summary()
    outcome = table[table["cause"] == "outcome"].set_index("term")
    assert list(outcome.index) == ["age_at_entry", "log_nodule_volume"]
    assert np.allclose(outcome["hazard_ratio"], np.exp(outcome["coef"]))
    assert outcome.loc["log_nodule_volume", "hr_lower_95"] > 1.0  # the generator's hazard rises with volume


def test_example_patient_figure(fitted, demo_tables):
    """The figure draws the measured values, the predicted marker band and one risk per landmark."""
    import matplotlib

    matplotlib.use("Agg")
    from riskbench.report.joint_patient_plot import joint_patient_figure

    counting, stack = demo_tables
    pid = counting.loc[counting["status"] == 1, "patient_id"].iloc[0]
    end = float(counting.loc[counting["patient_id"] == pid, "stop"].max())
    figure = joint_patient_figure(fitted, stack[stack["patient_id"] == pid].head(1), end, 730.5, "Patient A")
    top, bottom = figure.axes
    assert "Patient A" in top.get_title() and pid not in top.get_title()
    assert len(bottom.lines[0].get_xdata()) == len(np.arange(0.0, max(end, 1.0), 365.25 / 4))


def test_models_stage_outputs_for_a_joint_model(fitted, demo_tables, tmp_path):
    """The models stage writes the joint model's estimates and Patient A's figure; other models get nothing."""
    from types import SimpleNamespace

    import matplotlib

    matplotlib.use("Agg")
    from riskbench.workflow.joint_outputs import joint_model_outputs

    counting, _ = demo_tables
    config = SimpleNamespace(
        seed=5, report=SimpleNamespace(example_patients=3), landmarks=SimpleNamespace(horizon_days=730.5)
    )
    tables, figures, notes = joint_model_outputs(config, "joint", fitted, counting, tmp_path, str)
    assert list(tables) == ["joint_estimates_joint"] and list(figures) == ["joint_patient_joint"] and not notes
    assert figures["joint_patient_joint"].png.exists()
    assert joint_model_outputs(config, "other", object(), counting, tmp_path, str) == ({}, {}, [])
