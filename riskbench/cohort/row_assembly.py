"""Vectorised assembly of counting-process rows from one block of patients' sorted values (numpy).

Input: every used value (and one marker row at day 0 per patient) sorted by patient, day, variable. The last
value of each variable known at t is a forward fill within the patient (a value dated d is known from d on);
rows start at each distinct day >= 0 and stop at the next one or at the end of follow-up; a row inside which a
value becomes ``max_carry_days`` old is cut there. Every step is O(n) array work after the sort.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from riskbench.cohort.spec import DAYS_PER_YEAR, CohortSpec


@dataclass(frozen=True)
class ValueBlock:
    """Sorted values of a block of patients: ``patient`` (local index 0..m-1), ``day``, ``var`` (variable
    index, -1 for the day-0 marker), ``x``, ``slope``, ``exam_day`` (true once per exam date)."""

    patient: np.ndarray
    day: np.ndarray
    var: np.ndarray
    x: np.ndarray
    slope: np.ndarray
    exam_day: np.ndarray


def exam_dates(patient: np.ndarray, day: np.ndarray, var: np.ndarray, exam_ids: list[int]) -> np.ndarray:
    """True on exactly one row of each exam date (a date with a value of any exam variable) of sorted rows."""
    is_exam = np.zeros(var.size, dtype=bool)
    for i in exam_ids:  # a few variables: one comparison each beats a general set lookup
        is_exam |= var == i
    rows = np.flatnonzero(is_exam)
    p, t = patient[rows], day[rows]
    first = np.r_[True, (p[1:] != p[:-1]) | (t[1:] != t[:-1])] if rows.size else np.zeros(0, bool)
    out = np.zeros(patient.size, dtype=bool)
    out[rows[first]] = True
    return out


def _last_index(mask: np.ndarray, positions: np.ndarray, start_of_patient: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """For each row, the index of the last row at or before it (same patient) where ``mask``; and validity.

    ``positions`` is ``arange(n)`` in a small integer type (half the memory traffic of 64-bit indices).
    """
    idx = np.where(mask, positions, -1)
    np.maximum.accumulate(idx, out=idx)
    valid = idx >= start_of_patient
    idx[~valid] = 0
    return idx, valid


def _previous_value(
    mask: np.ndarray,
    positions: np.ndarray,
    start_of_patient: np.ndarray,
    x: np.ndarray,
    idx: np.ndarray,
    valid: np.ndarray,
) -> np.ndarray:
    """For rows whose last ``mask`` row is ``idx`` (where ``valid``), the value of the ``mask`` row before it
    (same patient); NaN when there is none. Sorted rows hold one value per variable and time."""
    before = np.where(mask, positions, -1)
    np.maximum.accumulate(before, out=before)
    before = np.r_[-1, before[:-1]]  # last mask row strictly before each row
    has = valid & (before[idx] >= start_of_patient[idx])
    return np.where(has, x[np.where(has, before[idx], 0)], np.nan)


def assemble_rows(block: ValueBlock, end_days: np.ndarray, spec: CohortSpec) -> dict[str, np.ndarray]:
    """Counting-process rows of one block.

    Parameters
    ----------
    block : ValueBlock
        Sorted values; every patient 0..m-1 has its day-0 marker row.
    end_days : ndarray
        End of follow-up per local patient index (days since entry, > 0).
    spec : CohortSpec

    Returns
    -------
    dict of ndarray
        ``patient, start, stop, last_row`` and, per variable i, ``x{i}, d{i}`` (value and its date, NaN when
        none), ``f{i}`` (first value) when the spec asks for change, ``s{i}`` (slope) when it asks for slope,
        ``p{i}`` (the value before the last one) when it asks for the previous value,
        ``n_exams, last_exam`` when there are exam variables. Values are those known at the row's start,
        before the carry-forward rule (applied by the caller from ``d{i}``).
    """
    p, t, v = block.patient, block.day, block.var
    n = p.size
    positions = np.arange(n, dtype=np.int32 if n < 2**31 else np.int64)
    new_patient = np.r_[True, p[1:] != p[:-1]]
    start_of_patient = np.where(new_patient, positions, 0)
    np.maximum.accumulate(start_of_patient, out=start_of_patient)
    # The last row of each (patient, day) has seen every value of that day.
    keep = np.r_[new_patient[1:] | (t[1:] != t[:-1]), True] & (t >= 0)
    rows = np.flatnonzero(keep)
    pk, start = p[rows], t[rows]
    last_row = np.r_[pk[1:] != pk[:-1], True]
    stop = np.where(last_row, end_days[pk], np.r_[start[1:], 0.0])
    out: dict[str, np.ndarray] = {"patient": pk, "start": start, "stop": stop, "last_row": last_row}
    starts = np.flatnonzero(new_patient)
    ordinal = np.cumsum(new_patient) - 1
    for i, var in enumerate(spec.variables):
        is_var = v == i
        idx, valid = _last_index(is_var, positions, start_of_patient)
        idx, valid = idx[rows], valid[rows]
        out[f"x{i}"] = np.where(valid, block.x[idx], np.nan)
        out[f"d{i}"] = np.where(valid, t[idx], np.nan)
        if var.change:
            first = np.minimum.reduceat(np.where(is_var, positions, n - 1), starts)[ordinal[rows]]
            out[f"f{i}"] = np.where(valid, block.x[first], np.nan)
        if var.slope:
            out[f"s{i}"] = np.where(valid, block.slope[idx], np.nan)
        if var.previous:
            out[f"p{i}"] = _previous_value(is_var, positions, start_of_patient, block.x, idx, valid)
    if spec.exam_variables:
        counted = np.cumsum(block.exam_day)
        before = (counted - block.exam_day)[start_of_patient]
        out["n_exams"] = (counted - before)[rows]
        idx, valid = _last_index(block.exam_day, positions, start_of_patient)
        out["last_exam"] = np.where(valid[rows], t[idx[rows]], np.nan)
    if spec.max_carry_days is not None and spec.variables:
        out = _cut_at_expiry(out, spec.max_carry_days, len(spec.variables))
    return out


def _cut_at_expiry(rows: Mapping[str, np.ndarray], carry: float, n_var: int) -> dict[str, np.ndarray]:
    """Cut each row at the moments (strictly inside it) when a value becomes ``carry`` days old."""
    start, stop = rows["start"], rows["stop"]
    cut = np.zeros(start.size, dtype=bool)
    for i in range(n_var):
        expiry = rows[f"d{i}"] + carry
        cut |= (expiry > start) & (expiry < stop)  # NaN compares False
    if not cut.any():
        return dict(rows)
    # Only the rows that are cut (a small share) need the per-variable expiry times side by side.
    expiry = np.column_stack([rows[f"d{i}"][cut] + carry for i in range(n_var)])
    inside = (expiry > start[cut, None]) & (expiry < stop[cut, None])
    times = np.where(inside, expiry, np.inf)
    times.sort(axis=1)
    distinct = np.isfinite(times) & np.c_[np.ones(len(times), bool), times[:, 1:] != times[:, :-1]]
    pieces = np.ones(start.size, dtype=np.int64)
    pieces[cut] += distinct.sum(axis=1)
    src = np.repeat(np.arange(start.size), pieces)
    first_piece = np.r_[True, src[1:] != src[:-1]]
    last_piece = np.r_[src[1:] != src[:-1], True]
    piece_start = start[src].copy()
    piece_start[~first_piece] = times[distinct]  # row-major order = the pieces' order within each row
    piece_stop = np.where(last_piece, stop[src], np.r_[piece_start[1:], 0.0])
    out = {k: a.take(src) for k, a in rows.items()}  # take: a plain gather, quicker than fancy indexing
    out.update(start=piece_start, stop=piece_stop, last_row=rows["last_row"][src] & last_piece)
    return out


def covariate_columns(
    rows: Mapping[str, np.ndarray], spec: CohortSpec, entry_age: np.ndarray, statics: Mapping[str, np.ndarray]
) -> dict[str, np.ndarray]:
    """The covariate columns (``spec.covariate_columns`` order) of assembled rows, carry rule applied."""
    start, patient = rows["start"], rows["patient"]
    carry = np.inf if spec.max_carry_days is None else spec.max_carry_days
    cols: dict[str, np.ndarray] = {}
    for i, v in enumerate(spec.variables):
        age_of_value = start - rows[f"d{i}"]
        fresh = age_of_value < carry  # NaN (never measured) is not fresh
        cols[v.column] = np.where(fresh, rows[f"x{i}"], np.nan)
        if v.change:
            cols[f"{v.column}_change"] = np.where(fresh, rows[f"x{i}"] - rows[f"f{i}"], np.nan)
        if v.slope:
            cols[f"{v.column}_slope_per_year"] = np.where(fresh, rows[f"s{i}"], np.nan)
        if v.previous:
            cols[v.previous_column] = np.where(fresh, rows[f"p{i}"], np.nan)
        cols[v.staleness_column] = age_of_value
    if spec.exam_variables:
        cols["days_since_exam"] = start - rows["last_exam"]
        cols["n_exams"] = rows["n_exams"].astype(np.int32)
    if spec.current_age:
        cols["age"] = entry_age[patient] + start / DAYS_PER_YEAR
    for name in spec.static_columns:
        cols[name] = statics[name][patient]
    return cols
