"""``build_cohort``: sources in, ledger, flow, counting-process table and landmark stack out."""

from __future__ import annotations

import datetime
import shutil
import tempfile
from collections.abc import Sequence
from functools import cached_property
from pathlib import Path

import duckdb
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from riskbench.cohort import contract
from riskbench.cohort.contract import CHECK_ORDER
from riskbench.cohort.counting import build_counting_process
from riskbench.cohort.landmark import landmark_sql
from riskbench.cohort.reading import Source, load_table, quote
from riskbench.cohort.reasons import RowState
from riskbench.cohort.spec import CohortSpec
from riskbench.cohort.statics import source_columns as static_source_columns

TABLE_ORDER = ("patients", "measurements", "outcomes")


def _to_pandas(source: duckdb.DuckDBPyRelation | pa.Table) -> pd.DataFrame:
    """Plain numpy-backed columns (object strings) so that every pandas operation downstream works."""
    table = source if isinstance(source, pa.Table) else source.arrow()
    if isinstance(table, pa.RecordBatchReader):
        table = table.read_all()
    frame = table.to_pandas()
    if "status" in frame.columns:
        frame["status"] = frame["status"].astype("int64")
    return frame


class Cohort:
    """The tables of one cohort, held in a DuckDB connection and materialised on first access.

    The counting-process table is stored as a Parquet file in the cohort's temporary folder (written block by
    block while it was built, so it never has to fit in memory); the DuckDB view ``cp`` reads it.

    Attributes
    ----------
    spec : CohortSpec
        The rules the cohort was built with.
    counting_process : DataFrame
        ``patient_id, start, stop, status`` (days since entry; 0 censored, 1 outcome, 2 competing) and the
        covariates of ``spec.covariate_columns`` as known at ``start``.
    ledger : DataFrame
        ``table, row_number, patient_id, state``: every input row exactly once. ``row_number`` is the file's
        line number for a CSV source (header = line 1; blank and malformed lines are rows of the ledger too,
        with no patient id) and the 1-based row position for a Parquet file or a DataFrame.
    flow : DataFrame
        ``label, table, state, remaining, excluded, step``: per table, the rows read, then the rows removed
        (``excluded``) and left (``remaining``) at each check in check order, then the rows used.
    patients : DataFrame
        One row per included patient: ``patient_id, entry_date, end_days, end_status`` and static covariates.
    """

    def __init__(
        self,
        con: duckdb.DuckDBPyConnection,
        spec: CohortSpec,
        counting_process_file: Path,
        spill_folder: tempfile.TemporaryDirectory | None = None,
    ) -> None:
        self._con = con
        self.spec = spec
        self._cp_file = counting_process_file  # the Parquet file the view cp reads
        self._spill_folder = spill_folder  # removed when the cohort is garbage-collected

    @property
    def counting_process_file(self) -> Path:
        """The Parquet file holding the counting-process table (patient and time order), for reading it out
        of core; it lives in a temporary folder removed with the cohort, so copy it to keep it."""
        return self._cp_file

    @cached_property
    def counting_process(self) -> pd.DataFrame:
        return _to_pandas(pq.read_table(self._cp_file))

    @cached_property
    def ledger(self) -> pd.DataFrame:
        order = {t: i for i, t in enumerate(TABLE_ORDER)}
        frame = _to_pandas(self._con.sql('SELECT * FROM ledger ORDER BY "table", row_number'))
        return frame.sort_values(
            ["table", "row_number"],
            key=lambda s: s.map(order) if s.name == "table" else s,
            kind="stable",
            ignore_index=True,
        )

    @cached_property
    def patients(self) -> pd.DataFrame:
        statics = "".join(f", {quote(c)}" for c in self.spec.static_columns)
        return _to_pandas(
            self._con.sql(
                f"SELECT patient_id, CAST(entry_ts AS DATE) AS entry_date, end_days, "
                f"CAST(end_status AS TINYINT) AS end_status, entry_age_years{statics} FROM pat ORDER BY patient_id"
            )
        )

    def state_counts(self) -> pd.DataFrame:
        """Rows per table and ledger state: ``table, state, n_rows``."""
        return self._con.sql(
            'SELECT "table", state, count(*) AS n_rows FROM ledger GROUP BY ALL ORDER BY "table", state'
        ).df()

    @cached_property
    def flow(self) -> pd.DataFrame:
        counts = {(t, s): n for t, s, n in self.state_counts().itertuples(index=False)}
        rows = []
        for table in TABLE_ORDER:
            remaining = sum(n for (t, _), n in counts.items() if t == table)
            rows.append((f"{table}: read", table, "read", remaining, 0, 0))
            for step, state in enumerate(CHECK_ORDER[table], start=1):
                n = counts.get((table, str(state)), 0)
                if state is RowState.USED:
                    rows.append((f"{table}: used", table, str(state), n, 0, step))
                else:
                    remaining -= n
                    rows.append((f"{table}: excluded, {state}", table, str(state), remaining, n, step))
        return pd.DataFrame(rows, columns=["label", "table", "state", "remaining", "excluded", "step"])

    def top_exclusions(self, n: int = 5) -> pd.DataFrame:
        """The ``n`` exclusion reasons with the most rows: ``table, state, n_rows``."""
        counts = self.state_counts()
        counts = counts[counts["state"] != str(RowState.USED)]
        return counts.sort_values("n_rows", ascending=False, kind="stable").head(n).reset_index(drop=True)

    def landmark_stack(self, landmarks_days: Sequence[float], horizon_days: float) -> pd.DataFrame:
        """Patients at risk at each landmark with covariates as known there.

        Parameters
        ----------
        landmarks_days : sequence of float
            Landmarks s, days since entry (see :func:`riskbench.cohort.landmark_grid` for a regular grid).
        horizon_days : float
            Prediction horizon w, days: ``time`` is at most w and follow-up is censored at s + w.

        Returns
        -------
        DataFrame
            ``patient_id, landmark, time, status`` and the covariate columns of the counting-process table;
            patients whose follow-up ends at or before s are not at risk and are left out.
        """
        return _to_pandas(self._con.sql(landmark_sql(self.spec, landmarks_days, horizon_days)))

    def write_parquet(
        self, folder: str | Path, *, landmarks_days: Sequence[float] | None = None, horizon_days: float | None = None
    ) -> dict[str, Path]:
        """Write the tables as Parquet files into ``folder`` (out of core); return the paths by table name."""
        out = Path(folder)
        out.mkdir(parents=True, exist_ok=True)
        paths = {
            "counting_process": out / "counting_process.parquet",
            "ledger": out / "ledger.parquet",
            "patients": out / "patients.parquet",
        }
        queries = {
            "ledger": "SELECT * FROM ledger",
            "patients": "SELECT * EXCLUDE (entry_ts), CAST(entry_ts AS DATE) AS entry_date FROM pat",
        }
        if landmarks_days is not None:
            if horizon_days is None:
                raise ValueError("write_parquet: give horizon_days together with landmarks_days")
            paths["landmark_stack"] = out / "landmark_stack.parquet"
            queries["landmark_stack"] = landmark_sql(self.spec, landmarks_days, horizon_days)
        shutil.copyfile(self._cp_file, paths["counting_process"])  # already written, in table order
        for name, query in queries.items():
            target = str(paths[name]).replace("'", "''")
            self._con.execute(f"COPY ({query}) TO '{target}' (FORMAT parquet)")
        flow_path = out / "flow.csv"
        self.flow.to_csv(flow_path, index=False)
        paths["flow"] = flow_path
        return paths


