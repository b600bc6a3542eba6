"""Offline two-dimensional dominance sums in O(n log n).

For concordance every outcome must be compared with every subject still under observation after it. Rather
than loop over pairs (O(n²)), each pair count is a *dominance* question: how much weight lies before an item
in one order (time) *and* below it in another (risk). Walking the items in time order while a Fenwick
(binary indexed) tree over the risk ranks holds the weight seen so far answers it for every item in
O(n log n) (Fenwick 1994, Softw Pract Exp 24:327-336); the walk is compiled by numba.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numba import njit


@dataclass(frozen=True)
class DominanceSums:
    """For each item i, sums of ``weight[j]`` over items j with ``key[j] < key[i]``.

    ``below``: ``rank[j] < rank[i]``; ``tied``: ``rank[j] == rank[i]``; ``total``: any rank.
    """

    below: np.ndarray
    tied: np.ndarray
    total: np.ndarray
    sequence: np.ndarray
    rank_key_order: np.ndarray


@njit(cache=True, nogil=True)
def _fenwick_sums_below(ranks: np.ndarray, weights: np.ndarray, n_ranks: int) -> np.ndarray:  # pragma: no cover
    below = np.empty(ranks.size)
    tree = np.zeros(n_ranks + 1)  # tree[i] holds the weight of ranks (i - lowbit(i), i] (1-based)
    for p in range(ranks.size):
        r = ranks[p]
        total = 0.0
        i = r  # ranks 0 .. r-1 are tree positions 1 .. r
        while i > 0:
            total += tree[i]
            i -= i & -i
        below[p] = total
        i = r + 1
        while i <= n_ranks:
            tree[i] += weights[p]
            i += i & -i
    return below


def _sums_below_earlier(ranks: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """For every position p: sum of ``weights[q]`` over q < p with ``ranks[q] < ranks[p]``."""
    if ranks.size == 0:
        return np.zeros(0)
    return _fenwick_sums_below(
        np.ascontiguousarray(ranks, dtype=np.int64),
        np.ascontiguousarray(weights, dtype=np.float64),
        int(ranks.max()) + 1,
    )


def _sums_before_run(
    sort_key: np.ndarray, weight: np.ndarray, group: np.ndarray | None = None, order: np.ndarray | None = None
) -> np.ndarray:
    """For each item: total weight of items with a smaller ``sort_key`` (within the same ``group``).

    ``order`` may pass an argsort of ``sort_key`` already at hand.
    """
    if order is None:
        order = np.argsort(sort_key)  # ties in the key need no particular order
    sk = sort_key[order]
    w = weight[order]
    cum = np.cumsum(w) - w
    new_run = np.r_[True, sk[1:] != sk[:-1]]
    value = cum[np.flatnonzero(new_run)[np.cumsum(new_run) - 1]]
    if group is not None:
        g = group[order]
        new_group = np.r_[True, g[1:] != g[:-1]]
        value = value - cum[np.flatnonzero(new_group)[np.cumsum(new_group) - 1]]
    out = np.empty(sort_key.size)
    out[order] = value
    return out


def dominance_sums(
    key: np.ndarray,
    rank: np.ndarray,
    weight: np.ndarray,
    *,
    reuse_reversed: DominanceSums | None = None,
) -> DominanceSums:
    """Sum ``weight`` over items with a strictly smaller ``key``, split by ``rank`` below / tied / any.

    Parameters
    ----------
    key
        Non-negative integer order keys (e.g. a time order); comparison is strict.
    rank
        Non-negative integer ranks of the score (ties share a rank).
    weight
        Weight of each item as a counted point (1 for plain pair counts, 0 for an item that only asks).
    reuse_reversed
        Result of a call on the same items with both ``key`` and ``rank`` order-reversed: its two sort
        orders, reversed, serve here and save the two sorts.
    """
    key = np.asarray(key, dtype=np.int64)
    rank = np.asarray(rank, dtype=np.int64)
    weight = np.asarray(weight, dtype=float)
    n_keys = int(key.max()) + 1
    n_ranks = int(rank.max()) + 1

    # sequence by key ascending, rank descending: an item with an equal key and a smaller rank comes later,
    # so the merge counts only strictly smaller keys as "before"
    if reuse_reversed is not None:
        seq, by_rank_key = reuse_reversed.sequence[::-1], reuse_reversed.rank_key_order[::-1]
    else:
        seq = np.argsort(key * n_ranks + (n_ranks - 1 - rank))
        by_rank_key = np.argsort(rank * n_keys + key)
    total = _sums_before_run(key, weight, order=seq)
    tied = _sums_before_run(rank * n_keys + key, weight, group=rank, order=by_rank_key)
    below = np.empty(key.size)
    below[seq] = _sums_below_earlier(rank[seq], weight[seq])
    return DominanceSums(below, tied, total, seq, by_rank_key)


@dataclass(frozen=True)
class DominanceCounts:
    """For each item i, how many counted items j have ``key[j] < key[i]``: with ``rank[j] < rank[i]``
    (``below``), ``rank[j] == rank[i]`` (``tied``) and any rank (``total``); floats, as in :class:`DominanceSums`."""

    below: np.ndarray
    tied: np.ndarray
    total: np.ndarray


@njit(cache=True, nogil=True)
def _count_dominated(  # pragma: no cover - compiled; checked against dominance_sums in tests/metrics/test_dominance.py
    key: np.ndarray, rank: np.ndarray, counted: np.ndarray, asking: np.ndarray, n_keys: int, n_ranks: int
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    n = key.size
    # the items bucketed by key (a counting sort: the keys are small integers)
    start = np.zeros(n_keys + 1, np.int64)
    for i in range(n):
        start[key[i] + 1] += 1
    for k in range(n_keys):
        start[k + 1] += start[k]
    fill = start[:-1].copy()
    order = np.empty(n, np.int64)
    for i in range(n):
        order[fill[key[i]]] = i
        fill[key[i]] += 1
    tree = np.zeros(n_ranks + 1, np.int32)  # counts of counted items by rank (1-based), below 2**31 items
    per_rank = np.zeros(n_ranks, np.int32)
    below, tied, total = np.zeros(n), np.zeros(n), np.zeros(n)
    seen = 0
    for k in range(n_keys):
        # every item of a key asks before any of them is counted: only strictly smaller keys count
        for p in range(start[k], start[k + 1]):
            i = order[p]
            if not asking[i]:
                continue
            r = rank[i]
            s = 0
            j = r
            while j > 0:
                s += tree[j]
                j -= j & -j
            below[i] = s
            tied[i] = per_rank[r]
            total[i] = seen
        for p in range(start[k], start[k + 1]):
            i = order[p]
            if counted[i]:
                r = rank[i]
                per_rank[r] += 1
                seen += 1
                j = r + 1
                while j <= n_ranks:
                    tree[j] += 1
                    j += j & -j
    return below, tied, total


def dominance_counts(
    key: np.ndarray, rank: np.ndarray, counted: np.ndarray | None = None, asking: np.ndarray | None = None
) -> DominanceCounts:
    """:func:`dominance_sums` with weights 1 (``counted``) or 0, without its two sorts.

    The sums are integer counts, so they do not depend on the order in which items are added and equal those of
    :func:`dominance_sums` exactly; the keys are bucketed by counting and one walk over the buckets fills all three
    counts, where :func:`dominance_sums` sorts the items twice.

    Parameters
    ----------
    key
        Non-negative integer order keys; comparison is strict.
    rank
        Non-negative integer ranks of the score (ties share a rank).
    counted
        Whether each item counts as a point (default: all).
    asking
        Whether each item's counts are wanted (default: all); the others get 0, and skipping them halves the walk
        when few items ask (the outcomes among all subjects, for a concordance index).
    """
    key = np.ascontiguousarray(key, dtype=np.int64)
    rank = np.ascontiguousarray(rank, dtype=np.int64)
    everyone = np.ones(key.size, np.bool_)
    points = everyone if counted is None else np.ascontiguousarray(counted, dtype=np.bool_)
    queries = everyone if asking is None else np.ascontiguousarray(asking, dtype=np.bool_)
    if key.size == 0:
        return DominanceCounts(np.zeros(0), np.zeros(0), np.zeros(0))
    below, tied, total = _count_dominated(key, rank, points, queries, int(key.max()) + 1, int(rank.max()) + 1)
    return DominanceCounts(below, tied, total)
