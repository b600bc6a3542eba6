"""The counting-process table: ``(start, stop]`` rows per patient with covariates as known at ``start``.

How it is built (all in DuckDB, out of core, on integer patient and variable keys):

1. the patient's timeline holds day 0, every day with a used value (look-back history before day 0
   included) and every day at which a value runs out of carry-forward (it is the latest value of its
   variable and becomes ``max_carry_days`` old before the next one arrives);
2. one window pass over the timeline per patient takes, at each time t, the last value of each variable dated
   on or before t (a value dated d is known from d on) with its date, first value and slope, and the exam
   count;
3. rows start at every timeline time in [0, end) and stop at the next one (or at the end of follow-up,
   where the row carries the patient's terminal status).

So a row ``(start, stop]`` never uses a value dated after ``start``: the leakage rule of DESIGN.md.
A value is usable at ``start`` while ``start - date < max_carry_days``; splitting at the exact expiry time
means the hazard at any t in the row sees a value at most ``max_carry_days`` old.
"""

from __future__ import annotations

import duckdb

from riskbench.cohort.reading import quote
from riskbench.cohort.spec import DAYS_PER_YEAR, CohortSpec


def build_counting_process(con: duckdb.DuckDBPyConnection, spec: CohortSpec) -> None:
    """Create the DuckDB table ``cp`` (the counting-process table) from ``pat`` and ``meas``."""
    carry = spec.max_carry_days
    index = {v.name: i for i, v in enumerate(spec.variables)}
    exam_list = ", ".join(str(index[v]) for v in spec.exam_variables) or "NULL"
    slope_cases = [
        f"WHEN {i} THEN regr_slope(m.x, m.day) OVER (PARTITION BY m.pidx, m.vidx ORDER BY m.day "
        f"RANGE BETWEEN {v.slope_window_days!r} PRECEDING AND CURRENT ROW) * {DAYS_PER_YEAR}"
        for i, v in enumerate(spec.variables) if v.slope]
    slope_sql = f"CASE m.vidx {' '.join(slope_cases)} END" if slope_cases else "NULL::DOUBLE"
    # Values dated at or after the end never enter a row (rows start before the end).
    con.execute(f"""
        CREATE TEMP TABLE mv AS SELECT m.pidx, m.day, m.vidx, m.x,
            first_value(m.x) OVER w AS x_first, {slope_sql} AS slope,
            lead(m.day) OVER w AS next_day, p.end_days
        FROM meas m JOIN pat p USING (pidx) WHERE m.day < p.end_days
        WINDOW w AS (PARTITION BY m.pidx, m.vidx ORDER BY m.day)""")
    expiry = ""
    if carry is not None:
        expiry = f"""
            UNION ALL SELECT pidx, day + {carry!r}, NULL, NULL, NULL, NULL, FALSE FROM mv
            WHERE (next_day IS NULL OR next_day > day + {carry!r}) AND day + {carry!r} > 0
              AND day + {carry!r} < end_days"""
    pivots = ", ".join(f"max({c}) FILTER (WHERE vidx = {i}) AS {c}{i}"
                       for i in range(len(spec.variables)) for c in ("x", "x_first", "slope"))
    con.execute(f"""
        CREATE TEMP TABLE timeline AS SELECT pidx, t, {pivots}, bool_or(is_exam) AS is_exam
        FROM (
            SELECT pidx, day AS t, vidx, x, x_first, slope, vidx IN ({exam_list}) AS is_exam FROM mv
            UNION ALL SELECT pidx, 0.0::DOUBLE, NULL, NULL, NULL, NULL, FALSE FROM pat{expiry}
        ) GROUP BY pidx, t""")
    window_cols = []
    for i in range(len(spec.variables)):
        window_cols += [f"last_value(x{i} IGNORE NULLS) OVER w AS x{i}",
                        f"last_value(CASE WHEN x{i} IS NOT NULL THEN t END IGNORE NULLS) OVER w AS d{i}",
                        f"last_value(x_first{i} IGNORE NULLS) OVER w AS f{i}",
                        f"last_value(slope{i} IGNORE NULLS) OVER w AS s{i}"]
    window_cols += [
        "sum(CASE WHEN is_exam THEN 1 ELSE 0 END) OVER w AS n_exams_",
        "last_value(CASE WHEN is_exam THEN t END IGNORE NULLS) OVER w AS last_exam",
        "lead(t) OVER w AS next_t",
    ]
    outputs = []
    for i, v in enumerate(spec.variables):
        fresh = "TRUE" if carry is None else f"(start - d{i} < {carry!r})"
        outputs.append(f"CASE WHEN {fresh} THEN x{i} END AS {quote(v.column)}")
        if v.change:
            outputs.append(f"CASE WHEN {fresh} THEN x{i} - f{i} END AS {quote(v.column + '_change')}")
        if v.slope:
            outputs.append(f"CASE WHEN {fresh} THEN s{i} END AS {quote(v.column + '_slope_per_year')}")
        outputs.append(f"start - d{i} AS {quote(v.staleness_column)}")
    if spec.exam_variables:
        outputs += ["start - last_exam AS days_since_exam", "CAST(coalesce(n_exams_, 0) AS INTEGER) AS n_exams"]
    if spec.current_age:
        outputs.append(f"p.entry_age_years + start / {DAYS_PER_YEAR} AS age")
    outputs += [f"p.{quote(c)}" for c in spec.static]
    con.execute(f"""
        CREATE TEMP TABLE cp AS SELECT p.patient_id, start, coalesce(next_t, p.end_days) AS stop,
            CAST(CASE WHEN next_t IS NULL THEN p.end_status ELSE 0 END AS TINYINT) AS status,
            {', '.join(outputs)}
        FROM (SELECT pidx, t AS start, {', '.join(window_cols)} FROM timeline
              WINDOW w AS (PARTITION BY pidx ORDER BY t ROWS BETWEEN UNBOUNDED PRECEDING AND CURRENT ROW)) w
        JOIN pat p USING (pidx)
        WHERE start >= 0
        ORDER BY w.pidx, start""")
