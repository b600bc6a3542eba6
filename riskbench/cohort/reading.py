"""Read a source table (CSV, Parquet or DataFrame) into DuckDB under our column names.

Every table gets a ``row_number`` (1-based position of the data row in the source, header not counted) so
the ledger can point at rows. Text stays text here: parsing dates and values is a contract check and belongs
to :mod:`riskbench.cohort.contract`, which records failures in the ledger instead of raising.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Union

import duckdb
import numpy as np
import pandas as pd
import pyarrow as pa

from riskbench.cohort.errors import CohortInputError
from riskbench.cohort.sources import TableSource
from riskbench.cohort.spec import CohortSpec

Source = Union[str, Path, pd.DataFrame, TableSource]
#: Name of the row-position column added to a DataFrame's Arrow copy (unlikely to clash with a source column).
ROW_NUMBER = "__riskbench_row_number"

REQUIRED: dict[str, tuple[str, ...]] = {
    "patients": ("patient_id", "entry_date"),
    "measurements": ("patient_id", "date", "variable", "value"),
    "outcomes": ("patient_id", "date", "kind"),
}
OPTIONAL: dict[str, tuple[str, ...]] = {
    "patients": ("birth_date", "age_at_entry", "sex"),
    "measurements": ("unit", "source"),
    "outcomes": ("detail",),
}
DATE_COLUMNS: dict[str, tuple[str, ...]] = {
    "patients": ("entry_date", "birth_date"),
    "measurements": ("date",),
    "outcomes": ("date",),
}


@dataclass(frozen=True)
class LoadedTable:
    """A source table loaded into DuckDB as ``raw_<table>``.

    ``columns`` holds our names of the columns present, ``types`` their DuckDB types and ``label`` how
    messages refer to the source (file path or "DataFrame").
    """

    table: str
    label: str
    columns: tuple[str, ...]
    types: Mapping[str, str]
    date_format: str | None


def quote(name: str) -> str:
    """Quote an identifier for SQL."""
    return '"' + name.replace('"', '""') + '"'


def load_table(con: duckdb.DuckDBPyConnection, table: str, source: Source, spec: CohortSpec,
               extra: tuple[str, ...] = ()) -> LoadedTable:
    """Load one source table into ``raw_<table>``; check its required columns.

    Parameters
    ----------
    con : duckdb connection
    table : {"patients", "measurements", "outcomes"}
    source : path, DataFrame or TableSource
    spec : CohortSpec
        Supplies the default column map, date format and measurement layout.
    extra : tuple of str
        Further columns to keep when present (static covariates of the patients table).
    """
    columns = dict(spec.columns.get(table, {}))
    date_format = spec.date_format
    layout = spec.measurement_layout
    parquet = False
    numbered = False  # the relation already carries row_number
    if isinstance(source, TableSource):
        columns.update(source.columns)
        date_format = source.date_format or date_format
        layout = source.layout
        parquet = source.file_format == "parquet"
        relation, label = _file_relation(source.path, source.file_format), str(source.path)
    elif isinstance(source, pd.DataFrame):
        name = f"frame_{table}"
        frame = _numbered_arrow(source)
        numbered = frame is not None
        con.register(name, frame if numbered else source)
        relation, label = quote(name), f"{table} DataFrame"
    else:
        path = Path(source)
        if not path.exists():
            raise CohortInputError(f"{table} source {path} does not exist")
        parquet = TableSource(path).file_format == "parquet"
        relation, label = _file_relation(path, TableSource(path).file_format), str(path)

    described = con.execute(f"DESCRIBE SELECT * FROM {relation}").fetchall()
    present = {row[0]: row[1] for row in described}
    wide = table == "measurements" and layout == "wide"
    required = ("patient_id", "date") if wide else REQUIRED[table]
    for ours in required:
        theirs = columns.get(ours, ours)
        if theirs not in present:
            mapped = f" (mapped to source column {theirs!r})" if theirs != ours else ""
            raise CohortInputError(
                f"{label}: required column {ours!r}{mapped} is missing; the {table} table has columns "
                f"{sorted(present)}. Rename the column or map it in [sources.{table}] columns = "
                f"{{ {ours} = \"<source column>\" }}.")
    wanted = list(required) + [c for c in OPTIONAL[table] + extra if columns.get(c, c) in present]
    if wide:
        variables = [v.name for v in spec.variables if columns.get(v.name, v.name) in present]
        if not variables:
            raise CohortInputError(
                f"{label}: wide measurement table has none of the variable columns "
                f"{[v.name for v in spec.variables]}; its columns are {sorted(present)}")
        selects = [f"{quote(columns.get(c, c))} AS {quote(c)}" for c in wanted]
        selects += [f"CAST({quote(columns.get(v, v))} AS VARCHAR) AS {quote(v)}" for v in variables]
        con.execute(f"CREATE TEMP TABLE wide_src AS SELECT {', '.join(selects)} FROM {relation}")
        con.execute("CREATE TEMP TABLE wide_numbered AS SELECT rowid + 1 AS row_number, * FROM wide_src")
        con.execute(
            "CREATE TEMP TABLE raw_measurements AS SELECT * FROM (UNPIVOT wide_numbered ON "
            f"{', '.join(quote(v) for v in variables)} INTO NAME variable VALUE value) "
            "ORDER BY row_number, variable")
        types = {c: present[columns.get(c, c)] for c in wanted}
        types.update(variable="VARCHAR", value="VARCHAR")
        return LoadedTable(table, label, tuple(wanted) + ("variable", "value"), types, date_format)
    selects = ", ".join(f"{quote(columns.get(c, c))} AS {quote(c)}" for c in wanted)
    if numbered:  # read in place: the Arrow copy of the DataFrame carries the row positions
        con.execute(f"CREATE TEMP VIEW raw_{table} AS SELECT {ROW_NUMBER} AS row_number, {selects} FROM {relation}")
    elif parquet:  # read in place: Parquet knows each row's position
        path = source.path if isinstance(source, TableSource) else Path(source)
        numbered = f"read_parquet({_literal(path)}, file_row_number = true)"
        con.execute(f"CREATE TEMP VIEW raw_{table} AS SELECT file_row_number + 1 AS row_number, {selects} "
                    f"FROM {numbered}")
    else:  # insertion order is preserved, so rowid is the position of the row in the source
        con.execute(f"CREATE TEMP TABLE src_{table} AS SELECT {selects} FROM {relation}")
        con.execute(f"CREATE TEMP VIEW raw_{table} AS SELECT rowid + 1 AS row_number, * FROM src_{table}")
    types = {c: present[columns.get(c, c)] for c in wanted}
    return LoadedTable(table, label, tuple(wanted), types, date_format)


def _numbered_arrow(frame: pd.DataFrame) -> pa.Table | None:
    """The DataFrame as an Arrow table with its 1-based row positions in column ``ROW_NUMBER``.

    DuckDB scans Arrow memory directly, so the rows need not be copied into a table to get their positions.
    Returns None when a column mixes types that Arrow cannot hold in one column (text and numbers, say);
    the caller then lets DuckDB read the DataFrame itself.
    """
    try:
        table = pa.Table.from_pandas(frame, preserve_index=False)
    except (pa.ArrowInvalid, pa.ArrowTypeError, pa.ArrowNotImplementedError):
        return None
    if ROW_NUMBER in table.column_names:
        return None
    return table.append_column(ROW_NUMBER, pa.array(np.arange(1, len(frame) + 1, dtype=np.int64)))


def _literal(path: Path) -> str:
    return "'" + str(path).replace("'", "''") + "'"


def _file_relation(path: Path, file_format: str) -> str:
    literal = _literal(path)
    if file_format == "parquet":
        return f"read_parquet({literal})"
    # Everything as text: bad dates and values must reach the ledger, not stop the reader.
    return f"read_csv({literal}, all_varchar = true, header = true)"


def blank(column: str, alias: str | None = None, column_type: str = "VARCHAR", *, trimmed: str | None = None) -> str:
    """SQL: the column (of table ``alias`` if given) is missing or only white space.

    Only text can be white space; a typed column (``column_type`` not VARCHAR) is blank when NULL, which
    spares turning every number into text. ``trimmed`` is the SQL of the column already passed through
    :func:`trimmed_expr`, when there is one.
    """
    col = f"{alias}.{quote(column)}" if alias else quote(column)
    if not _is_text(column_type):
        return f"({trimmed or col} IS NULL)"
    if trimmed:
        return f"({trimmed} IS NULL OR {trimmed} = '')"
    return f"({col} IS NULL OR trim(CAST({col} AS VARCHAR)) = '')"


def trimmed_expr(loaded: LoadedTable, column: str, alias: str | None = None) -> str:
    """SQL: the column (of table ``alias`` if given) as trimmed text if it holds text, else as it is.

    Computing this once in an inner query and handing it to :func:`timestamp_expr`, :func:`number_expr` and
    :func:`blank` (``trimmed=``) spares trimming the same strings several times per row.
    """
    col = f"{alias}.{quote(column)}" if alias else quote(column)
    return f"trim(CAST({col} AS VARCHAR))" if _is_text(loaded.types[column]) else col


def _is_text(column_type: str) -> bool:
    return column_type.upper().startswith("VARCHAR")


def timestamp_expr(loaded: LoadedTable, column: str, alias: str | None = None, *, trimmed: str | None = None) -> str:
    """SQL: the column (of table ``alias`` if given) as a TIMESTAMP (NULL when it cannot be parsed).

    ``trimmed`` is the SQL of the column already passed through :func:`trimmed_expr`, when there is one.
    """
    col = f"{alias}.{quote(column)}" if alias else quote(column)
    kind = loaded.types[column].upper()
    if kind.startswith("DATE") or kind.startswith("TIMESTAMP"):
        return f"CAST({trimmed or col} AS TIMESTAMP)"
    text = trimmed or f"trim(CAST({col} AS VARCHAR))"
    if loaded.date_format:
        fmt = loaded.date_format.replace("'", "''")
        return f"try_strptime({text}, '{fmt}')"
    return f"TRY_CAST({text} AS TIMESTAMP)"


def number_expr(loaded: LoadedTable, column: str, alias: str | None = None, *, trimmed: str | None = None) -> str:
    """SQL: the column (of table ``alias`` if given) as a finite DOUBLE (NULL when it cannot be parsed).

    ``trimmed`` is the SQL of the column already passed through :func:`trimmed_expr`, when there is one.
    """
    col = f"{alias}.{quote(column)}" if alias else quote(column)
    kind = loaded.types[column].upper()
    if trimmed:
        raw = f"TRY_CAST({trimmed} AS DOUBLE)"
    else:
        raw = f"TRY_CAST({col} AS DOUBLE)" if kind != "VARCHAR" else f"TRY_CAST(trim({col}) AS DOUBLE)"
    return f"(CASE WHEN isfinite({raw}) THEN {raw} END)"