def build_cohort(
    patients: Source,
    measurements: Source,
    outcomes: Source,
    spec: CohortSpec,
    *,
    memory_limit: str | None = None,
    threads: int | None = None,
    run_day: datetime.date | None = None,
    temp_folder: str | Path | None = None,
) -> Cohort:
    """Check the sources, keep the ledger and build the counting-process table.

    Parameters
    ----------
    patients, measurements, outcomes : path, DataFrame or TableSource
        The three source tables (CSV or Parquet files, or DataFrames) in the input contract of docs/own_cohort.md;
        column names and date formats are mapped by ``spec`` (or by a ``TableSource``).
    spec : CohortSpec
        Variables, units, plausible ranges, carry-forward, look-back and same-day rules.
    memory_limit : str, optional
        DuckDB memory limit (e.g. ``"6GB"``); larger work spills to a temporary folder.
    threads : int, optional
        DuckDB worker threads (default: all cores).
    run_day : datetime.date, optional
        The day of the run (default: today); a date after it is in the future (ledger state
        ``future_date``).
    temp_folder : path, optional
        Where the DuckDB spill files and the counting-process Parquet file live while the cohort exists
        (they hold source ids; default: the system temporary folder). The notebook runner passes a folder
        inside the run's staging folder, removed however the run ends.

    Returns
    -------
    Cohort

    Raises
    ------
    CohortInputError
        A file cannot be read as a table (not text, wrong encoding, no header on line 1), a required column is
        missing (the message names the file, the column and the file's columns), a patient id is repeated
        with different contents, or same-time values conflict under rule "error". Messages give files,
        columns, line (CSV) or row (Parquet, DataFrame) numbers and counts, never patient ids or cell values.
    """
    if temp_folder is not None:
        Path(temp_folder).mkdir(mode=0o700, parents=True, exist_ok=True)
    spill = tempfile.TemporaryDirectory(prefix="riskbench_duckdb_", dir=temp_folder)
    config: dict[str, str | bool | int | float | list[str]] = {
        "preserve_insertion_order": True,
        "temp_directory": spill.name,
    }
    if memory_limit:
        config["memory_limit"] = memory_limit
    if threads:
        config["threads"] = int(threads)
    con = duckdb.connect(":memory:", config=config)
    run_day = run_day or datetime.date.today()
    loaded_p = load_table(con, "patients", patients, spec, static_source_columns(spec))
    loaded_m = load_table(con, "measurements", measurements, spec)
    loaded_o = load_table(con, "outcomes", outcomes, spec)
    # The checks order every result they need explicitly (row numbers are fixed on loading), so their
    # intermediate tables may be written in any order; the counting-process table keeps patient-time order.
    con.execute("SET preserve_insertion_order = false")
    contract.check_patients(con, loaded_p, spec, run_day)
    contract.check_outcomes(con, loaded_o, spec, run_day)
    contract.build_patient_table(con, spec)
    contract.check_measurements(con, loaded_m, spec, run_day)
    contract.build_ledger(con)
    con.execute("SET preserve_insertion_order = true")
    cp_file = Path(spill.name) / "counting_process.parquet"
    build_counting_process(con, spec, cp_file)
    return Cohort(con, spec, cp_file, spill)
