"""Previous-value feature, declared statics (ranges, categorical codes) and labels, worked out by hand."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from riskbench.cohort import CohortSpec, SpecError, StaticSpec, VariableSpec, build_cohort
from riskbench.cohort import RowState as S

NAN = float("nan")


def _same(got, expected) -> None:
    np.testing.assert_allclose(np.asarray(got, float), np.asarray(expected, float), equal_nan=True)


def _tables():
    patients = pd.DataFrame(
        {
            "patient_id": ["A", "B"],
            "entry_date": ["2020-01-01"] * 2,
            "birth_date": ["1960-01-01"] * 2,
            "sex": ["F", "m"],
        }
    )
    meas = pd.DataFrame(
        [
            ["A", "2020-01-01", "vol", 100],
            ["A", "2020-01-31", "vol", 200],
            ["A", "2020-03-01", "vol", 400],
            ["A", "2020-01-11", "other", 7],  # another variable: not a previous vol
            ["B", "2019-12-22", "vol", 50],
            ["B", "2020-01-01", "vol", 100],  # look-back value, then day 0
        ],
        columns=["patient_id", "date", "variable", "value"],
    )
    outcomes = pd.DataFrame(
        {"patient_id": ["A", "B"], "date": ["2020-04-10", "2020-02-10"], "kind": ["outcome", "end_of_follow_up"]}
    )
    return patients, meas, outcomes


def _spec(**kw) -> CohortSpec:
    base = dict(
        variables=(VariableSpec("vol", previous=True, label="Nodule volume", unit="mm3"), VariableSpec("other")),
        lookback_days=30,
        static=("sex",),
        current_age=False,
    )
    return CohortSpec(**(base | kw))


def test_previous_value_by_hand() -> None:
    """A at days 0, 30, 60 (100, 200, 400); B at days -10 and 0 (50, 100): the previous value is the one
    before the current one, dated on or before the row's start; carry-forward 20 days empties both."""
    cohort = build_cohort(*_tables(), _spec())
    cp = cohort.counting_process
    a = cp[cp.patient_id == "A"]
    assert a[["start", "stop"]].to_numpy().tolist() == [[0, 10], [10, 30], [30, 60], [60, 100]]
    _same(a.vol, [100, 100, 200, 400])
    _same(a.vol_previous, [NAN, NAN, 100, 200])
    b = cp[cp.patient_id == "B"]
    _same(b.vol_previous, [50])
    carried = build_cohort(*_tables(), _spec(max_carry_days=20.0)).counting_process
    a = carried[carried.patient_id == "A"]
    assert a[["start", "stop"]].to_numpy().tolist() == [
        [0, 10],
        [10, 20],
        [20, 30],
        [30, 50],
        [50, 60],
        [60, 80],
        [80, 100],
    ]
    _same(a.vol_previous, [NAN, NAN, NAN, 100, NAN, 200, NAN])  # missing once the current value expired
    stack = cohort.landmark_stack([0, 35, 65], 100)
    _same(stack[stack.patient_id == "A"].vol_previous, [NAN, 100, 200])
    assert "vol_previous" in cohort.spec.covariate_columns


def test_sex_codes_any_case_and_one_hot_column() -> None:
    cohort = build_cohort(*_tables(), _spec())
    cp = cohort.counting_process.groupby("patient_id").first()
    assert cp.sex_male.to_dict() == {"A": 0.0, "B": 1.0}  # "F" and "m"
    assert list(cohort.patients.columns[-1:]) == ["sex_male"]


