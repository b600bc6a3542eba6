"""Run pseudonyms: the only patient keys that reach a run folder.

The cohort stage replaces every source identifier by ``R00001``-style keys before writing anything; the
key that links them back is never written. The order of the keys follows a seeded hash of the source id,
so it reveals neither the source order nor the ids themselves.
"""

from __future__ import annotations

import hashlib
from collections.abc import Iterable

import pandas as pd


def pseudonym_map(ids: Iterable, seed: int) -> dict:
    """Map each distinct source id to a run pseudonym ``R00001``, ``R00002``, ... (stable given ``seed``)."""
    distinct = sorted({str(i) for i in ids if not pd.isna(i)},
                      key=lambda s: hashlib.sha256(f"{seed}\x00{s}".encode()).hexdigest())
    width = max(5, len(str(len(distinct))))
    return {s: f"R{n:0{width}d}" for n, s in enumerate(distinct, start=1)}


def replace_ids(table: pd.DataFrame, mapping: dict, column: str = "patient_id") -> pd.DataFrame:
    """A copy of ``table`` whose ``column`` holds pseudonyms (missing ids stay missing)."""
    if column not in table.columns:
        return table.copy()
    out = table.copy()
    out[column] = [mapping.get(str(v)) if not pd.isna(v) else None for v in table[column]]
    return out
