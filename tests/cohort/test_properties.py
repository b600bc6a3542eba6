"""Property tests (hypothesis) of the cohort stage on random small cohorts.

Invariants (the cohort-stage rules, README.md and docs/own_cohort.md): no covariate value dated after a row's
start; contiguous,
non-overlapping intervals with start < stop; exactly one terminal status per patient; the ledger balances;
the landmark stack agrees with the counting-process table at each landmark. The covariates are also
recomputed by a plain-Python oracle (last value on or before start, carried at most max_carry_days).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from riskbench.cohort import CohortSpec, VariableSpec, build_cohort

BASE = pd.Timestamp("2021-03-01")
KINDS = {"outcome": 1, "competing": 2, "end_of_follow_up": 0}


@st.composite
def cohorts(draw):
    n = draw(st.integers(1, 5))
    patients, meas, outcomes = [], [], []
    for i in range(n):
        pid = f"X{i}"
        entry = BASE + pd.Timedelta(days=draw(st.integers(0, 30)))
        patients.append({"patient_id": pid, "entry_date": entry.date().isoformat(), "birth_date": "1950-06-15"})
        end = draw(st.integers(1, 300))
        outcomes.append(
            {
                "patient_id": pid,
                "date": (entry + pd.Timedelta(days=end)).date().isoformat(),
                "kind": draw(st.sampled_from(sorted(KINDS))),
            }
        )
        for _ in range(draw(st.integers(0, 8))):
            day = draw(st.integers(-90, end + 30))
            meas.append(
                {
                    "patient_id": pid,
                    "date": (entry + pd.Timedelta(days=day)).date().isoformat(),
                    "variable": draw(st.sampled_from(["v0", "v1"])),
                    "value": draw(st.integers(1, 9)),
                }
            )
    spec = CohortSpec(
        variables=(
            VariableSpec("v0", transform="log", change=True, slope=True, slope_window_days=100),
            VariableSpec("v1"),
        ),
        max_carry_days=draw(st.sampled_from([None, 20.0, 75.0])),
        lookback_days=draw(st.sampled_from([0.0, 45.0])),
        exam_variables=("v0",),
        static=("age_at_entry",),
    )
    frame = pd.DataFrame(meas, columns=["patient_id", "date", "variable", "value"])
    return pd.DataFrame(patients), frame, pd.DataFrame(outcomes), spec


def _used_values(patients, meas, outcomes, spec):
    """Oracle: per (patient, variable) sorted (day, value) pairs after the look-back, end and same-day rules."""
    entry = pd.to_datetime(patients.set_index("patient_id").entry_date)
    end = (pd.to_datetime(outcomes.set_index("patient_id").date) - entry).dt.days
    out = {}
    if meas.empty:
        return out, end
    meas = meas.drop_duplicates()  # an exact copy of a row is excluded (the first copy is used)
    m = meas.assign(day=(pd.to_datetime(meas.date) - entry.loc[meas.patient_id].to_numpy()).dt.days)
    m = m[(m.day >= -spec.lookback_days) & (m.day <= end.loc[m.patient_id].to_numpy())]
    for (pid, var), g in m.groupby(["patient_id", "variable"]):
        mean = g.groupby("day").value.mean()
        out[(pid, var)] = list(zip(mean.index.to_numpy(float), mean.to_numpy(float)))
    return out, end


@settings(max_examples=20, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(cohorts())
def test_invariants(data) -> None:
    patients, meas, outcomes, spec = data
    cohort = build_cohort(patients, meas, outcomes, spec)
    cp = cohort.counting_process
    values, end = _used_values(patients, meas, outcomes, spec)
    carry = math.inf if spec.max_carry_days is None else spec.max_carry_days

    # the ledger balances: each input row exactly once
    ledger = cohort.ledger
    for table, frame in [("patients", patients), ("measurements", meas), ("outcomes", outcomes)]:
        rows = ledger[ledger.table == table].row_number.tolist()
        assert sorted(rows) == list(range(1, len(frame) + 1))
    flow = cohort.flow
    for _table, g in flow.groupby("table"):
        assert g.excluded.sum() + g[g.state == "used"].remaining.iloc[0] == g[g.state == "read"].remaining.iloc[0]

    for pid, rows in cp.groupby("patient_id"):
        rows = rows.sort_values("start")
        start, stop = rows.start.to_numpy(), rows.stop.to_numpy()
        # contiguous, non-overlapping, start < stop, from entry to the end of follow-up
        assert start[0] == 0 and stop[-1] == end[pid]
        assert (start < stop).all() and (stop[:-1] == start[1:]).all()
        # exactly one terminal status: only the last row may be non-zero and it is the patient's own
        kind = outcomes.set_index("patient_id").kind[pid]
        assert (rows.status.to_numpy()[:-1] == 0).all() and rows.status.iloc[-1] == KINDS[kind]
        for var, col in [("v0", "log_v0"), ("v1", "v1")]:
            series = values.get((pid, var), [])
            for s, got, stale in zip(start, rows[col], rows[f"{var}_staleness_days"]):
                known = [(d, v) for d, v in series if d <= s]  # nothing dated after the start
                if not known:
                    assert np.isnan(got) and np.isnan(stale)
                    continue
                d, v = known[-1]
                assert stale == s - d and stale >= 0
                expected = (math.log(v) if var == "v0" else v) if s - d < carry else np.nan
                np.testing.assert_allclose(got, expected)
                if var == "v0" and not np.isnan(expected):
                    np.testing.assert_allclose(
                        rows.set_index("start").log_v0_change[s], math.log(v) - math.log(known[0][1])
                    )
                    window = [(dd, vv) for dd, vv in known if dd >= d - 100]
                    slope = (
                        np.polyfit([w[0] for w in window], np.log([w[1] for w in window]), 1)[0] * 365.25
                        if len(window) > 1
                        else np.nan
                    )
                    np.testing.assert_allclose(rows.set_index("start").log_v0_slope_per_year[s], slope, atol=1e-9)
        exams = [d for d, _ in values.get((pid, "v0"), [])]
        np.testing.assert_array_equal(rows.n_exams, [sum(d <= s for d in exams) for s in start])

    # landmark stack = the counting-process row holding s, clocks advanced to s
    marks, w = [0.0, 50.0, 120.0], 60.0
    stack = cohort.landmark_stack(marks, w)
    for s in marks:
        at_s = stack[stack.landmark == s].set_index("patient_id")
        assert set(at_s.index) == {p for p in end.index if end[p] > s and p in set(cp.patient_id)}
        for pid, row in at_s.iterrows():
            src = cp[(cp.patient_id == pid) & (cp.start <= s) & (cp.stop > s)]
            assert len(src) == 1
            src = src.iloc[0]
            assert row.time == min(end[pid], s + w) - s
            terminal = KINDS[outcomes.set_index("patient_id").kind[pid]]
            assert row.status == (terminal if end[pid] <= s + w else 0)  # administrative censoring at s + w
            for col in ["log_v0", "log_v0_change", "v1", "n_exams", "age_at_entry"]:
                np.testing.assert_array_equal(row[col], src[col])
            for col in ["v0_staleness_days", "v1_staleness_days", "days_since_exam"]:
                np.testing.assert_allclose(row[col], src[col] + (s - src.start))
            np.testing.assert_allclose(row.age, src.age + (s - src.start) / 365.25)
