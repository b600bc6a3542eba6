"""The messy variant records exactly the defects it injected.

Each defect is re-detected here by a direct, simple rule on the messy tables (a flag per row); the
flags must not overlap (defects sit on disjoint rows) and their counts must equal ``defects.json``.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from riskbench.cohort.reasons import RowState
from riskbench.demo import generate_cohort

KNOWN_UNITS = {
    "nodule_volume": {"mm3": 1.0, "cm3": 1000.0},
    "suspicion_score": {"1": 1.0},
    "serum_marker": {"ng/mL": 1.0, "ug/L": 1.0},
}


@pytest.fixture(scope="module")
def messy():
    return generate_cohort(1200, seed=21, variant="messy", n_risk_paths=0)


def _iso(series: pd.Series) -> pd.Series:
    return pd.to_datetime(series, format="%Y-%m-%d", errors="coerce")


def _check(flags: dict[str, pd.Series], recorded: dict[str, int], n_rows: int) -> None:
    frame = pd.DataFrame(flags).fillna(False).astype(bool)
    assert (frame.sum(axis=1) <= 1).all(), "defects overlap on some rows"
    counts = {k: int(v) for k, v in frame.sum().items() if v}
    counts[str(RowState.USED)] = int(n_rows - frame.any(axis=1).sum())
    assert counts == recorded


def test_defect_counts_balance_every_table(messy):
    for table in ("patients", "measurements", "outcomes"):
        assert sum(messy.defects[table].values()) == len(getattr(messy, table)), table
    assert messy.truth is None
    assumptions = messy.defects["assumptions"]
    assert assumptions["lookback_days"] == 180 and assumptions["same_day_rule"] == "mean"


def test_patient_and_outcome_defects_are_recorded(messy):
    p, o = messy.patients, messy.outcomes
    with_outcome = p["patient_id"].isin(o["patient_id"])
    _check({"exact_duplicate": p.duplicated(), "no_follow_up": ~with_outcome}, messy.defects["patients"], len(p))

    unknown = ~o["patient_id"].isin(p["patient_id"])
    dup = o.duplicated() & ~unknown
    bad_kind = ~o["kind"].isin(["outcome", "competing", "end_of_follow_up"]) & ~unknown & ~dup
    bad_date = _iso(o["date"]).isna() & ~unknown & ~dup & ~bad_kind
    valid = ~(unknown | dup | bad_kind | bad_date)
    order = o[valid].assign(when=_iso(o["date"])).sort_values(["patient_id", "when"], kind="stable")
    later = pd.Series(False, index=o.index)
    later[order.index[order.duplicated("patient_id")]] = True
    flags = {
        "unknown_patient": unknown,
        "exact_duplicate": dup,
        "unknown_kind": bad_kind,
        "unparseable_date": bad_date,
        "later_event": later,
    }
    _check(flags, messy.defects["outcomes"], len(o))


def test_measurement_defects_are_recorded(messy):
    p, m, o = messy.patients.drop_duplicates(), messy.measurements, messy.outcomes
    entry = _iso(p.set_index("patient_id")["entry_date"])
    first_end = o.assign(when=_iso(o["date"])).dropna(subset=["when"])
    first_end = first_end[first_end["kind"].isin(["outcome", "competing", "end_of_follow_up"])]
    end = first_end.groupby("patient_id")["when"].min()

    known = m["patient_id"].isin(p["patient_id"])
    excluded_patient = known & ~m["patient_id"].isin(end.index)
    when = _iso(m["date"])
    number = pd.to_numeric(m["value"], errors="coerce")
    factor = [KNOWN_UNITS.get(v, {}).get(u, np.nan) for v, u in zip(m["variable"], m["unit"])]
    canonical = number * np.asarray(factor)
    low = m["variable"].map({"nodule_volume": 1.0, "suspicion_score": 0.0, "serum_marker": 0.0})
    high = m["variable"].map({"nodule_volume": 5e5, "suspicion_score": 1.0, "serum_marker": 1e3})
    flags = {
        "unknown_patient": ~known,
        "patient_excluded": excluded_patient,
        "exact_duplicate": m.duplicated() & known,
        "unparseable_date": when.isna(),
        "missing_required_value": m["value"].isna(),
        "unparseable_value": m["value"].notna() & number.isna(),
        "unknown_variable": ~m["variable"].isin(list(KNOWN_UNITS)),
        "unknown_unit": m["variable"].isin(list(KNOWN_UNITS)) & np.isnan(factor),
        "implausible_value": (canonical < low) | (canonical > high),
    }
    entry_of = entry.reindex(m["patient_id"]).to_numpy()
    end_of = end.reindex(m["patient_id"]).to_numpy()
    flags["before_lookback"] = pd.Series(when.to_numpy() < entry_of - pd.Timedelta(days=180), index=m.index)
    flags["after_follow_up"] = pd.Series(when.to_numpy() > end_of, index=m.index)
    # conflicting same-day groups among otherwise clean rows: all but one row per group
    clean = ~pd.DataFrame(flags).any(axis=1)
    rows = m[clean].assign(number=number[clean])
    groups = rows.groupby(["patient_id", "variable", "date"])["number"]
    conflicting = groups.transform("nunique") > 1
    flags["same_day_merged"] = pd.Series(False, index=m.index)
    flags["same_day_merged"][rows.index[conflicting & rows.duplicated(["patient_id", "variable", "date"])]] = True
    _check(flags, messy.defects["measurements"], len(m))
    # still-usable oddities are present and counted
    info = messy.defects["informational"]
    assert (m["unit"] == "cm3").sum() == info["nodule_volume_rows_in_cm3"] > 0
    assert (m["unit"] == "ug/L").sum() == info["serum_marker_rows_in_ug_per_L"] > 0
    before = pd.Series(when.to_numpy() < entry_of, index=m.index) & ~flags["before_lookback"]
    assert before.sum() == info["serum_marker_rows_before_entry_within_lookback"] > 0


def test_messy_variant_spoils_the_clean_cohort_of_the_same_seed(messy):
    clean = generate_cohort(1200, seed=21, n_risk_paths=0)
    # the clean rows of unspoiled patients are untouched
    keep = clean.patients["patient_id"].iloc[::7]
    a = clean.patients[clean.patients["patient_id"].isin(keep)].reset_index(drop=True)
    b = messy.patients[messy.patients["patient_id"].isin(keep)].drop_duplicates().reset_index(drop=True)
    pd.testing.assert_frame_equal(a, b)
