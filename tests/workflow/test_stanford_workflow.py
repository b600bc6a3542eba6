"""The Stanford heart transplant data as raw CSV files through the workflow: a time-varying Cox model named
in a configuration reproduces the published coefficients, and its coefficient table names every term.

Source of the published values: the Stanford heart transplant data of Crowley & Hu (1977, J Am Stat Assoc
72:27-36) fitted with R's survival package (``coxph``, Efron ties): coef 0.0272, -0.1463, -0.6372, -0.0103
(age - 48, year, surgery, transplant), as R prints them (**from memory** of that output). The raw tables are
rebuilt as in tests/cohort/test_stanford_end_to_end.py (whose docstring gives the conventions of the shipped rows).
"""

from __future__ import annotations

import importlib.util
from pathlib import Path

import pandas as pd
import pytest
from lifelines.datasets import load_stanford_heart_transplants

from riskbench.workflow.config import load_config
from riskbench.workflow.stage_cohort import run_cohort_stage
from riskbench.workflow.stage_models import run_models_stage

HERE = Path(__file__).resolve().parent
PUBLISHED = {"age_minus_48": 0.0272, "years_since_1967": -0.1463, "surgery": -0.6372, "transplant": -0.0103}

CONFIG = """
seed = 1977
[sources.patients]
path = "data/patients.csv"
[sources.measurements]
path = "data/measurements.csv"
[sources.outcomes]
path = "data/outcomes.csv"
[cohort]
static = ["age_minus_48", "years_since_1967", "surgery"]
current_age = false
[cohort.variables.transplant]
range = [0, 1]
label = "Heart transplant received"
[landmarks]
landmarks = ["0 days", "1 month", "3 months", "6 months"]
prediction_window = "1 year"
[[models]]
name = "baseline_facts"
family = "time_varying_cox"
covariates = ["age_minus_48", "years_since_1967", "surgery"]
[[models]]
name = "with_transplant"
family = "time_varying_cox"
covariates = ["age_minus_48", "years_since_1967", "surgery", "transplant"]
[validation]
folds = 3
bootstrap_resamples = 0
"""


def _raw_tables():
    spec = importlib.util.spec_from_file_location(
        "stanford_raw", HERE.parent / "cohort" / "test_stanford_end_to_end.py"
    )
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module._raw_tables(load_stanford_heart_transplants())


@pytest.fixture(scope="module")
def run(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("stanford")
    (folder / "data").mkdir()
    patients, measurements, outcomes = _raw_tables()
    patients = patients.drop(columns=["acceptance_date"]).rename(
        columns={"age": "age_minus_48", "year": "years_since_1967"}
    )
    for name, table in (("patients", patients), ("measurements", measurements), ("outcomes", outcomes)):
        table = table.copy()
        for column in table.columns:
            if str(table[column].dtype).startswith("datetime"):  # a time of day keeps the half-day transplants
                table[column] = table[column].dt.strftime("%Y-%m-%dT%H:%M:%S")
        table.to_csv(folder / "data" / f"{name}.csv", index=False)
    (folder / "analysis.toml").write_text(CONFIG, encoding="utf-8")
    config = load_config(folder / "analysis.toml", check_data=True)
    run_dir = folder / "run"
    run_cohort_stage(config, run_dir)
    run_models_stage(config, run_dir)
    return run_dir


def test_time_varying_cox_in_the_workflow_reproduces_the_published_coefficients(run):
    table = pd.read_csv(run / "tables" / "coefficients_with_transplant.csv").set_index("term")
    assert list(table.index) == list(PUBLISHED)
    for term, coef in PUBLISHED.items():
        assert table.loc[term, "coef"] == pytest.approx(coef, abs=5e-5), term
    assert table.loc["transplant", "label"] == "Heart transplant received"
