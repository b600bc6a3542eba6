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

from riskbench.cohort.errors import SpecError

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
            raise SpecError(
                f"{self.path}: encoding = {self.encoding!r} is not a text encoding Python knows; use "
                'e.g. "utf-8", "latin-1", "cp1252" or "utf-16"'
            ) from None

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
