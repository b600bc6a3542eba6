"""The joint model's two inputs recovered from a counting-process table.

The cohort stage's counting-process table (``patient_id, start, stop, status``, covariates as known at
``start`` and ``<variable>_staleness_days``) holds every measurement of a variable: a row whose value of
``marker`` is not missing was measured ``staleness`` days before ``start``. So

* the measurement table is the distinct ``(patient_id, start - staleness, value)`` (a value dated before entry
  -- the cohort's look-back -- is placed at entry, day 0, where the cohort stage makes it known);
* the survival table is each patient's last row (``stop`` as ``time``, its ``status``) with the covariates
  of the first row (baseline values).

This lets the joint model fit on the same table as the time-varying Cox model, with the same ledger behind it.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd

from riskbench.models.risk_contract import ModelInputError, source_variable

__all__ = ["measurements_from_counting_process", "staleness_column", "survival_from_counting_process"]


def staleness_column(marker: str) -> str:
    """The staleness column of a marker column (``log_nodule_volume`` -> ``nodule_volume_staleness_days``)."""
    return f"{source_variable(marker)}_staleness_days"


def _require(table: pd.DataFrame, columns: Sequence[str]) -> None:
    absent = [c for c in columns if c not in table.columns]
    if absent:
        raise ModelInputError(
            f"counting-process table lacks column(s) {absent}; the joint model reads the marker's measurements "
            "and each patient's follow-up from the cohort stage's counting-process table"
        )


def measurements_from_counting_process(table: pd.DataFrame, marker: str, staleness: str | None = None) -> pd.DataFrame:
    """Measurement table (``patient_id, time`` in days since entry, ``marker``) of a counting-process table."""
    staleness = staleness or staleness_column(marker)
    _require(table, ("patient_id", "start", marker, staleness))
    value = pd.to_numeric(table[marker], errors="coerce")
    age = pd.to_numeric(table[staleness], errors="coerce")
    known = value.notna() & age.notna()
    times = np.clip(pd.to_numeric(table["start"], errors="coerce")[known] - age[known], 0.0, None)
    out = pd.DataFrame(
        {
            "patient_id": table["patient_id"][known].to_numpy(),
            "time": times.to_numpy(dtype=float),
            marker: value[known].to_numpy(dtype=float),
        }
    )
    return out.drop_duplicates(["patient_id", "time"], keep="first", ignore_index=True)


def survival_from_counting_process(table: pd.DataFrame, covariates: Sequence[str]) -> pd.DataFrame:
    """One row per patient: ``patient_id``, ``time`` (last ``stop``, days), ``status`` and baseline covariates."""
    _require(table, ("patient_id", "start", "stop", "status", *covariates))
    order = table.sort_values(["patient_id", "start"], kind="stable")
    grouped = order.groupby("patient_id", sort=False)
    last = grouped[["stop", "status"]].last()
    first = grouped[list(covariates)].first() if covariates else pd.DataFrame(index=last.index)
    out = pd.DataFrame(
        {
            "patient_id": last.index.to_numpy(),
            "time": last["stop"].to_numpy(dtype=float),
            "status": last["status"].to_numpy(),
        }
    )
    for column in covariates:
        out[column] = first[column].to_numpy()
    return out
