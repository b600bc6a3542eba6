"""The counting-process table against lifelines' timeline utilities (a reference library), row for row.

lifelines ``to_long_format`` + ``add_covariate_to_timeline`` (called once per variable, as its documentation
does) builds the same table under these convention differences, set or undone here:

- carry-forward is unlimited there: the comparison uses ``max_carry_days=None`` and no look-back history
  (lifelines would start a row before day 0);
- it splits only where a value changes, while we split at every value date (the staleness clock restarts):
  consecutive rows of ours with equal covariates are joined before comparing;
- its event column is boolean: our status 1 and 2 both compare as True.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from lifelines.utils import add_covariate_to_timeline, to_long_format

from riskbench.cohort import CohortSpec, VariableSpec, build_cohort

SPEC = CohortSpec(variables=(VariableSpec("v0"), VariableSpec("v1")), static=(), current_age=False)


def lifelines_table(patients: pd.DataFrame, meas: pd.DataFrame, outcomes: pd.DataFrame) -> pd.DataFrame:
    """The same table built with lifelines' utilities (days since entry)."""
    entry = pd.to_datetime(patients.set_index("patient_id")["entry_date"])
    base = pd.DataFrame(
        {
            "patient_id": outcomes.patient_id,
            "duration": (pd.to_datetime(outcomes.date) - entry.loc[outcomes.patient_id].to_numpy()).dt.days,
            "event": outcomes.kind != "end_of_follow_up",
        }
    )
    table = to_long_format(base, "duration")
    days = (pd.to_datetime(meas.date) - entry.loc[meas.patient_id].to_numpy()).dt.days
    for var in ["v0", "v1"]:
        sel = meas.variable == var
        cv = pd.DataFrame({"patient_id": meas.patient_id[sel], "time": days[sel], var: meas.value[sel]})
        table = add_covariate_to_timeline(table, cv, id_col="patient_id", duration_col="time", event_col="event")
    return table.sort_values(["patient_id", "start"], ignore_index=True)


def join_unchanged_rows(cp: pd.DataFrame, covariates: list[str]) -> pd.DataFrame:
    """Join consecutive rows of a patient whose covariates are equal (NaN equal to NaN)."""
    cp = cp.sort_values(["patient_id", "start"], ignore_index=True)
    same = cp[covariates].fillna(-1e300).eq(cp[covariates].fillna(-1e300).shift()).all(axis=1)
    new_block = ~same | cp.patient_id.ne(cp.patient_id.shift())
    block = new_block.cumsum()
    out = cp.groupby(block).agg(
        patient_id=("patient_id", "first"),
        start=("start", "first"),
        stop=("stop", "last"),
        status=("status", "last"),
        **{c: (c, "first") for c in covariates},
    )
    return out.reset_index(drop=True)


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_same_table_as_lifelines(make_random_cohort, seed: int) -> None:
    patients, meas, outcomes = make_random_cohort(40, seed, lookback=False)
    ours = join_unchanged_rows(build_cohort(patients, meas, outcomes, SPEC).counting_process, ["v0", "v1"])
    ref = lifelines_table(patients, meas, outcomes)
    assert len(ours) == len(ref)
    assert ours.patient_id.astype(str).tolist() == ref.patient_id.tolist()
    for col in ["start", "stop", "v0", "v1"]:
        np.testing.assert_array_equal(ours[col].to_numpy(float), ref[col].to_numpy(float), err_msg=col)
    np.testing.assert_array_equal(ours.status.to_numpy() > 0, ref.event.to_numpy(bool))
