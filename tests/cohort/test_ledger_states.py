"""Every ledger state on a hand-made cohort: each input row ends in exactly the state worked out by hand."""

from __future__ import annotations

import math

import pandas as pd
import pytest

from riskbench.cohort import CohortSpec, VariableSpec, build_cohort
from riskbench.cohort import RowState as S

SPEC = CohortSpec(
    variables=(VariableSpec("vol", "mm3", {"cm3": 1000.0}, 1, 1e5, "log"),),
    lookback_days=30,
    static=("sex_male",),
    current_age=False,
)


def test_each_row_state_by_hand() -> None:
    patients = pd.DataFrame(
        [
            ["A", "2020-01-01", "F"],  # used
            ["B", "2020-01-01", "M"],  # outcome dated before entry
            ["C", "2020-01-01", "F"],  # outcome on the entry day: zero follow-up
            ["D", "2020-01-01", "F"],  # no outcome row at all
            ["", "2020-01-01", "F"],  # blank id
            ["E", "2020-13-45", "F"],  # impossible date
            ["A", "2020-01-01", "F"],  # identical copy of row 1
        ],
        columns=["patient_id", "entry_date", "sex"],
    )
    measurements = pd.DataFrame(
        [
            ["A", "2020-01-01", "vol", "100", "mm3"],  # 1 used
            ["A", "2020-01-01", "vol", "100", "mm3"],  # 2 exact duplicate of 1
            ["A", "2020-02-01", "vol", "abc", "mm3"],  # 3 unparseable value
            ["A", "2020-02-30", "vol", "100", "mm3"],  # 4 unparseable date
            ["A", "2020-02-01", "vol", "", "mm3"],  # 5 blank value
            ["A", "2020-02-01", "size", "5", "mm"],  # 6 unknown variable
            ["Q", "2020-02-01", "vol", "5", "mm3"],  # 7 unknown patient
            ["B", "2020-02-01", "vol", "5", "mm3"],  # 8 patient excluded
            ["A", "2020-02-01", "vol", "5", "mL"],  # 9 unknown unit
            ["A", "2020-02-01", "vol", "200", "cm3"],  # 10 implausible: 200 000 mm3
            ["A", "2019-11-01", "vol", "50", "mm3"],  # 11 before the 30-day look-back
            ["A", "2019-12-15", "vol", "60", "mm3"],  # 12 used: history known at entry
            ["A", "2020-07-01", "vol", "80", "mm3"],  # 13 after follow-up (ends 2020-06-01)
            ["A", "2020-06-01", "vol", "90", "mm3"],  # 14 used: on the end day (never enters a row)
            ["A", "2020-03-01", "vol", "0.1", "cm3"],  # 15 used: 100 mm3 ...
            ["A", "2020-03-01", "vol", "300", "mm3"],  # 16 ... merged with it (mean 200 mm3)
        ],
        columns=["patient_id", "date", "variable", "value", "unit"],
    )
    outcomes = pd.DataFrame(
        [
            ["A", "2020-06-01", "outcome"],  # 1 used
            ["A", "2020-08-01", "competing"],  # 2 later event
            ["B", "2019-12-01", "outcome"],  # 3 patient excluded (its patient row: outcome before entry)
            ["C", "2020-01-01", "competing"],  # 4 patient excluded (zero follow-up)
            ["A", "2020-06-01", "relapse"],  # 5 unknown kind
            ["Z", "2020-06-01", "outcome"],  # 6 unknown patient
            ["A", "not a date", "outcome"],  # 7 unparseable date
            ["A", "2020-06-01", "outcome"],  # 8 exact duplicate of 1
        ],
        columns=["patient_id", "date", "kind"],
    )
    cohort = build_cohort(patients, measurements, outcomes, SPEC)
    states = cohort.ledger.groupby("table")["state"].apply(list).to_dict()
    assert states["patients"] == [
        S.USED,
        S.OUTCOME_BEFORE_ENTRY,
        S.NO_FOLLOW_UP,
        S.NO_FOLLOW_UP,
        S.MISSING_REQUIRED,
        S.UNPARSEABLE_DATE,
        S.EXACT_DUPLICATE,
    ]
    assert states["measurements"] == [
        S.USED,
        S.EXACT_DUPLICATE,
        S.UNPARSEABLE_VALUE,
        S.UNPARSEABLE_DATE,
        S.MISSING_REQUIRED,
        S.UNKNOWN_VARIABLE,
        S.UNKNOWN_PATIENT,
        S.PATIENT_EXCLUDED,
        S.UNKNOWN_UNIT,
        S.IMPLAUSIBLE_VALUE,
        S.BEFORE_LOOKBACK,
        S.USED,
        S.AFTER_FOLLOW_UP,
        S.USED,
        S.USED,
        S.SAME_DAY_MERGED,
    ]
    assert states["outcomes"] == [
        S.USED,
        S.LATER_EVENT,
        S.PATIENT_EXCLUDED,
        S.PATIENT_EXCLUDED,
        S.UNKNOWN_KIND,
        S.UNKNOWN_PATIENT,
        S.UNPARSEABLE_DATE,
        S.EXACT_DUPLICATE,
    ]
    cp = cohort.counting_process
    assert cp.patient_id.unique().tolist() == ["A"]
    assert cp[["start", "stop", "status"]].to_numpy().tolist() == [[0, 60, 0], [60, 152, 1]]
    # day 0 holds the value of day 0 (the look-back value of 2019-12-15 is older); day 60 the merged mean
    assert cp.log_vol.tolist() == pytest.approx([math.log(100), math.log(200)])
    flow = cohort.flow.set_index("label")
    assert flow.loc["measurements: used", "remaining"] == 4
    assert flow.loc["patients: excluded, no_follow_up", "excluded"] == 2
