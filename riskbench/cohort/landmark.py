"""The landmark stack: for each landmark s, the patients at risk at s with covariates as known at s.

The covariates at s come from the counting-process row with ``start <= s < stop`` (an as-of join), so the
stack and the counting-process table use the same leakage rule: a value dated d is known from d on, and rows
are split at every value date and carry-forward expiry, so nothing changes inside a row except the clocks
(staleness, time since exam, current age), which are advanced from ``start`` to s.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from riskbench.cohort.errors import CohortInputError
from riskbench.cohort.reading import quote
from riskbench.cohort.spec import DAYS_PER_YEAR, CohortSpec


def landmark_grid(every_days: float, up_to_days: float, *, start_days: float = 0.0) -> list[float]:
    """Landmarks ``start_days, start_days + every_days, ...`` up to and including ``up_to_days`` (days)."""
    if every_days <= 0:
        raise ValueError(f"landmark spacing must be > 0 days, got {every_days!r}")
    return [float(x) for x in np.arange(start_days, up_to_days + 1e-9 * every_days, every_days)]


def landmark_sql(spec: CohortSpec, landmarks_days: Sequence[float], horizon_days: float) -> str:
    """SQL selecting the landmark stack from the DuckDB tables ``cp`` and ``pat``."""
    marks = [float(s) for s in landmarks_days]
    if not marks:
        raise CohortInputError("landmark_stack needs at least one landmark (days since entry)")
    if any(not np.isfinite(s) or s < 0 for s in marks) or len(set(marks)) != len(marks):
        raise CohortInputError(f"landmarks must be distinct finite days >= 0, got {list(landmarks_days)}")
    if not (np.isfinite(horizon_days) and horizon_days > 0):
        raise CohortInputError(f"horizon must be a positive number of days, got {horizon_days!r}")
    w = float(horizon_days)
    clocks = {v.staleness_column for v in spec.variables}
    if spec.exam_variables:
        clocks.add("days_since_exam")
    covs = []
    for c in spec.covariate_columns:
        if c in clocks:
            covs.append(f"cp.{quote(c)} + (cp.landmark - cp.start) AS {quote(c)}")
        elif c == "age" and spec.current_age:
            covs.append(f"cp.age + (cp.landmark - cp.start) / {DAYS_PER_YEAR} AS age")
        else:
            covs.append(f"cp.{quote(c)}")
    # Rows of a patient tile (0, end] without gaps, so the row with start <= s < stop is the as-of row at s
    # and exists exactly when the patient is still at risk at s (end > s): one range join against the
    # landmarks, so the table is scanned once whatever their number. Both keys of the final sort are
    # numbers (pidx follows the order of patient_id).
    marks_sql = ", ".join(f"({s!r}::DOUBLE)" for s in marks)
    return f"""
        SELECT cp.patient_id, cp.landmark,
            least(p.end_days, cp.landmark + {w!r}) - cp.landmark AS time,
            CAST(CASE WHEN p.end_days <= cp.landmark + {w!r} THEN p.end_status ELSE 0 END AS TINYINT) AS status,
            {", ".join(covs)}
        FROM (SELECT m.landmark, cp.* FROM cp JOIN (VALUES {marks_sql}) m(landmark)
              ON cp.start <= m.landmark AND cp.stop > m.landmark) cp
        JOIN pat p ON p.patient_id = cp.patient_id
        ORDER BY cp.landmark, p.pidx"""