def test_categorical_static_declared_codes_reference_and_undeclared_code() -> None:
    patients, meas, outcomes = _tables()
    patients = pd.concat(
        [
            patients,
            pd.DataFrame(
                {
                    "patient_id": ["C", "D"],
                    "entry_date": ["2020-01-01"] * 2,
                    "birth_date": ["1960-01-01"] * 2,
                    "sex": ["2", "U"],
                }
            ),
        ]
    )
    outcomes = pd.concat(
        [outcomes, pd.DataFrame({"patient_id": ["C", "D"], "date": ["2020-02-01"] * 2, "kind": ["outcome"] * 2})]
    )
    patients["stage"] = ["I", "II", "III", "I"]
    spec = _spec(
        static=("sex", "stage"),
        statics=(
            StaticSpec(
                "sex",
                kind="categorical",
                codes={"1": "male", "2": "female", "m": "male", "f": "female"},
                reference="female",
                label="Sex",
            ),
            StaticSpec(
                "stage", kind="categorical", codes={"I": "early", "II": "early", "III": "late"}, reference="early"
            ),
        ),
    )
    cohort = build_cohort(patients, meas, outcomes, spec)
    states = cohort.ledger.query("table == 'patients'").state.tolist()
    assert states == [S.USED, S.USED, S.USED, S.UNDECLARED_CODE]  # "U" is no declared code
    first = cohort.counting_process.groupby("patient_id").first()
    assert first[["sex_male", "stage_late"]].to_dict("index") == {
        "A": {"sex_male": 0.0, "stage_late": 0.0},
        "B": {"sex_male": 1.0, "stage_late": 0.0},
        "C": {"sex_male": 0.0, "stage_late": 1.0},
    }
    assert cohort.ledger.query("table == 'outcomes'").state.tolist()[-1] == S.PATIENT_EXCLUDED
    assert spec.label("stage_late") == "stage: late (vs early)"
    assert spec.label("sex_male") == "Sex: male (vs female)"


def test_numeric_static_range_count_and_text() -> None:
    patients, meas, outcomes = _tables()
    patients["visits"] = ["3", "2.5"]
    patients["score"] = ["7", "high"]
    spec = _spec(static=("visits", "score"), statics=(StaticSpec("visits", kind="count"),))
    states = build_cohort(patients, meas, outcomes, spec).ledger.query("table == 'patients'").state.tolist()
    assert states == [S.USED, S.UNPARSEABLE_STATIC]  # text before range: the first failed check counts
    patients["score"] = ["7", "8"]
    spec = _spec(
        static=("visits", "score"), statics=(StaticSpec("visits", kind="count"), StaticSpec("score", plausible_max=7.5))
    )
    states = build_cohort(patients, meas, outcomes, spec).ledger.query("table == 'patients'").state.tolist()
    assert states == [S.USED, S.IMPLAUSIBLE_STATIC]  # 2.5 visits and a score of 8 are implausible


def test_labels_with_units() -> None:
    spec = CohortSpec(
        variables=(
            VariableSpec("nodule_volume", unit="mm3", transform="log", change=True, slope=True, previous=True),
            VariableSpec("marker", unit="ng/mL", label="Serum marker"),
        ),
        exam_variables=("nodule_volume",),
        static=("age_at_entry", "pack_years", "sex_male"),
    )
    assert spec.label("log_nodule_volume") == "log nodule volume (log mm3)"
    assert spec.label("log_nodule_volume_change") == "nodule volume, change from first (log mm3)"
    assert spec.label("log_nodule_volume_previous") == "nodule volume, previous value (log mm3)"
    assert spec.label("log_nodule_volume_slope_per_year") == "nodule volume, slope (log mm3 per year)"
    assert spec.label("marker") == "Serum marker (ng/mL)"
    assert spec.label("age_at_entry") == "Age at entry (years)"
    assert spec.label("pack_years") == "Smoking (pack-years)"
    assert spec.label("days_since_exam") == "days since last exam (days)"
    assert all(isinstance(spec.label(c), str) for c in spec.covariate_columns)
    with pytest.raises(KeyError, match="not a covariate column"):
        spec.label("nonsense")


def test_static_spec_rules() -> None:
    with pytest.raises(SpecError, match="reference 'other'"):
        StaticSpec("sex", kind="categorical", codes={"M": "male", "F": "female"}, reference="other")
    with pytest.raises(SpecError, match="differing only in case"):
        StaticSpec("sex", kind="categorical", codes={"m": "male", "M": "female"}, reference="male")
    with pytest.raises(SpecError, match="letters, digits"):
        StaticSpec("bad name")
    with pytest.raises(SpecError, match="not list it"):
        CohortSpec(static=("age_at_entry",), statics=(StaticSpec("pack_years"),))
    with pytest.raises(SpecError, match="list 'sex' instead"):
        CohortSpec(
            static=("sex_male",),
            statics=(StaticSpec("sex", kind="categorical", codes={"1": "man", "2": "woman"}, reference="woman"),),
        )
    assert math.isclose(StaticSpec("n", kind="count").lower_bound, 0.0)
