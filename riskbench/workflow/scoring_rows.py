"""Rows to score: covariates as known at a landmark or a calendar date, and per-row flags for a saved model.

At common landmarks the rows are the cohort stage's own landmark stack (the run's rows exactly). At a calendar
date every patient has its own s (days from entry to the date); the row is the counting-process row with
``start <= s < stop`` and the clocks (staleness, days since exam, current age) advanced from ``start`` to s,
the rule of :func:`riskbench.cohort.landmark.landmark_sql`. A patient whose follow-up ended before s (or at s with
an event) has no row.
"""

from __future__ import annotations

import datetime
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd

from riskbench.cohort import Cohort
from riskbench.cohort.spec import CohortSpec
from riskbench.models.risk_contract import ModelInputError, covariate_values
from riskbench.time_units import DAYS_PER_YEAR

__all__ = ["FLAG_COLUMNS", "parse_date", "row_flags", "rows_at_dates", "rows_at_landmarks"]

#: The per-row flag columns of a prediction (each a ``;``-separated list of covariate or variable names).
FLAG_COLUMNS = ("outside_development_range", "older_than_carry_forward", "missing_covariates")


def rows_at_landmarks(cohort: Cohort, landmarks_days: Sequence[float], window_days: float) -> pd.DataFrame:
    """The landmark stack's rows (outcome columns dropped): covariates as known at each landmark (days)."""
    stack = cohort.landmark_stack(list(landmarks_days), window_days)
    return stack.drop(columns=[c for c in ("time", "status") if c in stack.columns])


def parse_date(value: Any) -> datetime.date:
    """A calendar date from a date, datetime or ISO text (``YYYY-MM-DD``)."""
    if isinstance(value, datetime.datetime):
        return value.date()
    if isinstance(value, datetime.date):
        return value
    try:
        return datetime.date.fromisoformat(str(value).strip())
    except ValueError:
        raise ModelInputError(f"prediction date {value!r} is not a date; write it as YYYY-MM-DD.") from None


def _clock_columns(spec: CohortSpec) -> set[str]:
    clocks = {v.staleness_column for v in spec.variables}
    if spec.exam_variables:
        clocks.add("days_since_exam")
    return clocks


def rows_at_dates(cohort: Cohort, at_date: Any) -> pd.DataFrame:
    """Covariates as known at a calendar date (one date, or ``{patient_id: date}``) for each patient.

    Returns ``patient_id, landmark`` (days from entry to the date), ``prediction_date`` and the covariate
    columns. A patient whose follow-up ends on the date without an event (last seen that day, e.g. the day the
    data were extracted) gets the values known then; a value dated that very day is not among them (the cohort
    rule: a value dated at the end of follow-up never enters a row). Patients whose follow-up ended before the
    date, or with an event on it, and dates before entry are left out.
    """
    patients = cohort.patients[["patient_id", "entry_date", "end_days", "end_status"]].copy()
    if isinstance(at_date, Mapping):
        dates = {str(k): parse_date(v) for k, v in at_date.items()}
        patients = patients[patients["patient_id"].astype(str).isin(dates)]
        patients["prediction_date"] = [dates[str(p)] for p in patients["patient_id"]]
    else:
        patients["prediction_date"] = parse_date(at_date)
    entry = pd.to_datetime(patients["entry_date"])
    patients["landmark"] = (pd.to_datetime(patients["prediction_date"]) - entry).dt.days.astype(float)
    # still followed at s: follow-up ends after s, or ends at s without an outcome or competing event (last seen
    # on the prediction date: the row ending there gives the values known at s)
    last_seen = (patients["landmark"] == patients["end_days"]) & (patients["end_status"] == 0)
    patients = patients[(patients["landmark"] >= 0) & ((patients["landmark"] < patients["end_days"]) | last_seen)]
    cp = cohort.counting_process
    merged = cp.merge(patients[["patient_id", "landmark", "prediction_date", "end_days"]], on="patient_id", how="inner")
    inside = (merged["start"] <= merged["landmark"]) & (merged["landmark"] < merged["stop"])
    at_end = (merged["stop"] == merged["landmark"]) & (merged["stop"] == merged["end_days"])
    merged = merged[inside | at_end]
    advance = merged["landmark"] - merged["start"]
    for column in _clock_columns(cohort.spec):
        if column in merged.columns:
            merged[column] = merged[column] + advance
    if cohort.spec.current_age and "age" in merged.columns:
        merged["age"] = merged["age"] + advance / DAYS_PER_YEAR
    columns = ["patient_id", "landmark", "prediction_date", *cohort.spec.covariate_columns]
    return merged[[c for c in columns if c in merged.columns]].reset_index(drop=True)


def _joined(mask: np.ndarray, names: Sequence[str]) -> list[str]:
    return [";".join(n for n, bad in zip(names, row) if bad) for row in mask]


def row_flags(
    rows: pd.DataFrame,
    covariates: Sequence[str],
    ranges: Mapping[str, Mapping[str, Any]],
    spec: CohortSpec,
    max_carry_days: float | None,
) -> pd.DataFrame:
    """The flag columns of :data:`FLAG_COLUMNS` for each row.

    ``outside_development_range``: covariates whose value lies outside the development minimum..maximum (or
    is not one of the values of a 0/1 covariate); ``older_than_carry_forward``: variables of the model whose
    last value at s is older than the carry-forward limit (their covariate is then missing);
    ``missing_covariates``: covariates with no value at s.
    """
    names = list(covariates)
    x = covariate_values(rows, names, what="rows to predict", allow_missing=True)
    outside = np.zeros(x.shape, dtype=bool)
    for j, name in enumerate(names):
        entry = ranges.get(name) or {}
        low, high = entry.get("min"), entry.get("max")
        with np.errstate(invalid="ignore"):
            if low is not None:
                outside[:, j] |= x[:, j] < float(low)
            if high is not None:
                outside[:, j] |= x[:, j] > float(high)
            if entry.get("values") is not None:
                outside[:, j] |= np.isfinite(x[:, j]) & ~np.isin(x[:, j], entry["values"])
    variables = [
        v
        for v in spec.variables
        if set(names)
        & {v.column, f"{v.column}_change", v.previous_column, f"{v.column}_slope_per_year", v.staleness_column}
    ]
    stale = np.zeros((len(rows), len(variables)), dtype=bool)
    if max_carry_days is not None:
        for j, v in enumerate(variables):
            if v.staleness_column in rows.columns:
                age = pd.to_numeric(rows[v.staleness_column], errors="coerce").to_numpy(float)
                with np.errstate(invalid="ignore"):
                    stale[:, j] = age > max_carry_days
    return pd.DataFrame(
        {
            "outside_development_range": _joined(outside, names),
            "older_than_carry_forward": _joined(stale, [v.name for v in variables]),
            "missing_covariates": _joined(np.isnan(x), names),
        }
    )
