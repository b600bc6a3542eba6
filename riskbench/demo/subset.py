"""A smaller copy of a demo cohort: the first patients of its CSV tables, with all their rows."""

from __future__ import annotations

from pathlib import Path

import pandas as pd

TABLES: tuple[str, ...] = ("patients", "measurements", "outcomes")


def write_subset(source: str | Path, folder: str | Path, n_patients: int) -> list[str]:
    """Write the first ``n_patients`` patients (in patient-id order) of the cohort in ``source`` to ``folder``.

    Parameters
    ----------
    source
        A folder with ``patients.csv``, ``measurements.csv`` and ``outcomes.csv`` (e.g. ``demo_data/clean``).
    folder
        Where the three smaller CSV files are written (created when missing).
    n_patients
        How many patients to keep; each keeps every one of its rows, as text exactly as read.

    Returns
    -------
    list of str
        The kept patient ids, sorted.
    """
    source, folder = Path(source), Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    patients = pd.read_csv(source / "patients.csv", dtype=str, keep_default_na=False)
    ids = sorted(patients["patient_id"])[:n_patients]
    keep = set(ids)
    for name in TABLES:
        table = (
            patients if name == "patients" else pd.read_csv(source / f"{name}.csv", dtype=str, keep_default_na=False)
        )
        table[table["patient_id"].isin(keep)].to_csv(folder / f"{name}.csv", index=False)
    return ids
