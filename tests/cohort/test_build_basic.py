"""build_cohort on small hand-made data: values worked out by hand (the leakage rule: no value dated after a
row's start)."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from riskbench.cohort import CohortInputError, CohortSpec, RowState, VariableSpec, build_cohort


def _tables():
    patients = pd.DataFrame(
        {
            "patient_id": ["A", "B", "C"],
            "entry_date": ["2020-01-01"] * 3,
            "birth_date": ["1960-01-01"] * 3,
            "sex": ["F", "M", "F"],
            "pack_years": [10, 20, None],
        }
    )
    meas = pd.DataFrame(
        {
            "patient_id": ["A", "A", "A", "B", "B", "C", "A", "Z"],
            "date": [
                "2020-01-01",
                "2020-03-01",
                "2020-06-01",
                "2019-12-01",
                "2020-02-01",
                "2020-01-05",
                "2020-03-01",
                "2020-01-01",
            ],
            "variable": ["vol"] * 8,
            "value": [100, "0.2", 150, 50, 60, 70, 250, 1],
            "unit": ["mm3", "cm3", "mm3", "mm3", "mm3", "mm3", "mm3", "mm3"],
        }
    )
    outcomes = pd.DataFrame(
        {
            "patient_id": ["A", "B", "C", "C"],
            "date": ["2020-12-01", "2020-05-01", "2020-08-01", "2020-09-01"],
            "kind": ["outcome", "competing", "end_of_follow_up", "outcome"],
        }
    )
    return patients, meas, outcomes


SPEC = CohortSpec(
    variables=(VariableSpec("vol", "mm3", {"cm3": 1000.0}, 1, 1e6, "log", True, True),),
    max_carry_days=200,
    lookback_days=60,
    exam_variables=("vol",),
)


def test_rows_covariates_and_ledger_by_hand() -> None:
    cohort = build_cohort(*_tables(), SPEC)
    cp = cohort.counting_process
    a = cp[cp.patient_id == "A"]
    # A: values on days 0, 60 (0.2 cm3 = 200 mm3 and 250 mm3 averaged), 152; outcome on day 335.
    assert a[["start", "stop", "status"]].to_numpy().tolist() == [[0, 60, 0], [60, 152, 0], [152, 335, 1]]
    assert a["log_vol"].tolist() == pytest.approx([math.log(100), math.log(225), math.log(150)])
    assert a["log_vol_change"].tolist() == pytest.approx([0, math.log(2.25), math.log(1.5)])
    assert a["n_exams"].tolist() == [1, 2, 3]
    # slope over the year ending at day 152: least squares of ln values at days 0, 60, 152, per year.
    expected = np.polyfit([0, 60, 152], np.log([100, 225, 150]), 1)[0] * 365.25
    assert a["log_vol_slope_per_year"].iloc[2] == pytest.approx(expected)
    b = cp[cp.patient_id == "B"]
    # B: a value 31 days before entry is history known at entry (look-back 60 days); competing end.
    assert b["vol_staleness_days"].iloc[0] == 31 and b["status"].tolist() == [0, 2]
    c = cp[cp.patient_id == "C"]
    # C: value on day 4 expires after 200 days -> split at 204, then missing with staleness 200.
    assert c[["start", "stop"]].to_numpy().tolist() == [[0, 4], [4, 204], [204, 213]]
    assert math.isnan(c["log_vol"].iloc[2]) and c["vol_staleness_days"].iloc[2] == 200
    assert math.isnan(c["pack_years"].iloc[0])  # a blank static value is missing, not an exclusion
    states = cohort.ledger.set_index(["table", "row_number"])["state"]
    assert states[("measurements", 7)] == RowState.SAME_DAY_MERGED
    assert states[("measurements", 8)] == RowState.UNKNOWN_PATIENT
    assert states[("outcomes", 4)] == RowState.LATER_EVENT
    assert len(cohort.ledger) == 3 + 8 + 4


def test_landmark_stack_by_hand() -> None:
    stack = build_cohort(*_tables(), SPEC).landmark_stack([0, 100, 200], horizon_days=120)
    row = stack[(stack.patient_id == "A") & (stack.landmark == 100)].iloc[0]
    assert row["time"] == 120 and row["status"] == 0  # outcome at 335 is after 100 + 120
    assert row["vol_staleness_days"] == 40 and row["log_vol"] == pytest.approx(math.log(225))
    b = stack[(stack.patient_id == "B") & (stack.landmark == 100)].iloc[0]
    assert b["time"] == 21 and b["status"] == 2
    assert set(stack[stack.landmark == 200].patient_id) == {"A", "C"}  # B ended on day 121


def test_missing_column_names_file_and_columns(tmp_path) -> None:
    patients, meas, outcomes = _tables()
    path = tmp_path / "meas.csv"
    meas.drop(columns="value").to_csv(path, index=False)
    with pytest.raises(CohortInputError, match=r"meas\.csv.*'value'.*\['date', 'patient_id', 'unit', 'variable'\]"):
        build_cohort(patients, path, outcomes, SPEC)


def test_duplicate_patient_ids_are_an_error() -> None:
    patients, meas, outcomes = _tables()
    patients.loc[3] = ["A", "2020-02-01", "1960-01-01", "F", 1]
    with pytest.raises(CohortInputError, match=r"1 patient id\(s\) appear on more than one row.*rows \[1, 4\]") as info:
        build_cohort(patients, meas, outcomes, SPEC)
    assert "'A'" not in str(info.value)  # no source id in a message that may be saved


def test_same_day_conflict_with_rule_error_names_rows() -> None:
    spec = CohortSpec(variables=SPEC.variables, same_day_rule="error", lookback_days=60)
    with pytest.raises(CohortInputError, match=r"1 group\(s\) of rows .* \(vol on rows \[2, 7\]\)") as info:
        build_cohort(*_tables(), spec)
    assert "'A'" not in str(info.value) and "250" not in str(info.value)  # no source id or value


def test_same_day_rule_last_uses_the_later_row() -> None:
    spec = CohortSpec(variables=SPEC.variables, same_day_rule="last", lookback_days=60)
    cohort = build_cohort(*_tables(), spec)
    a = cohort.counting_process.query("patient_id == 'A'")
    assert a["log_vol"].iloc[1] == pytest.approx(math.log(250))
    states = cohort.ledger.set_index(["table", "row_number"])["state"]
    assert states[("measurements", 2)] == RowState.SAME_DAY_MERGED and states[("measurements", 7)] == RowState.USED
