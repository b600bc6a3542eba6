"""Small-count suppression for every table and figure label that leaves the machine.

A count of people below the threshold (default 10, common practice) is shown as ``"<10"``; a zero stays
``0`` because it discloses nobody. Percentages derived from a suppressed count are suppressed with it.
Within one row of group counts, a single suppressed cell could be recovered from the row total, so the
next-smallest shown cell of that row is suppressed too (complementary suppression, common practice); the
same holds for several hidden cells that add up to less than the threshold. Tables whose counts are linked
by several sums (rows and columns with margins) use :func:`linked_suppression`, which hides complementary
cells until no small count follows from the shown ones; counts of the same people at consecutive times use
:func:`coarsen_sequence`, so no difference between them reveals a few people.
"""

from __future__ import annotations

import itertools
from collections.abc import Hashable, Iterable, Iterator, Mapping, Sequence

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
    n = round(float(n))
    if 0 < n < threshold:
        return f"<{threshold}"
    return str(n)


def is_suppressed(n: float | int, threshold: int) -> bool:
    """True when the count would be hidden."""
    return 0 < round(float(n)) < threshold


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
        raise ValueError(f"suppress_counts: column(s) {missing} not in the table (columns: {list(table.columns)})")
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
                texts.append(str(round(v)))
        out[col] = texts
    return out


Cell = Hashable
Relation = tuple[tuple[Cell, ...], Cell]


def derivable_cells(relations: Sequence[Relation], known: set) -> set:
    """Every cell a reader can work out from the ``known`` ones through the sums ``parts -> total``.

    A relation with exactly one unknown cell gives it (the total minus the known parts, or a part as the total
    minus the others); repeated until nothing changes. This is the attack complementary suppression guards
    against (common practice in statistical disclosure control, e.g. the Eurostat/ONS handbooks on
    tabular data protection).
    """
    known = set(known)
    for _ in _derivations(relations, known):
        pass
    return known


def _derivations(relations: Sequence[Relation], known: set) -> Iterator[tuple[Relation, Cell]]:
    """Add to ``known`` every cell that a sum with a single unknown cell gives; yield each with its sum."""
    changed = True
    while changed:
        changed = False
        for parts, total in relations:
            unknown = [c for c in (*parts, total) if c not in known]
            if len(unknown) == 1:
                known.add(unknown[0])
                changed = True
                yield (parts, total), unknown[0]


def linked_suppression(
    values: Mapping[Cell, float],
    relations: Sequence[Relation],
    threshold: int,
    *,
    unpublished: Iterable[Cell] = (),
    hidden: Iterable[Cell] = (),
    keep: Iterable[Cell] = (),
) -> set:
    """Which cells of a table linked by sums to hide so that no small count can be worked out.

    Parameters
    ----------
    values
        Every cell's count (cells are any hashable keys).
    relations
        ``(parts, total)``: the counts of ``parts`` add up to the count of ``total`` (rows and columns of a
        table with its margins, a group split, ...).
    threshold
        Counts ``0 < n < threshold`` are small: they are hidden, and must not be derivable from the rest.
    unpublished
        Cells that are not shown at all but that a reader may still derive (e.g. "not missing" when
        "missing" and the group size are shown); a small one must stay underivable too.
    hidden
        Cells hidden already (e.g. a whole group withheld).
    keep
        Cells never chosen as complementary cells (e.g. group sizes settled in another table).

    Returns
    -------
    set
        The shown-table cells to hide (small ones and complementary ones).

    Notes
    -----
    Rules (common practice in statistical disclosure control): a small count is hidden; while some
    relation lets a reader derive a small count (:func:`derivable_cells`), or lets a reader derive that
    hidden parts add up to a small positive number, the smallest shown non-zero part of that relation is
    hidden too (its total, when no part is left). If nothing can be hidden, :class:`ValueError` is raised
    (the caller withholds the whole block).
    """
    keep, unpublished = set(keep), set(unpublished)
    small = {c for c, v in values.items() if 0 < round(float(v)) < threshold}
    hide = (set(hidden) | small) - unpublished
    while True:
        known = set(values) - hide - unpublished
        offending = _first_disclosure(values, relations, known, small, threshold)
        if offending is None:
            return hide
        parts, total = offending
        candidates = [c for c in parts if c in known and c not in keep and values[c] > 0]
        if not candidates and total in known and total not in keep and values[total] > 0:
            candidates = [total]
        if not candidates:
            raise ValueError("linked_suppression: no cell left to hide in a disclosing relation")
        hide.add(min(candidates, key=lambda c: float(values[c])))


def _first_disclosure(values, relations, known, small, threshold):
    """The first relation through which a small count (or a small sum of hidden parts) can be derived."""
    known = set(known)
    for relation, cell in _derivations(relations, known):
        if cell in small:
            return relation
    for parts, total in relations:
        unknown = [c for c in parts if c not in known]
        if total in known and len(unknown) > 1 and 0 < sum(float(values[c]) for c in unknown) < threshold:
            return parts, total
    return None


def round_to_base(n: float, base: int) -> int:
    """``n`` rounded to the nearest multiple of ``base`` (halves upwards), at least ``base`` when ``n >= base``."""
    return max(int(base * ((float(n) + base / 2) // base)), base if n >= base else 0)


def coarsen_sequence(counts: Sequence[float], threshold: int) -> list[str]:
    """Counts of the same people at consecutive times, shown so that no difference reveals a small number.

    A small count is ``"<threshold"`` (a zero stays ``0``). When two consecutive counts differ by less than
    ``threshold`` (but not by zero), the difference would reveal a small number of people leaving or
    arriving; then every count of the sequence is rounded to a multiple of ``threshold`` (written ``"~60"``),
    so that shown differences are 0 or at least ``threshold`` (rounding is common practice in statistical
    disclosure control).
    """
    values = [float(v) for v in counts]
    small_step = any(0 < abs(a - b) < threshold for a, b in itertools.pairwise(values))
    out = []
    for v in values:
        if np.isnan(v):
            out.append("")
        elif 0 < round(v) < threshold:
            out.append(f"<{threshold}")
        elif small_step and v > 0:
            out.append(f"~{round_to_base(v, threshold)}")
        else:
            out.append(str(round(v)))
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
