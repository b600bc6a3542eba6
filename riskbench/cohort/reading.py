"""Read a source table (CSV, Parquet or DataFrame) into DuckDB under our column names.

Every table gets a ``row_number`` so the ledger can point at rows: for a CSV file it is the file's line
number (the header is line 1, so the first data row is line 2, and blank lines keep their numbers); for a
Parquet file or a DataFrame it is the 1-based position of the row (there are no lines). CSV files are read
without guessing (:mod:`riskbench.cohort.csv_lines`): lines that hold no row (blank, wrong number of fields)
land in ``lines_<table>`` with their ledger state. Text stays text here: parsing dates and values is a
contract check and belongs to :mod:`riskbench.cohort.contract`, which records failures in the ledger instead of
raising.
"""

from __future__ import annotations

import re
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import TypeAlias

import duckdb
import numpy as np
import pandas as pd
import pyarrow as pa

from riskbench.cohort.csv_lines import read_csv_lines
from riskbench.cohort.errors import CohortInputError
from riskbench.cohort.sources import TableSource
from riskbench.cohort.spec import CohortSpec

Source: TypeAlias = str | Path | pd.DataFrame | TableSource
#: Name of the row-position column added to a DataFrame's Arrow copy (unlikely to clash with a source column).
ROW_NUMBER = "__riskbench_row_number"

#: A column name shown in messages: a short word-like name (a headerless file's first row is not shown).
_NAME_LIKE = re.compile(r"^[A-Za-z_][A-Za-z0-9_ ./()%-]{0,63}$")
_DIGIT_RUN = re.compile(r"[0-9]{3}")

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
    """A source table loaded into DuckDB as ``raw_<table>`` (and its row-less lines as ``lines_<table>``).

    ``columns`` holds our names of the columns present, ``types`` their DuckDB types, ``label`` how
    messages refer to the source (file path or "DataFrame"), ``file_columns`` the source's own column names
    (for messages) and ``row_word`` what a ``row_number`` counts ("line" in a CSV file, else "row").
    """

    table: str
    label: str
    columns: tuple[str, ...]
    types: Mapping[str, str]
    date_format: str | None
    file_columns: tuple[str, ...] = ()
    row_word: str = "row"


def quote(name: str) -> str:
    """Quote an identifier for SQL."""
    return '"' + name.replace('"', '""') + '"'


def sql_text(value: str) -> str:
    """A text as an SQL string literal."""
    return "'" + value.replace("'", "''") + "'"


def days_between(ts: str, origin: str) -> str:
    """SQL: days from timestamp ``origin`` to ``ts`` (fractional when a time of day is given)."""
    return f"((epoch({ts}) - epoch({origin})) / 86400.0)"


