"""The counting-process table: ``(start, stop]`` rows per patient with covariates as known at ``start``.

How it is built: DuckDB computes the trailing-window slopes, then hands the used values over in blocks of
patients sorted by patient, day and variable (so memory stays bounded however large the cohort);
:mod:`riskbench.cohort.row_assembly` turns each block into rows with O(n) array work:

1. at each date t, the last value of each variable dated on or before t (a value dated d is known from d on),
   its date, the first value, the slope and the exam count; each distinct date >= 0 (and day 0) starts a row
   that stops at the next date or at the end of follow-up;
2. a row inside which a value runs out of carry-forward (it becomes ``max_carry_days`` old before the next
   value of its variable) is cut at that moment; after the cut the covariate is missing.

The rows are written block by block, in patient and time order, to a Parquet file that the DuckDB view
``cp`` reads. Reading and sorting the next block, assembling this one and writing the previous one overlap
(DuckDB, numpy and the Parquet writer release the interpreter lock), so the cores are kept busy.

So a row ``(start, stop]`` never uses a value dated after ``start`` (the leakage rule).
A value is usable at ``start`` while ``start - date < max_carry_days``; cutting at the exact expiry time
means the hazard at any t in a row sees a value at most ``max_carry_days`` old.
"""

from __future__ import annotations

from collections import deque
from concurrent.futures import Future, ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path

import duckdb
import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

from riskbench.cohort.reading import quote
from riskbench.cohort.row_assembly import ValueBlock, assemble_rows, covariate_columns, exam_dates
from riskbench.cohort.spec import DAYS_PER_YEAR, CohortSpec

#: Patients per block handed from DuckDB to the array assembly. Blocks this size keep every array of a step
#: small enough that the allocator reuses memory instead of mapping fresh pages for each block.
BLOCK_PATIENTS = 100_000
#: A small cohort is still cut into this many blocks, of at least MIN_BLOCK_PATIENTS patients each.
MIN_BLOCKS = 4
MIN_BLOCK_PATIENTS = 1_000
PATIENT_ID_TYPE = pa.dictionary(pa.int32(), pa.string())
#: Blocks read ahead of the one being written (bounds the memory in flight).
BLOCKS_IN_FLIGHT = 2


def _slope_rows(spec: CohortSpec) -> str:
    """SQL: used values with their trailing-window slope (per year) where the spec asks for one."""
    parts = []
    slope_ids = [i for i, v in enumerate(spec.variables) if v.slope]
    for i in slope_ids:
        w = spec.variables[i].slope_window_days
        parts.append(
            f"SELECT pidx, day, vidx, x, regr_slope(x, day) OVER (PARTITION BY pidx ORDER BY day "
            f"RANGE BETWEEN {w!r} PRECEDING AND CURRENT ROW) * {DAYS_PER_YEAR} AS slope FROM meas WHERE vidx = {i}"
        )
    others = f"WHERE vidx NOT IN ({', '.join(map(str, slope_ids))})" if slope_ids else ""
    parts.append(f"SELECT pidx, day, vidx, x, NULL::DOUBLE AS slope FROM meas {others}")
    return " UNION ALL ".join(parts)


def table_schema(spec: CohortSpec) -> pa.Schema:
    """Arrow schema of the counting-process table (``n_exams`` is an integer, status a small integer).

    ``patient_id`` is dictionary-encoded while written (each block's rows point into its patients' ids);
    the file does not keep the Arrow schema, so readers see plain text.
    """
    fields = [
        pa.field("patient_id", PATIENT_ID_TYPE),
        pa.field("start", pa.float64()),
        pa.field("stop", pa.float64()),
        pa.field("status", pa.int8()),
    ]
    fields += [pa.field(c, pa.int32() if c == "n_exams" else pa.float64()) for c in spec.covariate_columns]
    return pa.schema(fields)


@dataclass(frozen=True)
class _Patients:
    """Per-patient arrays indexed by ``pidx - 1``."""

    ids: pa.Array
    end_days: np.ndarray
    end_status: np.ndarray
    entry_age: np.ndarray
    statics: dict[str, np.ndarray]


def _read_patients(con: duckdb.DuckDBPyConnection, spec: CohortSpec) -> _Patients:
    static_sql = "".join(f", {quote(c)}" for c in spec.static_columns)
    table = con.sql(
        f"SELECT patient_id, end_days, end_status, entry_age_years{static_sql} FROM pat ORDER BY pidx"
    ).to_arrow_table()
    col = lambda name: table.column(name).to_numpy()  # noqa: E731
    return _Patients(
        ids=table.column("patient_id").combine_chunks(),
        end_days=col("end_days"),
        end_status=col("end_status"),
        entry_age=col("entry_age_years").astype(float),
        statics={c: col(c).astype(float) for c in spec.static_columns},
    )


