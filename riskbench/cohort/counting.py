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
from riskbench.cohort.row_assembly import ValueBlock, assemble_rows, covariate_columns, exam_dates
from riskbench.cohort.spec import DAYS_PER_YEAR, CohortSpec

#: Patients per block handed from DuckDB to the array assembly (bounds the memory of one step).
BLOCK_PATIENTS = 250_000


def _slope_rows(spec: CohortSpec) -> str:
    """SQL: used values with their trailing-window slope (per year) where the spec asks for one."""
    parts = []
    slope_ids = [i for i, v in enumerate(spec.variables) if v.slope]
    for i in slope_ids:
        w = spec.variables[i].slope_window_days
        parts.append(
            f"SELECT pidx, day, vidx, x, regr_slope(x, day) OVER (PARTITION BY pidx ORDER BY day "
            f"RANGE BETWEEN {w!r} PRECEDING AND CURRENT ROW) * {DAYS_PER_YEAR} AS slope FROM meas WHERE vidx = {i}")
    others = f"WHERE vidx NOT IN ({', '.join(map(str, slope_ids))})" if slope_ids else ""
    parts.append(f"SELECT pidx, day, vidx, x, NULL::DOUBLE AS slope FROM meas {others}")
    return " UNION ALL ".join(parts)


def _numpy(table: pa.Table, name: str) -> np.ndarray:
    return table.column(name).to_numpy()


def build_counting_process(con: duckdb.DuckDBPyConnection, spec: CohortSpec,
                           block_patients: int = BLOCK_PATIENTS) -> None:
    """Create the DuckDB table ``cp`` (the counting-process table) from ``pat`` and ``meas``."""
    con.execute(f"CREATE TEMP TABLE used_values AS {_slope_rows(spec)}")
    con.execute("DROP TABLE meas")  # used_values holds every used value; spare the memory
    exam_ids = [i for i, v in enumerate(spec.variables) if v.name in spec.exam_variables]
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
            SELECT pidx, day, vidx, x, slope FROM used_values WHERE pidx BETWEEN $1 AND $2
            UNION ALL SELECT pidx, 0.0::DOUBLE, -1, NULL, NULL FROM pat WHERE pidx BETWEEN $1 AND $2
            ORDER BY pidx, day, vidx""", params=[first, last]).to_arrow_table()
        patients = con.sql(f"""
            SELECT patient_id, end_days, end_status, entry_age_years{static_sql} FROM pat
            WHERE pidx BETWEEN $1 AND $2 ORDER BY pidx""", params=[first, last]).to_arrow_table()
        end_days = _numpy(patients, "end_days")
        patient, day, var = _numpy(values, "pidx") - first, _numpy(values, "day"), _numpy(values, "vidx")
        before_end = day < end_days[patient]  # a value dated at the end never enters a row
        patient, day, var = patient[before_end], day[before_end], var[before_end]
        block = ValueBlock(patient=patient, day=day, var=var, x=_numpy(values, "x")[before_end],
                           slope=_numpy(values, "slope")[before_end],
                           exam_day=exam_dates(patient, day, var, exam_ids))
        rows = assemble_rows(block, end_days, spec)
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
    con.execute("DROP TABLE used_values")  # frees memory for the later reads of cp
