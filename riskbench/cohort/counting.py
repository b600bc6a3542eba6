"""The counting-process table: ``(start, stop]`` rows per patient with covariates as known at ``start``.

How it is built: DuckDB computes the trailing-window slopes and marks exam dates, then hands the used values
over in blocks of patients sorted by patient, day and variable (so memory stays bounded however large the
cohort); :mod:`riskbench.cohort.row_assembly` turns each block into rows with O(n) array work:

1. at each date t, the last value of each variable dated on or before t (a value dated d is known from d on),
   its date, the first value, the slope and the exam count; each distinct date >= 0 (and day 0) starts a row
   that stops at the next date or at the end of follow-up;
2. a row inside which a value runs out of carry-forward (it becomes ``max_carry_days`` old before the next
   value of its variable) is cut at that moment; after the cut the covariate is missing.

The rows go back into the DuckDB table ``cp``, in patient and time order.

So a row ``(start, stop]`` never uses a value dated after ``start``: the leakage rule of DESIGN.md.
A value is usable at ``start`` while ``start - date < max_carry_days``; cutting at the exact expiry time
means the hazard at any t in a row sees a value at most ``max_carry_days`` old.
"""

from __future__ import annotations

import duckdb
import numpy as np
import pyarrow as pa

from riskbench.cohort.reading import quote
from riskbench.cohort.row_assembly import ValueBlock, assemble_rows, covariate_columns
from riskbench.cohort.spec import DAYS_PER_YEAR, CohortSpec

#: Patients per block handed from DuckDB to the array assembly (bounds the memory of one step).
BLOCK_PATIENTS = 250_000


def _slope_rows(spec: CohortSpec) -> str:
    """SQL: used values before the end with their trailing-window slope (per year) where the spec asks, and
    ``exam_day``: true on exactly one row of each exam date (the exam variable listed first that has a value)."""
    exam_ids = [i for i, v in enumerate(spec.variables) if v.name in spec.exam_variables]
    exam_cases = []
    for k, i in enumerate(exam_ids):
        earlier = ", ".join(map(str, exam_ids[:k]))
        clash = (f"NOT EXISTS (SELECT 1 FROM meas e WHERE e.pidx = m.pidx AND e.day = m.day "
                 f"AND e.vidx IN ({earlier}))") if earlier else "TRUE"
        exam_cases.append(f"WHEN {i} THEN {clash}")
    exam_sql = f"CASE m.vidx {' '.join(exam_cases)} ELSE FALSE END" if exam_cases else "FALSE"
    parts = []
    slope_ids = [i for i, v in enumerate(spec.variables) if v.slope]
    for i in slope_ids:
        w = spec.variables[i].slope_window_days
        parts.append(
            f"SELECT m.pidx, m.day, m.vidx, m.x, regr_slope(m.x, m.day) OVER (PARTITION BY m.pidx ORDER BY m.day "
            f"RANGE BETWEEN {w!r} PRECEDING AND CURRENT ROW) * {DAYS_PER_YEAR} AS slope, {exam_sql} AS exam_day "
            f"FROM meas m JOIN pat p USING (pidx) WHERE m.vidx = {i} AND m.day < p.end_days")
    others = f"AND m.vidx NOT IN ({', '.join(map(str, slope_ids))})" if slope_ids else ""
    parts.append(f"SELECT m.pidx, m.day, m.vidx, m.x, NULL::DOUBLE AS slope, {exam_sql} AS exam_day "
                 f"FROM meas m JOIN pat p USING (pidx) "
                 f"WHERE m.day < p.end_days {others}")
    return " UNION ALL ".join(parts)


def _numpy(table: pa.Table, name: str) -> np.ndarray:
    return table.column(name).to_numpy()


def build_counting_process(con: duckdb.DuckDBPyConnection, spec: CohortSpec,
                           block_patients: int = BLOCK_PATIENTS) -> None:
    """Create the DuckDB table ``cp`` (the counting-process table) from ``pat`` and ``meas``."""
    con.execute(f"CREATE TEMP TABLE used_values AS {_slope_rows(spec)}")
    n_patients = con.execute("SELECT count(*) FROM pat").fetchall()[0][0]  # pidx runs 1..n_patients
    static_sql = "".join(f", {quote(c)}" for c in spec.static)
    if n_patients == 0:
        columns = ", ".join(f"{quote(c)} {'INTEGER' if c == 'n_exams' else 'DOUBLE'}"
                            for c in spec.covariate_columns)
        con.execute(f"CREATE TEMP TABLE cp (patient_id VARCHAR, start DOUBLE, stop DOUBLE, status TINYINT, {columns})")
        return
    for first in range(1, n_patients + 1, block_patients):
        last = min(first + block_patients - 1, n_patients)
        values = con.sql("""
            SELECT pidx, day, vidx, x, slope, exam_day FROM used_values WHERE pidx BETWEEN $1 AND $2
            UNION ALL SELECT pidx, 0.0::DOUBLE, -1, NULL, NULL, FALSE FROM pat WHERE pidx BETWEEN $1 AND $2
            ORDER BY pidx, day, vidx""", params=[first, last]).to_arrow_table()
        patients = con.sql(f"""
            SELECT patient_id, end_days, end_status, entry_age_years{static_sql} FROM pat
            WHERE pidx BETWEEN $1 AND $2 ORDER BY pidx""", params=[first, last]).to_arrow_table()
        block = ValueBlock(patient=_numpy(values, "pidx") - first, day=_numpy(values, "day"),
                           var=_numpy(values, "vidx"), x=_numpy(values, "x"), slope=_numpy(values, "slope"),
                           exam_day=_numpy(values, "exam_day").astype(bool))
        rows = assemble_rows(block, _numpy(patients, "end_days"), spec)
        statics = {c: _numpy(patients, c).astype(float) for c in spec.static}
        covariates = covariate_columns(rows, spec, _numpy(patients, "entry_age_years").astype(float), statics)
        status = np.where(rows["last_row"], _numpy(patients, "end_status")[rows["patient"]], 0).astype(np.int8)
        ids = pa.DictionaryArray.from_arrays(pa.array(rows["patient"].astype(np.int32)),
                                             patients.column("patient_id").combine_chunks())
        con.register("cp_block", pa.table({"patient_id": ids, "start": rows["start"], "stop": rows["stop"],
                                           "status": status, **covariates}))
        select = "SELECT CAST(patient_id AS VARCHAR) AS patient_id, * EXCLUDE (patient_id) FROM cp_block"
        con.execute(f"CREATE TEMP TABLE cp AS {select}" if first == 1 else f"INSERT INTO cp {select}")
        con.unregister("cp_block")
