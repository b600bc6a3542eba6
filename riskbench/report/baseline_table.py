"""Baseline characteristics by how follow-up ended (outcome, competing event, censored)."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd

from riskbench.report.suppression import complementary_hidden, format_count, is_suppressed

DAYS_PER_YEAR = 365.25
STATUS_GROUPS: tuple[tuple[int, str], ...] = ((1, "Outcome"), (2, "Competing event"), (0, "Censored"))


def _is_binary(values: pd.Series) -> bool:
    v = pd.to_numeric(values, errors="coerce").dropna()
    return set(v.unique().tolist()) == {0, 1}


def baseline_table(
    patients: pd.DataFrame,
    covariates_at_entry: pd.DataFrame,
    covariates: Sequence[str],
    *,
    threshold: int = 10,
) -> pd.DataFrame:
    """Summarise covariates at entry, one column per end-of-follow-up group, small counts hidden.

    Parameters
    ----------
    patients
        One row per patient with ``patient_id``, ``end_days`` (days since entry) and ``end_status``
        (0 censored, 1 outcome, 2 competing).
    covariates_at_entry
        One row per patient with ``patient_id`` and the covariates as known at entry.
    covariates
        Which covariate columns to summarise. Binary 0/1 columns show n (%) of ones; others median (IQR);
        columns that are the same for everyone are left out.
    threshold
        Groups or counts below it are shown as ``"<threshold"`` and their summaries left blank.

    Returns
    -------
    DataFrame with ``characteristic`` and one text column per group plus ``All``.
    """
    need = {"patient_id", "end_days", "end_status"} - set(patients.columns)
    if need:
        raise ValueError(f"baseline_table: patients table lacks column(s) {sorted(need)}")
    merged = patients[["patient_id", "end_days", "end_status"]].merge(
        covariates_at_entry, on="patient_id", how="left", suffixes=("", "_entry")
    )
    groups = [(label, merged[merged["end_status"] == code]) for code, label in STATUS_GROUPS]
    groups.append(("All", merged))
    # a group that is too small shows no summary at all: its medians would describe single people
    shown = {label: not is_suppressed(len(g), threshold) for label, g in groups}
    # complementary suppression: hidden groups could be recovered from "All" minus the others
    hidden = complementary_hidden(np.array([len(g) for _, g in groups[:-1]], dtype=float), threshold)
    for (label, _), hide in zip(groups[:-1], hidden):
        shown[label] = not hide

    rows: list[dict[str, str]] = []

    def add(name: str, fn) -> None:
        row = {"characteristic": name}
        for label, g in groups:
            row[label] = fn(g) if shown[label] else ""
        rows.append(row)

    row = {"characteristic": "Patients, n"}
    for label, g in groups:
        if shown[label]:
            row[label] = format_count(len(g), threshold)
        else:
            row[label] = f"<{threshold}" if is_suppressed(len(g), threshold) else "suppressed"
    rows.append(row)
    add("Follow-up, years, median (IQR)", lambda g: _median_iqr(g["end_days"] / DAYS_PER_YEAR))
    for cov in covariates:
        if cov not in merged.columns or merged[cov].nunique(dropna=True) <= 1:
            continue  # absent, or the same for everyone at entry (e.g. change from the first value)
        if _is_binary(merged[cov]):
            add(f"{cov} = 1, n (%)", lambda g, c=cov: _count_pct(g[c], threshold))
        else:
            add(f"{cov}, median (IQR)", lambda g, c=cov: _median_iqr(g[c]))
        missing = merged[cov].isna()
        if missing.any():
            add(f"{cov} missing, n", lambda g, c=cov: format_count(int(g[c].isna().sum()), threshold))
    return pd.DataFrame(rows)


def _median_iqr(values: pd.Series) -> str:
    v = pd.to_numeric(values, errors="coerce").dropna()
    if v.empty:
        return ""
    q1, q2, q3 = np.percentile(v, [25, 50, 75])
    return f"{q2:.3g} ({q1:.3g}–{q3:.3g})"


def _count_pct(values: pd.Series, threshold: int) -> str:
    v = pd.to_numeric(values, errors="coerce").dropna()
    n = int((v == 1).sum())
    if is_suppressed(n, threshold) or is_suppressed(len(v) - n, threshold):
        return f"<{threshold}" if is_suppressed(n, threshold) else "suppressed"
    return f"{n} ({100 * n / len(v):.0f}%)" if len(v) else ""
