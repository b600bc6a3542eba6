"""Baseline characteristics by how follow-up ended (outcome, competing event, censored).

The counts of the table are linked by sums: the groups add up to ``All``, and within each group a binary
covariate's ones, zeros and missing values add up to the group's size. A hidden small count must not follow
from the others by subtraction, so the counts of each covariate go through
:func:`riskbench.report.suppression.linked_suppression` (complementary suppression, common practice in
statistical disclosure control, e.g. the Eurostat/ONS handbooks on tabular data protection). The group
sizes are hidden with the same rule as the groups of the cohort flow, so both tables hide the same groups.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence

import numpy as np
import pandas as pd

from riskbench.report.suppression import complementary_hidden, linked_suppression
from riskbench.time_units import DAYS_PER_YEAR

STATUS_GROUPS: tuple[tuple[int, str], ...] = ((1, "Outcome"), (2, "Competing event"), (0, "Censored"))
ALL = "All"
WITHHELD = "suppressed"


def _is_binary(values: pd.Series) -> bool:
    v = pd.to_numeric(values, errors="coerce").dropna()
    return set(v.unique().tolist()) == {0, 1}


def _hidden_text(n: int, threshold: int) -> str:
    return f"<{threshold}" if 0 < n < threshold else WITHHELD


def baseline_table(
    patients: pd.DataFrame,
    covariates_at_entry: pd.DataFrame,
    covariates: Sequence[str],
    *,
    threshold: int = 10,
    labels: Mapping[str, str] | Callable[[str], str] | None = None,
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
        Which covariate columns to summarise. Binary 0/1 columns show n (%) of ones, the percentage of the
        group's patients (missing values count in the denominator and are shown on their own row); others
        median (IQR); columns that are the same for everyone are left out.
    threshold
        Counts ``0 < n < threshold`` are shown as ``"<threshold"``; counts that would give a hidden one away
        by subtraction as ``"suppressed"``; groups hidden so are not described at all.
    labels
        Readable name of a covariate column (a mapping or a function); the column name when absent.

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
    groups.append((ALL, merged))
    names = [label for label, _ in groups]
    sizes = {label: len(g) for label, g in groups}
    # group sizes: the same rule as the groups of the cohort flow (complementary within the split)
    hidden_groups = {
        label
        for (label, _), hide in zip(
            groups[:-1], complementary_hidden(np.array([sizes[n] for n in names[:-1]], dtype=float), threshold)
        )
        if hide
    }
    if 0 < sizes[ALL] < threshold:
        hidden_groups.add(ALL)
    described = [n for n in names if n not in hidden_groups]

    rows: list[dict[str, str]] = [
        {
            "characteristic": "Patients, n",
            **{n: _hidden_text(sizes[n], threshold) if n in hidden_groups else str(sizes[n]) for n in names},
        }
    ]

    def add(name: str, fn: Callable[[pd.DataFrame], str]) -> None:
        rows.append({"characteristic": name, **{label: fn(g) if label in described else "" for label, g in groups}})

    add("Follow-up, years, median (IQR)", lambda g: _median_iqr(g["end_days"] / DAYS_PER_YEAR))
    for cov in covariates:
        if cov not in merged.columns or merged[cov].nunique(dropna=True) <= 1:
            continue  # absent, or the same for everyone at entry (e.g. change from the first value)
        name = _label_of(cov, labels)
        values = {label: pd.to_numeric(g[cov], errors="coerce") for label, g in groups}
        binary = _is_binary(merged[cov])
        cells, hide = _covariate_counts(values, sizes, hidden_groups, binary, threshold)

        def counts(category: str, percent: bool, cells: dict = cells, hide: set | None = hide) -> dict[str, str]:
            out = {}
            for n in names:
                value = cells[(category, n)]
                if n in hidden_groups:
                    out[n] = ""
                elif hide is None or (category, n) in hide:
                    out[n] = _hidden_text(value, threshold)
                else:
                    out[n] = f"{value} ({100 * value / sizes[n]:.0f}%)" if percent and sizes[n] else str(value)
            return out

        if binary:
            rows.append({"characteristic": f"{name} = 1, n (%)", **counts("one", True)})
        else:
            add(f"{name}, median (IQR)", _median_iqr_of(cov))
        if merged[cov].isna().any():
            rows.append({"characteristic": f"{name} missing, n", **counts("missing", False)})
    table = pd.DataFrame(rows)
    empty = [label for code, label in STATUS_GROUPS if code == 2 and sizes[label] == 0]
    return table.drop(columns=empty)  # no empty competing-event column when the cohort has none


def _median_iqr_of(column: str) -> Callable[[pd.DataFrame], str]:
    """The median (IQR) cell of ``column`` for a group's rows."""
    return lambda g: _median_iqr(g[column])


def _label_of(column: str, labels: Mapping[str, str] | Callable[[str], str] | None) -> str:
    if labels is None:
        return column
    if callable(labels):
        return str(labels(column))
    return str(labels.get(column, column))


def _covariate_counts(
    values: Mapping[str, pd.Series], sizes: Mapping[str, int], hidden_groups: set, binary: bool, threshold: int
) -> tuple[dict, set | None]:
    """The covariate's counts per ``(category, group)`` and which of them to hide.

    Categories: ``one`` (binary only), ``other`` (zeros, or observed values; never shown but derivable)
    and ``missing``. ``None`` instead of the hidden set: the counts cannot be protected, withhold them all.
    """
    groups = list(values)
    cells: dict = {("size", g): sizes[g] for g in groups}
    for g, v in values.items():
        ones = int((v == 1).sum()) if binary else 0
        missing = int(v.isna().sum())
        cells[("one", g)] = ones
        cells[("missing", g)] = missing
        cells[("other", g)] = len(v) - ones - missing
    categories = ("one", "other", "missing")
    inner = groups[:-1]
    relations = [(tuple(("size", g) for g in inner), ("size", ALL))]
    relations += [(tuple((c, g) for g in inner), (c, ALL)) for c in categories]
    relations += [(tuple((c, g) for c in categories), ("size", g)) for g in groups]
    hidden = {(c, g) for c in ("size", *categories) for g in hidden_groups}
    try:
        hide = linked_suppression(
            cells,
            relations,
            threshold,
            unpublished=[("other", g) for g in groups],
            hidden=hidden,
            keep=[("size", g) for g in groups],
        )
    except ValueError:
        return cells, None
    return cells, hide


def _median_iqr(values: pd.Series) -> str:
    v = pd.to_numeric(values, errors="coerce").dropna()
    if v.empty:
        return ""
    q1, q2, q3 = np.percentile(v, [25, 50, 75])
    return f"{q2:.3g} ({q1:.3g}–{q3:.3g})"
