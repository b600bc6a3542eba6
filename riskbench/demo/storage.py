"""Write a synthetic cohort to a folder (CSV and Parquet) and read it back.

Files: ``patients``, ``measurements``, ``outcomes`` (each ``.csv`` and ``.parquet``); the messy
variant adds ``defects.json``; the clean variant adds ``truth.json``, ``true_intervals.parquet``
(the generator's own counting-process rows) and ``true_risk.parquet`` (when computed).
"""

from __future__ import annotations

import json
from pathlib import Path

import pandas as pd

from riskbench.demo.generator import SyntheticCohort

TABLES: tuple[str, ...] = ("patients", "measurements", "outcomes")


def write_cohort(cohort: SyntheticCohort, folder: str | Path) -> Path:
    """Write ``cohort`` into ``folder`` (created if needed); return the folder path."""
    out = Path(folder)
    out.mkdir(parents=True, exist_ok=True)
    for name in TABLES:
        frame: pd.DataFrame = getattr(cohort, name)
        frame.to_csv(out / f"{name}.csv", index=False)
        frame.to_parquet(out / f"{name}.parquet", index=False)
    if cohort.defects:
        (out / "defects.json").write_text(json.dumps(cohort.defects, indent=2) + "\n")
    if cohort.truth is not None:
        (out / "truth.json").write_text(json.dumps(cohort.truth.to_json_dict(), indent=2) + "\n")
        cohort.truth.intervals.to_parquet(out / "true_intervals.parquet", index=False)
        if cohort.truth.true_risk is not None:
            cohort.truth.true_risk.to_parquet(out / "true_risk.parquet", index=False)
    return out


def read_tables(folder: str | Path, fmt: str = "parquet") -> dict[str, pd.DataFrame]:
    """Read the three input tables of a cohort folder (``fmt`` "parquet" or "csv").

    CSV files are read with every column as text (blank cells as missing), as a raw extract would be.
    """
    src = Path(folder)
    if fmt not in ("parquet", "csv"):
        raise ValueError(f"fmt must be 'parquet' or 'csv', got {fmt!r}")
    out = {}
    for name in TABLES:
        path = src / f"{name}.{fmt}"
        if not path.exists():
            raise FileNotFoundError(f"{path} not found: is {src} a folder written by `riskbench simulate-cohort`?")
        if fmt == "parquet":
            out[name] = pd.read_parquet(path)
        else:
            out[name] = pd.read_csv(path, dtype=str, keep_default_na=False, na_values=[""])
    return out