def _assemble_block(
    values: pa.Table, first: int, last: int, patients: _Patients, spec: CohortSpec, exam_ids: list[int]
) -> pa.Table:
    """Counting-process rows of patients ``first..last`` (pidx) as an Arrow table."""
    pidx, day, var, x, slope = (values.column(c).to_numpy() for c in ("pidx", "day", "vidx", "x", "slope"))
    end_days = patients.end_days[first - 1 : last]
    patient = pidx - first
    before_end = day < end_days[patient]  # a value dated at the end never enters a row
    patient, day, var = patient[before_end], day[before_end], var[before_end]
    block = ValueBlock(
        patient=patient,
        day=day,
        var=var,
        x=x[before_end],
        slope=slope[before_end],
        exam_day=exam_dates(patient, day, var, exam_ids),
    )
    rows = assemble_rows(block, end_days, spec)
    statics = {c: a[first - 1 : last] for c, a in patients.statics.items()}
    covariates = covariate_columns(rows, spec, patients.entry_age[first - 1 : last], statics)
    status = np.where(rows["last_row"], patients.end_status[first - 1 : last][rows["patient"]], 0).astype(np.int8)
    ids = pa.DictionaryArray.from_arrays(
        pa.array(rows["patient"].astype(np.int32)), patients.ids.slice(first - 1, last - first + 1)
    )
    return pa.table(
        {"patient_id": ids, "start": rows["start"], "stop": rows["stop"], "status": status, **covariates},
        schema=table_schema(spec),
    )


def _write_when_assembled(writer: pq.ParquetWriter, block: Future) -> None:
    """Write an assembled block (in the writer thread, once the assembler has finished it)."""
    writer.write_table(block.result())


def build_counting_process(
    con: duckdb.DuckDBPyConnection, spec: CohortSpec, target: Path, block_patients: int | None = None
) -> None:
    """Write the counting-process table of ``pat`` and ``meas`` to the Parquet file ``target``; create the
    DuckDB view ``cp`` over it. ``block_patients`` defaults to :data:`BLOCK_PATIENTS`, or for a small cohort
    to a share that still gives :data:`MIN_BLOCKS` blocks (so assembling one overlaps writing the last)."""
    con.execute(f"""CREATE TEMP TABLE used_values AS
                        {_slope_rows(spec)} UNION ALL SELECT pidx, 0.0::DOUBLE, -1, NULL, NULL FROM pat""")
    con.execute("DROP TABLE meas")  # used_values holds every used value; spare the memory
    exam_ids = [i for i, v in enumerate(spec.variables) if v.name in spec.exam_variables]
    patients = _read_patients(con, spec)
    n_patients = patients.end_days.size  # pidx runs 1..n_patients
    if block_patients is None:
        block_patients = min(BLOCK_PATIENTS, max(MIN_BLOCK_PATIENTS, -(-n_patients // MIN_BLOCKS)))
    schema = table_schema(spec)
    # Plain (not dictionary-encoded) floats: the values rarely repeat, and trying costs time.
    options = {"compression": "snappy", "use_dictionary": ["patient_id"], "store_schema": False}
    with (
        pq.ParquetWriter(target, schema, **options) as writer,
        ThreadPoolExecutor(1, thread_name_prefix="cp_assemble") as assembler,
        ThreadPoolExecutor(1, thread_name_prefix="cp_write") as write_pool,
    ):
        in_flight: deque[Future] = deque()
        for first in range(1, n_patients + 1, block_patients):
            last = min(first + block_patients - 1, n_patients)
            values = con.sql(
                "SELECT pidx, day, vidx, x, slope FROM used_values WHERE pidx BETWEEN $1 AND $2 "
                "ORDER BY pidx, day, vidx",
                params=[first, last],
            ).to_arrow_table()
            table = assembler.submit(_assemble_block, values, first, last, patients, spec, exam_ids)
            in_flight.append(write_pool.submit(_write_when_assembled, writer, table))
            while len(in_flight) > BLOCKS_IN_FLIGHT:
                in_flight.popleft().result()  # re-raises an error of the assembly or the write
        for done in in_flight:
            done.result()
        if n_patients == 0:
            writer.write_table(schema.empty_table())
    con.execute("DROP TABLE used_values")  # frees memory for the later reads of cp
    con.execute(f"CREATE TEMP VIEW cp AS SELECT * FROM read_parquet('{str(target).replace(chr(39), chr(39) * 2)}')")
