"""The counting-process table: ``(start, stop]`` rows per patient with covariates as known at ``start``.

How it is built (all in DuckDB, out of core):

1. the patient's timeline holds day 0, every day with a used value (look-back history before day 0
   included) and every day at which a value runs out of carry-forward (it is the latest value of its
   variable and becomes ``max_carry_days`` old before the next one arrives);
2. one window pass over the timeline per patient takes, at each time t, the last value of each variable dated
   on or before t (a value dated d is known from d on), its date, the first value, and exam counts;
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


def _col(prefix: str, index: int) -> str:
    return f"{prefix}{index}"


def build_counting_process(con: duckdb.DuckDBPyConnection, spec: CohortSpec) -> None:
    """Create the DuckDB table ``cp`` (the counting-process table) from ``pat`` and ``meas``."""
    carry = spec.max_carry_days
    exam_list = ", ".join("'" + v.replace("'", "''") + "'" for v in spec.exam_variables) or "NULL"
    slope_cases = []
    for v in spec.variables:
        if v.slope:
            slope_cases.append(
                f"WHEN '{v.name}' THEN regr_slope(m.x, m.day) OVER (PARTITION BY m.patient_id, m.variable "
                f"ORDER BY m.day RANGE BETWEEN {v.slope_window_days!r} PRECEDING AND CURRENT ROW) * {DAYS_PER_YEAR}")
    slope_sql = f"CASE m.variable {' '.join(slope_cases)} END" if slope_cases else "NULL::DOUBLE"
    # Values dated at or after the end never enter a row (rows start before the end).
    con.execute(f"""
        CREATE TEMP TABLE mv AS SELECT m.patient_id, m.day, m.variable, m.x,
            first_value(m.x) OVER w AS x_first,
            lead(m.day) OVER w AS next_day,
            {slope_sql} AS slope
        FROM meas m JOIN pat p USING (patient_id) WHERE m.day < p.end_days
        WINDOW w AS (PARTITION BY m.patient_id, m.variable ORDER BY m.day)""")
    expiry = ""
    if carry is not None:
        expiry = f"""
            UNION ALL SELECT m.patient_id, m.day + {carry!r}, NULL, NULL, NULL, NULL, FALSE
            FROM mv m JOIN pat p USING (patient_id)
            WHERE (m.next_day IS NULL OR m.next_day > m.day + {carry!r})
              AND m.day + {carry!r} > 0 AND m.day + {carry!r} < p.end_days"""
    pivots = []
    for i, v in enumerate(spec.variables):
        name = "'" + v.name.replace("'", "''") + "'"
        pivots.append(f"max(x) FILTER (WHERE variable = {name}) AS {_col('x', i)}")
        pivots.append(f"max(x_first) FILTER (WHERE variable = {name}) AS {_col('f', i)}")
        pivots.append(f"max(slope) FILTER (WHERE variable = {name}) AS {_col('s', i)}")
    con.execute(f"""
        CREATE TEMP TABLE timeline AS SELECT patient_id, t, {', '.join(pivots)}, bool_or(is_exam) AS is_exam
        FROM (
            SELECT patient_id, day AS t, variable, x, x_first, slope, variable IN ({exam_list}) AS is_exam FROM mv
            UNION ALL SELECT patient_id, 0.0::DOUBLE, NULL, NULL, NULL, NULL, FALSE FROM pat{expiry}
        ) GROUP BY patient_id, t""")
    window_cols = []
    for i in range(len(spec.variables)):
        x, f, s = _col("x", i), _col("f", i), _col("s", i)
        window_cols += [
            f"last_value({x} IGNORE NULLS) OVER w AS l{x}",
            f"last_value(CASE WHEN {x} IS NOT NULL THEN t END IGNORE NULLS) OVER w AS d{x}",
            f"last_value({f} IGNORE NULLS) OVER w AS l{f}",
            f"last_value({s} IGNORE NULLS) OVER w AS l{s}",
        ]
    window_cols += [
        "sum(CASE WHEN is_exam THEN 1 ELSE 0 END) OVER w AS n_exams_",
        "last_value(CASE WHEN is_exam THEN t END IGNORE NULLS) OVER w AS last_exam",
        "lead(t) OVER w AS next_t",
    ]
    outputs = []
    for i, v in enumerate(spec.variables):
        x = _col("x", i)
        fresh = "TRUE" if carry is None else f"(start - d{x} < {carry!r})"
        value = f"CASE WHEN {fresh} THEN l{x} END"
        outputs.append(f"{value} AS {quote(v.column)}")
        if v.change:
            outputs.append(f"CASE WHEN {fresh} THEN l{x} - l{_col('f', i)} END AS {quote(v.column + '_change')}")
        if v.slope:
            outputs.append(f"CASE WHEN {fresh} THEN l{_col('s', i)} END AS {quote(v.column + '_slope_per_year')}")
        outputs.append(f"start - d{x} AS {quote(v.staleness_column)}")
    if spec.exam_variables:
        outputs += ["start - last_exam AS days_since_exam", "CAST(coalesce(n_exams_, 0) AS INTEGER) AS n_exams"]
    if spec.current_age:
        outputs.append(f"p.entry_age_years + start / {DAYS_PER_YEAR} AS age")
    outputs += [f"p.{quote(c)}" for c in spec.static]
    con.execute(f"""
        CREATE TEMP TABLE cp AS SELECT w.patient_id, start, coalesce(next_t, p.end_days) AS stop,
            CAST(CASE WHEN next_t IS NULL THEN p.end_status ELSE 0 END AS TINYINT) AS status,
            {', '.join(outputs)}
        FROM (SELECT patient_id, t AS start, {', '.join(window_cols)} FROM timeline
              WINDOW w AS (PARTITION BY patient_id ORDER BY t ROWS BETWEEN UNBOUNDED PRECEDING AND CURRENT ROW)) w
        JOIN pat p USING (patient_id)
        WHERE start >= 0
        ORDER BY w.patient_id, start""")
