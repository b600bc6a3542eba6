"""Where the source tables live and how their columns are named: the ``[sources]`` configuration section.

Example (paths are relative to the configuration file)::

    [sources]
    date_format = "%Y-%m-%d"          # default for the three tables

    [sources.patients]
    path = "data/patients.csv"
    columns = { patient_id = "id", entry_date = "first_ct_date" }

    [sources.measurements]
    path = "data/measurements.parquet"
    layout = "long"                   # or "wide": one column per variable

    [sources.outcomes]
    path = "data/outcomes.csv"
"""

from __future__ import annotations

import codecs
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from riskbench.cohort import config_checks as cc
from riskbench.cohort.errors import SpecError
from riskbench.cohort.spec import TABLES

FILE_FORMATS = ("csv", "parquet")


@dataclass(frozen=True)
class TableSource:
    """One source table on disk.

    Parameters
    ----------
    path : Path
        CSV or Parquet file (absolute, or already resolved against the configuration's folder).
    columns : mapping of str to str
        Our column name -> the file's column name, for the columns whose names differ.
    date_format : str or None
        strftime format of the dates in a CSV file; None reads ISO dates.
    layout : {"long", "wide"}
        Measurements only: ``wide`` has one column per variable and is melted.
    encoding : str
        Text encoding of a CSV file (``utf-8``, ``latin-1``, ``cp1252``, ``utf-16``, ...); a byte-order mark
        is skipped. Parquet files ignore it.
    """

    path: Path
    columns: Mapping[str, str] = field(default_factory=dict)
    date_format: str | None = None
    layout: str = "long"
    encoding: str = "utf-8"

    def __post_init__(self) -> None:
        try:
            codecs.lookup(self.encoding)
        except LookupError:
            raise SpecError(f"{self.path}: encoding = {self.encoding!r} is not a text encoding Python knows; use "
                            "e.g. \"utf-8\", \"latin-1\", \"cp1252\" or \"utf-16\"") from None

    @property
    def file_format(self) -> str:
        """``csv`` or ``parquet``, from the file name."""
        suffix = self.path.suffix.lower().lstrip(".")
        if suffix in ("parquet", "pq"):
            return "parquet"
        if suffix in ("csv", "txt", "gz"):
            return "csv"
        raise SpecError(f"{self.path}: cannot tell the file format from the name; use .csv or .parquet")


@dataclass(frozen=True)
class SourceSpec:
    """The three source tables of an analysis."""

    patients: TableSource
    measurements: TableSource
    outcomes: TableSource

    @classmethod
    def from_dict(cls, mapping: Mapping[str, Any], base_dir: str | Path) -> SourceSpec:
        """Parse the ``[sources]`` section; relative paths are resolved against ``base_dir``.

        Unknown keys and wrong types raise :class:`~riskbench.cohort.errors.SpecError` naming the key,
        the value and what is allowed. A missing file is reported with its resolved path.
        """
        m = cc.check_keys(mapping, {
            "date_format": "strftime format shared by the three tables",
            **{t: f"table describing the {t} source" for t in TABLES},
        }, "sources")
        default_format = cc.text(m["date_format"], "date_format", "sources") if "date_format" in m else None
        missing = [t for t in TABLES if t not in m]
        if missing:
            raise SpecError(f"[sources] needs a [sources.{missing[0]}] table with at least path = \"...\"")
        parsed = {t: _table_source(m[t], t, Path(base_dir), default_format) for t in TABLES}
        return cls(**parsed)


def _table_source(mapping: Any, table: str, base_dir: Path, default_format: str | None) -> TableSource:
    where = f"sources.{table}"
    allowed = {
        "path": "file path relative to the configuration file",
        "columns": "table our_name = file_column_name",
        "date_format": "strftime format, e.g. '%d/%m/%Y'",
        "encoding": "text encoding of a CSV file: 'utf-8' (default), 'latin-1', 'cp1252', 'utf-16'",
    }
    if table == "measurements":
        allowed["layout"] = "'long' or 'wide'"
    m = cc.check_keys(mapping, allowed, where)
    if "path" not in m:
        raise SpecError(f"[{where}] needs path = \"...\" (CSV or Parquet file)")
    path = Path(cc.text(m["path"], "path", where))
    if not path.is_absolute():
        path = base_dir / path
    if not path.exists():
        raise SpecError(f"[{where}] path = {m['path']!r}: file {path} does not exist")
    source = TableSource(
        path=path,
        columns=cc.text_map(m.get("columns", {}), "columns", where),
        date_format=cc.text(m["date_format"], "date_format", where) if "date_format" in m else default_format,
        layout=cc.text(m.get("layout", "long"), "layout", where, choices=("long", "wide")),
        encoding=cc.text(m.get("encoding", "utf-8"), "encoding", where),
    )
    source.file_format  # noqa: B018 - raises early for an unknown file type
    return source
