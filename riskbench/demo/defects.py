"""The messy variant: realistic defects injected into a clean cohort, each one counted.

Every defect is put on its own patients (and so on its own rows), chosen at random, so the counts
are exactly the numbers of rows a correct ledger must put in each state under the demo cohort spec
(the ``assumptions`` block of ``defects.json`` states the settings the counts rely on). Defects never
touch a patient's entry-day rows, so every patient keeps a baseline exam and lab value.

Defects (ledger code in brackets; state of the other rows is ``used``):

* patients: patients without any outcome row (``no_follow_up``; their measurement rows become
  ``patient_excluded``); exact duplicate patient rows (``exact_duplicate``);
* measurements: exact duplicates (``exact_duplicate``); a second, different value for the same
  patient, variable and day (``same_day_merged``); negative volumes or marker values and suspicion
  scores above 1 (``implausible_value``); marker rows in an unknown unit (``unknown_unit``); blank
  values (``missing_required_value``); text in the value column (``unparseable_value``); an unknown
  variable (``unknown_variable``); unknown patient ids (``unknown_patient``); invalid dates
  (``unparseable_date``); values dated further before entry than the look-back (``before_lookback``);
  values dated after the end of follow-up (``after_follow_up``);
* outcomes: a second terminal row after the first (``later_event``); exact duplicates
  (``exact_duplicate``); unknown patient ids (``unknown_patient``); an unknown kind
  (``unknown_kind``); invalid dates (``unparseable_date``).

Informational (rows still ``used``): volumes in cm3 (converted), marker in ug/L (same as ng/mL),
marker values dated before entry within the look-back window.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from riskbench.cohort.reasons import RowState

LOOKBACK_DAYS = 180
BAD_DATES: tuple[str, ...] = ("2016-02-30", "not recorded", "15/13/2017", "2019-00-10", "20l8-05-04")
BAD_VALUES: tuple[str, ...] = ("n/a", "pending", "see report", "?")
UNKNOWN_UNIT = "mmol/L"
UNKNOWN_VARIABLE = ("nodule_diameter", "mm", "imaging")
UNKNOWN_KIND = "transferred"
PLAUSIBLE_RANGES: dict[str, tuple[float, float]] = {
    "nodule_volume": (1.0, 500_000.0),  # mm3
    "suspicion_score": (0.0, 1.0),
    "serum_marker": (0.0, 1_000.0),  # ng/mL
}
UNIT_CONVERSIONS: dict[str, dict[str, float]] = {
    "nodule_volume": {"mm3": 1.0, "cm3": 1000.0},
    "suspicion_score": {"1": 1.0},
    "serum_marker": {"ng/mL": 1.0, "ug/L": 1.0},
}

# Share of patients that receive each defect (at least one patient each).
RATES: dict[str, float] = {
    "no_follow_up": 0.005,
    "patient_duplicate": 0.002,
    "m_duplicate": 0.01,
    "m_same_day": 0.01,
    "m_implausible": 0.01,
    "m_unknown_unit": 0.008,
    "m_cm3": 0.02,
    "m_ug_per_l": 0.02,
    "m_bad_date": 0.006,
    "m_missing_value": 0.004,
    "m_bad_value": 0.004,
    "m_unknown_variable": 0.004,
    "m_unknown_patient": 0.005,
    "m_before_lookback": 0.006,
    "m_within_lookback": 0.01,
    "m_after_follow_up": 0.01,
    "o_later_event": 0.005,
    "o_duplicate": 0.003,
    "o_unknown_patient": 0.002,
    "o_unknown_kind": 0.003,
    "o_bad_date": 0.002,
}


@dataclass(frozen=True)
class SpoiledTables:
    """Messy tables and the defect counts (``defects.json`` contents)."""

    patients: pd.DataFrame
    measurements: pd.DataFrame
    outcomes: pd.DataFrame
    defects: dict[str, Any]


def _days(dates: pd.Series) -> np.ndarray:
    """Epoch days of clean ISO dates (few distinct values: parsed once each)."""
    parsed = pd.to_datetime(dates, format="%Y-%m-%d", cache=True)
    return parsed.to_numpy().astype("datetime64[D]").astype(np.int64)


def _iso(days: np.ndarray) -> np.ndarray:
    return np.datetime_as_string(np.asarray(days, dtype=np.int64).astype("datetime64[D]")).astype(object)


class _Spoiler:
    """Book-keeping: disjoint patient groups, in-place edits, appended rows and the counts."""

    def __init__(
        self, patients: pd.DataFrame, measurements: pd.DataFrame, outcomes: pd.DataFrame, rng: np.random.Generator
    ) -> None:
        self.rng = rng
        self.n = len(patients)
        ids = pd.Index(patients["patient_id"].to_numpy())
        self.entry = _days(patients["entry_date"])
        self.end = _days(outcomes["date"]) - self.entry  # clean: one terminal row per patient, in order
        self.kind = outcomes["kind"].to_numpy()
        self.m = measurements.copy()
        self.m["_text"] = None  # text that replaces a number (unparseable values)
        self.m_patient = ids.get_indexer(self.m["patient_id"].to_numpy())
        self.m_day = _days(self.m["date"]) - self.entry[self.m_patient]
        self.m_variable, self.variable_names = pd.factorize(self.m["variable"])  # codes: cheap to test
        self.free = np.ones(self.n, dtype=bool)
        self.extra_m: list[pd.DataFrame] = []
        self.extra_m_key: list[np.ndarray] = []
        self.counts: dict[str, dict[str, int]] = {"patients": {}, "measurements": {}, "outcomes": {}}
        self.info: dict[str, int] = {}

    def size(self, defect: str) -> int:
        return max(1, round(RATES[defect] * self.n))

    def take_patients(self, defect: str, eligible: np.ndarray | None = None) -> np.ndarray:
        """Reserve patients for one defect (disjoint from every other defect)."""
        pool = self.free if eligible is None else self.free & eligible
        chosen = self.rng.permutation(np.flatnonzero(pool))[: self.size(defect)]
        if chosen.size == 0:
            raise ValueError(f"no patient left to receive the defect {defect!r}; use more patients")
        self.free[chosen] = False
        return np.sort(chosen)

    def take_rows(self, defect: str, variables: tuple[str, ...]) -> np.ndarray:
        """One random measurement row (not on the entry day) of each of a fresh group of patients."""
        wanted = [i for i, name in enumerate(self.variable_names) if name in variables]
        ok = np.isin(self.m_variable, wanted) & (self.m_day >= 1)
        eligible = np.zeros(self.n, dtype=bool)
        eligible[self.m_patient[ok]] = True
        chosen = self.take_patients(defect, eligible)
        rows = np.flatnonzero(ok & np.isin(self.m_patient, chosen))
        rows = self.rng.permutation(rows)
        _, first = np.unique(self.m_patient[rows], return_index=True)
        return np.sort(rows[first])

    def add(self, table: str, state: RowState | str, k: int) -> None:
        bucket = self.counts[table]
        bucket[str(state)] = bucket.get(str(state), 0) + int(k)

    def append_m(self, rows: pd.DataFrame, patient_key: np.ndarray) -> None:
        self.extra_m.append(rows.reset_index(drop=True))
        self.extra_m_key.append(np.asarray(patient_key))


def spoil(
    patients: pd.DataFrame, measurements: pd.DataFrame, outcomes: pd.DataFrame, rng: np.random.Generator
) -> SpoiledTables:
    """Inject the messy defects into clean tables (which are not modified) and count them."""
    sp = _Spoiler(patients, measurements, outcomes, rng)
    m = sp.m
    rng_u = sp.rng.uniform

    # --- patients without follow-up: drop their outcome rows; their measurements become excluded
    no_fu = sp.take_patients("no_follow_up")
    sp.add("patients", RowState.NO_FOLLOW_UP, no_fu.size)
    sp.add("measurements", RowState.PATIENT_EXCLUDED, np.isin(sp.m_patient, no_fu).sum())
    dup_pat = sp.take_patients("patient_duplicate")
    sp.add("patients", RowState.EXACT_DUPLICATE, dup_pat.size)

    # --- in-place edits of one row per patient
    rows = sp.take_rows("m_implausible", ("nodule_volume", "suspicion_score", "serum_marker"))
    var = m["variable"].to_numpy()[rows]
    old = m["value"].to_numpy()[rows].astype(float)
    new = np.where(var == "suspicion_score", np.round(1.0 + rng_u(0.05, 0.9, rows.size), 3), -np.abs(old))
    m.loc[m.index[rows], "value"] = new
    sp.add("measurements", RowState.IMPLAUSIBLE_VALUE, rows.size)

    rows = sp.take_rows("m_unknown_unit", ("serum_marker",))
    m.loc[m.index[rows], "unit"] = UNKNOWN_UNIT
    sp.add("measurements", RowState.UNKNOWN_UNIT, rows.size)

    rows = sp.take_rows("m_cm3", ("nodule_volume",))
    m.loc[m.index[rows], "value"] = m["value"].to_numpy()[rows].astype(float) / 1000.0
    m.loc[m.index[rows], "unit"] = "cm3"
    sp.info["nodule_volume_rows_in_cm3"] = int(rows.size)

    rows = sp.take_rows("m_ug_per_l", ("serum_marker",))
    m.loc[m.index[rows], "unit"] = "ug/L"
    sp.info["serum_marker_rows_in_ug_per_L"] = int(rows.size)

    rows = sp.take_rows("m_bad_date", ("nodule_volume", "suspicion_score", "serum_marker"))
    m.loc[m.index[rows], "date"] = np.array(BAD_DATES, dtype=object)[np.arange(rows.size) % len(BAD_DATES)]
    sp.add("measurements", RowState.UNPARSEABLE_DATE, rows.size)

    rows = sp.take_rows("m_missing_value", ("nodule_volume", "suspicion_score", "serum_marker"))
    m.loc[m.index[rows], "value"] = np.nan
    sp.add("measurements", RowState.MISSING_REQUIRED, rows.size)

    rows = sp.take_rows("m_bad_value", ("nodule_volume", "suspicion_score", "serum_marker"))
    m.loc[m.index[rows], "_text"] = np.array(BAD_VALUES, dtype=object)[np.arange(rows.size) % len(BAD_VALUES)]
    sp.add("measurements", RowState.UNPARSEABLE_VALUE, rows.size)

    # --- appended measurement rows (copies of a template row, changed)
    rows = sp.take_rows("m_duplicate", ("nodule_volume", "suspicion_score", "serum_marker"))
    sp.append_m(m.iloc[rows], sp.m_patient[rows])
    sp.add("measurements", RowState.EXACT_DUPLICATE, rows.size)

    rows = sp.take_rows("m_same_day", ("nodule_volume", "suspicion_score", "serum_marker"))
    extra = m.iloc[rows].copy()
    old = extra["value"].to_numpy().astype(float)
    is_score = extra["variable"].to_numpy() == "suspicion_score"
    step = np.where(rng.random(rows.size) < 0.5, -1.0, 1.0)
    score = np.round(
        np.where(old + 0.02 * step > 1.0, old - 0.02, np.where(old + 0.02 * step < 0, old + 0.02, old + 0.02 * step)), 3
    )
    other = np.round(old * (1 + step * rng_u(0.03, 0.1, rows.size)), 2)
    other = np.where(other == old, old + 0.01, other)
    extra["value"] = np.where(is_score, score, other)
    sp.append_m(extra, sp.m_patient[rows])
    sp.add("measurements", RowState.SAME_DAY_MERGED, rows.size)

    rows = sp.take_rows("m_unknown_variable", ("nodule_volume",))
    extra = m.iloc[rows].copy()
    name, unit, source = UNKNOWN_VARIABLE
    extra["value"] = np.round(np.cbrt(6.0 * extra["value"].to_numpy().astype(float) / np.pi), 1)  # diameter, mm
    extra["variable"], extra["unit"], extra["source"] = name, unit, source
    sp.append_m(extra, sp.m_patient[rows])
    sp.add("measurements", RowState.UNKNOWN_VARIABLE, rows.size)

    rows = sp.take_rows("m_unknown_patient", ("nodule_volume", "suspicion_score", "serum_marker"))
    extra = m.iloc[rows].copy()
    extra["patient_id"] = [f"X{int(i):06d}" for i in sp.m_patient[rows] + 1]
    sp.append_m(extra, sp.m_patient[rows])
    sp.add("measurements", RowState.UNKNOWN_PATIENT, rows.size)

    rows = sp.take_rows("m_before_lookback", ("nodule_volume", "serum_marker"))
    extra = m.iloc[rows].copy()
    back = rng.integers(LOOKBACK_DAYS + 20, 3 * LOOKBACK_DAYS + 400, rows.size)
    extra["date"] = _iso(sp.entry[sp.m_patient[rows]] - back)
    sp.append_m(extra, sp.m_patient[rows])
    sp.add("measurements", RowState.BEFORE_LOOKBACK, rows.size)

    rows = sp.take_rows("m_within_lookback", ("serum_marker",))
    extra = m.iloc[rows].copy()
    back = rng.integers(1, LOOKBACK_DAYS - 10, rows.size)
    extra["date"] = _iso(sp.entry[sp.m_patient[rows]] - back)
    sp.append_m(extra, sp.m_patient[rows])
    sp.info["serum_marker_rows_before_entry_within_lookback"] = int(rows.size)

    # values after the outcome: prefer patients whose follow-up ended with the outcome
    is_outcome = np.zeros(sp.n, dtype=bool)
    is_outcome[sp.kind == "outcome"] = True
    if (is_outcome & sp.free).sum() >= sp.size("m_after_follow_up"):
        chosen = sp.take_patients("m_after_follow_up", is_outcome)
    else:
        chosen = sp.take_patients("m_after_follow_up")
    pick = sp.rng.permutation(np.flatnonzero(np.isin(sp.m_patient, chosen)))
    _, first = np.unique(sp.m_patient[pick], return_index=True)
    rows = np.sort(pick[first])
    extra = m.iloc[rows].copy()
    later = rng.integers(1, 400, rows.size)
    extra["date"] = _iso(sp.entry[sp.m_patient[rows]] + sp.end[sp.m_patient[rows]] + later)
    sp.append_m(extra, sp.m_patient[rows])
    sp.add("measurements", RowState.AFTER_FOLLOW_UP, rows.size)

    # --- outcomes
    o = outcomes.copy()
    o_key = [np.arange(sp.n)]
    o_extra: list[pd.DataFrame] = []

    later_pat = sp.take_patients("o_later_event")
    extra = outcomes.iloc[later_pat].copy()
    was_outcome = extra["kind"].to_numpy() == "outcome"
    extra["kind"] = np.where(was_outcome, "competing", "end_of_follow_up")
    extra["detail"] = np.where(was_outcome, "death from another cause", "discharged from surveillance")
    extra["date"] = _iso(sp.entry[later_pat] + sp.end[later_pat] + rng.integers(30, 900, later_pat.size))
    o_extra.append(extra)
    o_key.append(later_pat)
    sp.add("outcomes", RowState.LATER_EVENT, later_pat.size)

    dup = sp.take_patients("o_duplicate")
    o_extra.append(outcomes.iloc[dup].copy())
    o_key.append(dup)
    sp.add("outcomes", RowState.EXACT_DUPLICATE, dup.size)

    unk = sp.take_patients("o_unknown_patient")
    extra = outcomes.iloc[unk].copy()
    extra["patient_id"] = [f"X{int(i):06d}" for i in unk + 1]
    o_extra.append(extra)
    o_key.append(unk)
    sp.add("outcomes", RowState.UNKNOWN_PATIENT, unk.size)

    kind_pat = sp.take_patients("o_unknown_kind", sp.end >= 2)
    extra = outcomes.iloc[kind_pat].copy()
    extra["kind"], extra["detail"] = UNKNOWN_KIND, "moved to another hospital"
    extra["date"] = _iso(sp.entry[kind_pat] + rng.integers(1, sp.end[kind_pat]))
    o_extra.append(extra)
    o_key.append(kind_pat)
    sp.add("outcomes", RowState.UNKNOWN_KIND, kind_pat.size)

    bad = sp.take_patients("o_bad_date")
    extra = outcomes.iloc[bad].copy()
    extra["kind"], extra["detail"] = "end_of_follow_up", "end of follow-up"
    extra["date"] = np.array(BAD_DATES, dtype=object)[np.arange(bad.size) % len(BAD_DATES)]
    o_extra.append(extra)
    o_key.append(bad)
    sp.add("outcomes", RowState.UNPARSEABLE_DATE, bad.size)

    keep_o = ~np.isin(np.arange(sp.n), no_fu)
    o_all = pd.concat([o.iloc[keep_o]] + o_extra, ignore_index=True)
    order = np.argsort(np.concatenate([o_key[0][keep_o]] + o_key[1:]), kind="stable")
    o_all = o_all.iloc[order].reset_index(drop=True)
    sp.counts["outcomes"][str(RowState.USED)] = int(keep_o.sum())

    m_all = pd.concat([m] + sp.extra_m, ignore_index=True)
    order = np.argsort(np.concatenate([sp.m_patient] + sp.extra_m_key), kind="stable")
    m_all = m_all.iloc[order].reset_index(drop=True)
    # one text type for the whole value column (it holds numbers, blanks and text)
    # one text type for the whole value column (numbers as their shortest round-trip text, blanks, text)
    text = m_all["value"].astype(str).to_numpy(dtype=object)
    text[m_all["value"].isna().to_numpy()] = None
    override = m_all["_text"].notna().to_numpy()
    text[override] = m_all["_text"].to_numpy()[override]
    m_all["value"] = text
    m_all = m_all.drop(columns="_text")
    excluded = sum(sp.counts["measurements"].values())
    sp.counts["measurements"][str(RowState.USED)] = int(len(m_all) - excluded)

    p_all = pd.concat([patients, patients.iloc[dup_pat]], ignore_index=True)
    order = np.argsort(np.concatenate([np.arange(sp.n), dup_pat]), kind="stable")
    p_all = p_all.iloc[order].reset_index(drop=True)
    sp.counts["patients"][str(RowState.USED)] = int(sp.n - no_fu.size)

    defects = {
        "patients": dict(sorted(sp.counts["patients"].items())),
        "measurements": dict(sorted(sp.counts["measurements"].items())),
        "outcomes": dict(sorted(sp.counts["outcomes"].items())),
        "informational": sp.info,
        "assumptions": assumptions(),
    }
    return SpoiledTables(p_all, m_all, o_all, defects)


def assumptions() -> dict[str, Any]:
    """Settings of the demo cohort spec under which the defect counts are exact."""
    return {
        "lookback_days": LOOKBACK_DAYS,
        "same_day_rule": "mean",
        "max_carry_days": 1095,
        "plausible_ranges": {k: list(v) for k, v in PLAUSIBLE_RANGES.items()},
        "plausible_range_units": {"nodule_volume": "mm3", "suspicion_score": "1", "serum_marker": "ng/mL"},
        "unit_conversions": UNIT_CONVERSIONS,
        "variables": ["nodule_volume", "suspicion_score", "serum_marker"],
        "outcome_kinds": ["outcome", "competing", "end_of_follow_up"],
        "rules": [
            "each excluded row has exactly one defect, so the order of checks does not matter",
            "exact duplicates: the first copy is used, later copies are exact_duplicate",
            "a conflicting same-day group of k rows: 1 used, k-1 same_day_merged",
            "measurement rows dated on the end-of-follow-up day are used (not after follow-up)",
            "values dated before entry within lookback_days are used (known at entry)",
            "a patient with no outcome row is no_follow_up; all its measurement rows are patient_excluded",
        ],
    }
