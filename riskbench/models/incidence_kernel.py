"""Compiled product-integral of the cumulative incidence, read at a few grid columns.

The prediction step of every resampling replicate reads the Cox-based cumulative incidence of each landmark
row at one or two horizons: F1(t_J) = Σ_{j≤J} S(t_{j−1}) d1_j with S(t_j) = Π_{k≤j} (1 − d1_k − d2_k) and
the subject's increments d1_j = s₁ a_j, d2_j = s₂ b_j (scores times baseline increments). Written with whole
(rows × grid) arrays in numpy it is bound by memory traffic (about ten passes over every cell); this loop
keeps two numbers per row (the all-cause survival and the running sum) and touches each cell once, compiled
by numba. Rows are independent: a row's value is the same sequential sum whatever rows are predicted with it,
so a saved model reproduces a run's predictions exactly.
"""

from __future__ import annotations

import numpy as np
from numba import njit

_ROW_BLOCK = 512  # rows advanced together along the grid: the two running arrays stay in the fastest cache


@njit(cache=True, nogil=True)
def _incidence_read(  # pragma: no cover - compiled; its Python source is checked through the public function
    event_score: np.ndarray,
    a: np.ndarray,
    competing_score: np.ndarray,
    b: np.ndarray,
    index: np.ndarray,
    capped: bool,
    out: np.ndarray,
) -> None:
    n = event_score.size
    width = a.size
    competing = b.size > 0
    surv = np.empty(_ROW_BLOCK)
    acc = np.empty(_ROW_BLOCK)
    for start in range(0, n, _ROW_BLOCK):
        stop = min(start + _ROW_BLOCK, n)
        m = stop - start
        x1 = event_score[start:stop]  # views: indexing them (not the whole arrays) lets the loops vectorise
        x2 = competing_score[start:stop] if competing else competing_score
        surv[:m] = 1.0
        acc[:m] = 0.0
        for j in range(width):
            aj = a[j]
            bj = b[j] if competing else 0.0
            if capped:  # a large score can push an increment past 1: the cap is shared between causes
                for i in range(m):
                    d1 = x1[i] * aj
                    total = d1 + x2[i] * bj if competing else d1
                    if total > 1.0:
                        d1 = d1 / total
                        total = 1.0
                    acc[i] += surv[i] * d1
                    surv[i] *= 1.0 - total
            elif competing:  # the usual case, in a loop without branches that the compiler vectorises
                for i in range(m):
                    d1 = x1[i] * aj
                    acc[i] += surv[i] * d1
                    surv[i] *= 1.0 - (d1 + x2[i] * bj)
            else:
                for i in range(m):
                    d1 = x1[i] * aj
                    acc[i] += surv[i] * d1
                    surv[i] *= 1.0 - d1
            for k in range(index.size):
                if index[k] == j:
                    for i in range(m):
                        out[start + i, k] = acc[i]


def incidence_at_columns(
    event_score: np.ndarray,
    a: np.ndarray,
    competing_score: np.ndarray | None,
    b: np.ndarray | None,
    index: np.ndarray,
) -> np.ndarray:
    """Cumulative incidence of each row read at grid columns ``index`` (-1: before the first jump, 0).

    Parameters
    ----------
    event_score, competing_score : array (n,)
        ``exp(linear predictor)`` in the outcome and competing models (``competing_score`` None: no
        competing event).
    a, b : array (m,)
        Non-negative baseline increments of each cause on the grid, up to the last column read.
    index : array (k,) of int
        Grid columns to read.

    Returns
    -------
    ndarray (n, k), unclipped.
    """
    n = len(event_score)
    out = np.zeros((n, index.size))
    if n == 0 or a.size == 0:
        return out
    s1 = np.ascontiguousarray(event_score, dtype=np.float64)
    if competing_score is None or b is None:
        s2, inc2 = np.zeros(0), np.zeros(0)
    else:
        s2 = np.ascontiguousarray(competing_score, dtype=np.float64)
        inc2 = np.ascontiguousarray(b, dtype=np.float64)
    inc1 = np.ascontiguousarray(a, dtype=np.float64)
    largest = float(s1.max()) * float(inc1.max())
    if s2.size:
        largest += float(s2.max()) * float(inc2.max())
    _incidence_read(s1, inc1, s2, inc2, np.ascontiguousarray(index, dtype=np.int64), largest > 1.0, out)
    return out
