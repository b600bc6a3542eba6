"""Small-count suppression for every table and figure label that leaves the machine.

A count of people below the threshold (default 10, common practice) is shown as ``"<10"``; a zero stays
``0`` because it discloses nobody. Percentages derived from a suppressed count are suppressed with it.
Within one row of group counts, a single suppressed cell could be recovered from the row total, so the
next-smallest shown cell of that row is suppressed too (complementary suppression, common practice); the
same holds for several hidden cells that add up to less than the threshold.
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


def complementary_hidden(counts: np.ndarray, threshold: int) -> np.ndarray:
    """Which of a set of group counts (adding up to a shown total) to hide.

    The small ones (``0 < n < threshold``), and then, while the hidden ones add up to less than
    ``threshold`` (their sum would follow from the total), the smallest shown non-zero count as well.
    """
    counts = np.asarray(counts, dtype=float)
    hide = (counts > 0) & (np.round(counts) < threshold)
    while 0 < counts[hide].sum() < threshold:
        shown = np.flatnonzero(~hide & (counts > 0))
        if not shown.size:
            break
        hide[shown[np.argmin(counts[shown])]] = True
    return hide


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
        If true, each row's cells are treated as groups of a shown total: see :func:`complementary_hidden`
        (a single hidden cell, or several adding up to less than ``threshold``, takes the smallest shown
        cell with it).

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
            hide[i] = complementary_hidden(np.nan_to_num(values[i]), threshold)
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
