"""Small-count suppression for every table and figure label that leaves the machine.

A count of people below the threshold (default 10, common practice) is shown as ``"<10"``; a zero stays
``0`` because it discloses nobody. Percentages derived from a suppressed count are suppressed with it.
Within one row of group counts, a single suppressed cell could be recovered from the row total, so the
next-smallest shown cell of that row is suppressed too (complementary suppression, common practice).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd


def format_count(n: float | int, threshold: int) -> str:
    """A count as text, ``"<threshold"`` when 0 < n < threshold.

    Parameters
    ----------
    n
        A count of people or rows (non-negative).
    threshold
        Smallest count shown as it is.
    """
    if n is None or (isinstance(n, float) and np.isnan(n)):
        return ""
    n = int(round(float(n)))
    if 0 < n < threshold:
        return f"<{threshold}"
    return str(n)


def is_suppressed(n: float | int, threshold: int) -> bool:
    """True when the count would be hidden."""
    return 0 < int(round(float(n))) < threshold


def suppress_counts(
    table: pd.DataFrame,
    columns: Sequence[str],
    threshold: int,
    *,
    complementary: bool = False,
) -> pd.DataFrame:
    """Return a copy of ``table`` whose count ``columns`` are text with small counts hidden.

    Parameters
    ----------
    table
        Any table; only ``columns`` are changed.
    columns
        Names of the columns that hold counts of people (integers).
    threshold
        Counts ``0 < n < threshold`` become ``"<threshold"``.
    complementary
        If true, a row with exactly one hidden cell among ``columns`` also hides its smallest other
        non-zero cell, so the hidden value cannot be recovered from a total.

    Raises
    ------
    ValueError
        If a named column is missing.
    """
    missing = [c for c in columns if c not in table.columns]
    if missing:
        raise ValueError(
            f"suppress_counts: column(s) {missing} not in the table (columns: {list(table.columns)})"
        )
    out = table.copy()
    values = table.loc[:, list(columns)].to_numpy(dtype=float)
    hide = (values > 0) & (np.round(values) < threshold)
    if complementary and len(columns) > 1:
        for i in range(len(values)):
            if hide[i].sum() == 1:
                shown = np.where(~hide[i] & (values[i] > 0))[0]
                if len(shown):
                    hide[i, shown[np.argmin(values[i, shown])]] = True
    for j, col in enumerate(columns):
        texts = []
        for i in range(len(values)):
            v = values[i, j]
            if np.isnan(v):
                texts.append("")
            elif hide[i, j]:
                texts.append(f"<{threshold}" if v < threshold else "suppressed")
            else:
                texts.append(str(int(round(v))))
        out[col] = texts
    return out


#: Column names that hold counts of people in tables produced by other stages.
_COUNT_NAMES = ("n", "count", "events", "at_risk", "n_events", "n_at_risk")


def count_columns(table: pd.DataFrame) -> list[str]:
    """Names of the integer columns of ``table`` that count people (``n``, ``n_*``, ``*_count``, ...)."""
    out = []
    for col in table.columns:
        name = str(col).lower()
        looks_like_count = name in _COUNT_NAMES or name.startswith("n_") or name.endswith(("_count", "_n"))
        if looks_like_count and pd.api.types.is_numeric_dtype(table[col]):
            values = table[col].dropna().to_numpy(float)
            if np.all(values == np.round(values)):
                out.append(col)
    return out
