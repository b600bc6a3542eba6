"""Offline two-dimensional dominance sums in O(n log n) with numpy only.

For concordance every outcome must be compared with every subject still under observation after it. Rather
than loop over pairs (O(n²)), each pair count is a *dominance* question: how much weight lies before an item
in one order (time) *and* below it in another (risk). A bottom-up merge sort answers it for all items at
once; each merge level is a stable sort of already-sorted runs (near-linear in timsort) plus cumulative
sums, so no Python-level loop runs over subjects.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


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


_BASE = 32  # blocks this small are counted pairwise by broadcasting before merging starts


def _base_blocks(ranks: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """Pairwise sums inside consecutive blocks of ``_BASE`` positions (the first merge levels at once)."""
    m = ranks.size
    pad = (-m) % _BASE
    r = np.r_[ranks, np.full(pad, -1)].reshape(-1, _BASE)
    w = np.r_[weights, np.zeros(pad)].reshape(-1, _BASE)
    earlier = np.tri(_BASE, k=-1, dtype=bool)  # earlier[p, q]: q < p
    below = np.zeros(r.shape)
    for q in range(_BASE - 1):  # 31 vector steps over all blocks, not a loop over subjects
        hit = (r[:, q : q + 1] < r[:, q + 1 :]) & earlier[q + 1 :, q]
        below[:, q + 1 :] += hit * w[:, q : q + 1]
    return below.reshape(-1)[:m]


def _merge_sums_below(ranks: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """For every position p: sum of ``weights[q]`` over q < p with ``ranks[q] < ranks[p]``."""
    m = ranks.size
    below = np.zeros(m)
    if m < 2:
        return below
    span = 2 * (int(ranks.max()) + 1)
    acc = _base_blocks(ranks, weights)
    # arrays aligned with the current arrangement (blocks of `width` positions, each sorted by rank)
    idx = np.arange(m, dtype=np.int64)
    order = np.argsort((idx // _BASE) * span + ranks, kind="stable")
    rank_cur, w_cur, acc = ranks[order].astype(np.int64), weights[order].astype(float), acc[order]
    width = _BASE
    while width < m:
        block = order // (2 * width)
        right = (order // width) & 1
        # within each merged block: by rank; at equal rank the right half first, so only strictly
        # smaller left-half ranks precede a right-half entry
        perm = np.argsort(block * span + 2 * rank_cur + (1 - right), kind="stable")
        order, rank_cur, w_cur, acc = order[perm], rank_cur[perm], w_cur[perm], acc[perm]
        block, right = block[perm], right[perm]
        left_w = w_cur * (1 - right)
        before = np.cumsum(left_w) - left_w
        acc += (before - before[block * (2 * width)]) * right
        width *= 2
    below[order] = acc
    return below


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
    below[seq] = _merge_sums_below(rank[seq], weight[seq])
    return DominanceSums(below, tied, total, seq, by_rank_key)
