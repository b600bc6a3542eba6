"""Which part of a temporal split each patient belongs to (``[validation] develop_before``).

The cohort stage calls :func:`mark_parts` so that only a True/False mark, never an entry date, reaches the
run folder; :mod:`riskbench.workflow.temporal_validation` reads the mark.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

__all__ = ["DEVELOPS", "mark_parts"]

#: Column of ``data/patients``: True for a patient who entered before ``[validation] develop_before``.
DEVELOPS = "develops"


def mark_parts(patients: pd.DataFrame, entry_dates: pd.Series | np.ndarray, develop_before: str | None) -> pd.DataFrame:
    """``patients`` with the column :data:`DEVELOPS` when a cutoff is configured (unchanged otherwise).

    Parameters
    ----------
    patients
        The cohort stage's patient table (row for row with ``entry_dates``).
    entry_dates
        Each patient's entry date.
    develop_before
        The cutoff date (ISO ``YYYY-MM-DD``), or None for no temporal split.
    """
    if not develop_before:
        return patients
    dates = pd.to_datetime(pd.Series(np.asarray(entry_dates)), errors="coerce")
    return patients.assign(**{DEVELOPS: (dates < pd.Timestamp(develop_before)).to_numpy()})