def load_table(
    con: duckdb.DuckDBPyConnection, table: str, source: Source, spec: CohortSpec, extra: tuple[str, ...] = ()
) -> LoadedTable:
    """Load one source table into ``raw_<table>`` and ``lines_<table>``; check its required columns.

    Parameters
    ----------
    con : duckdb connection
    table : {"patients", "measurements", "outcomes"}
    source : path, DataFrame or TableSource
    spec : CohortSpec
        Supplies the default column map, date format and measurement layout.
    extra : tuple of str
        Further columns (our names) the table must have: the source columns of the static covariates.
    """
    columns = dict(spec.columns.get(table, {}))
    date_format = spec.date_format
    layout = spec.measurement_layout
    if isinstance(source, (str, Path)):
        path = Path(source)
        if not path.exists():
            raise CohortInputError(f"{table} source {path} does not exist")
        source = TableSource(path, layout=layout)
    row_word, other_lines = "row", None
    if isinstance(source, TableSource):
        columns.update(source.columns)
        date_format = source.date_format or date_format
        layout = source.layout
        label = str(source.path)
        if source.file_format == "parquet":
            relation = f"read_parquet({_literal(source.path)}, file_row_number = true)"
            numbered = "file_row_number + 1"
        else:
            read = read_csv_lines(source.path, table, getattr(source, "encoding", "utf-8"))
            relation, numbered, row_word = _register(con, f"csv_{table}", read.rows), "row_number", "line"
            other_lines = read.other_lines
    else:
        label = f"{table} DataFrame"
        frame = _numbered_arrow(source)
        if frame is None:  # mixed types Arrow cannot hold: let DuckDB read the DataFrame and number it
            con.register(f"frame_{table}", source)
            con.execute(f"CREATE TEMP TABLE framed_{table} AS SELECT * FROM frame_{table}")
            relation, numbered = f"framed_{table}", "rowid + 1"
        else:
            relation, numbered = _register(con, f"frame_{table}", frame), ROW_NUMBER
    _create_other_lines(con, table, other_lines)

    described = con.execute(f"DESCRIBE SELECT * FROM {relation}").fetchall()
    hidden = {"file_row_number", ROW_NUMBER} | ({"row_number"} if row_word == "line" else set())
    present = {row[0]: row[1] for row in described if row[0] not in hidden}
    file_columns = tuple(present)
    wide = table == "measurements" and layout == "wide"
    required = ("patient_id", "date") if wide else REQUIRED[table]
    for ours in required + tuple(extra):
        theirs = columns.get(ours, ours)
        if theirs not in present:
            mapped = f" (mapped to source column {theirs!r})" if theirs != ours else ""
            what = "required column" if ours in required else "column (read by a static covariate)"
            raise CohortInputError(
                f"{label}: {what} {ours!r}{mapped} is missing; {describe_columns(present)}. Rename the "
                f'column or map it in [sources.{table}] columns = {{ {ours} = "<source column>" }}.'
            )
    optional = [c for c in OPTIONAL[table] if c not in extra]
    wanted = list(dict.fromkeys(list(required) + list(extra) + [c for c in optional if columns.get(c, c) in present]))
    selects = [f"{numbered} AS row_number"] + [f"{quote(columns.get(c, c))} AS {quote(c)}" for c in wanted]
    types = {c: present[columns.get(c, c)] for c in wanted}
    if wide:
        variables = [v.name for v in spec.variables if columns.get(v.name, v.name) in present]
        if not variables:
            raise CohortInputError(
                f"{label}: wide measurement table has none of the variable columns "
                f"{[v.name for v in spec.variables]}; {describe_columns(present)}"
            )
        # A blank cell of a wide table is no measurement (UNPIVOT leaves out NULLs).
        selects += [f"nullif(trim(CAST({quote(columns.get(v, v))} AS VARCHAR)), '') AS {quote(v)}" for v in variables]
        con.execute(f"CREATE TEMP VIEW wide_numbered AS SELECT {', '.join(selects)} FROM {relation}")
        con.execute(
            "CREATE TEMP TABLE raw_measurements AS SELECT * FROM (UNPIVOT wide_numbered ON "
            f"{', '.join(quote(v) for v in variables)} INTO NAME variable VALUE value) "
            "ORDER BY row_number, variable"
        )
        types.update(variable="VARCHAR", value="VARCHAR")
        return LoadedTable(
            table, label, tuple(wanted) + ("variable", "value"), types, date_format, file_columns, row_word
        )
    # Read in place: the relation carries each row's number.
    con.execute(f"CREATE TEMP VIEW raw_{table} AS SELECT {', '.join(selects)} FROM {relation}")
    return LoadedTable(table, label, tuple(wanted), types, date_format, file_columns, row_word)


def describe_columns(present: Iterable[str]) -> str:
    """The file's column names for a message; names that look like data (a headerless file's first row:
    ids, dates, numbers, sentences) are counted, not shown."""
    names = list(present)
    shown = sorted(n for n in names if _NAME_LIKE.match(n) and not _DIGIT_RUN.search(n))
    hidden = len(names) - len(shown)
    text = f"the file's columns are {shown}"
    if hidden:
        text += (
            f" and {hidden} name(s) that look like data, not shown (is line 1 a data row? line 1 must name the columns)"
        )
    return text


def _register(con: duckdb.DuckDBPyConnection, name: str, table: pa.Table) -> str:
    """Register an Arrow table with DuckDB (scanned in place); return its quoted name."""
    con.register(name, table)
    return quote(name)


def _create_other_lines(con: duckdb.DuckDBPyConnection, table: str, other: pa.Table | None) -> None:
    """``lines_<table>`` (``row_number, state``): the lines of a CSV file that hold no row."""
    con.execute(f"CREATE TEMP TABLE lines_{table} (row_number BIGINT, state VARCHAR)")
    if other is not None and other.num_rows:
        con.register("other_lines_in", other)
        con.execute(f"INSERT INTO lines_{table} SELECT row_number, state FROM other_lines_in")
        con.unregister("other_lines_in")


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
