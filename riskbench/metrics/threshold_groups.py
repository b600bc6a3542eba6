"""Observed risk by a horizon among subjects above and below each of many risk thresholds at once.

For every threshold c the subjects split into ``risk >= c`` and ``risk < c``; the observed risk in each part is
the Aalen–Johansen cumulative incidence of the outcome (equal to 1 − Kaplan–Meier when no competing event
occurs). :class:`ThresholdGroups` sorts the subjects into threshold groups and outcome times once; each
:meth:`ThresholdGroups.split` then walks the outcome times up to the horizon a single time, accumulating
counts across the groups (time: subjects + outcome times up to the horizon × thresholds). A split may count
each subject several times (e.g. as often as a bootstrap resample drew it): the numbers are then exactly, to
the last bit, those of the repeated rows, with no re-sorting.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numba import njit

from riskbench.metrics.inputs import MetricInputError


@dataclass(frozen=True)
class ThresholdSplit:
    """Per threshold (ascending): subject counts and observed risk by the horizon above and below it."""

    thresholds: np.ndarray
    n_above: np.ndarray
    n_below: np.ndarray
    risk_above: np.ndarray
    risk_below: np.ndarray


@njit(cache=True, nogil=True)
def _incidence_above_below(
    group: np.ndarray,
    n_groups: int,
    exit_start: np.ndarray,
    exit_row: np.ndarray,
    event_start: np.ndarray,
    event_row: np.ndarray,
    event_is_outcome: np.ndarray,
    counts: np.ndarray,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:  # pragma: no cover
    """Counted subjects per threshold group, and the Aalen–Johansen incidence of the outcome by the horizon (past
    the last outcome time on the axis) above and below every threshold.

    Row r lies in ``group[r]`` (above thresholds 0 … group − 1) and counts ``counts[r]`` times. Just before
    outcome time m (ascending) the rows ``exit_row[exit_start[m]:exit_start[m + 1]]`` leave the risk set;
    the rows ``event_row[event_start[m]:event_start[m + 1]]`` end at it.
    """
    n_thresholds = n_groups - 1
    at_risk = np.zeros(n_groups, np.int64)
    for r in range(group.size):
        at_risk[group[r]] += counts[r]
    group_total = at_risk.copy()
    total_at_risk = group_total.sum()
    d_all = np.zeros(n_groups, np.int64)
    d_one = np.zeros(n_groups, np.int64)
    surv_below, surv_above = np.ones(n_thresholds), np.ones(n_thresholds)
    risk_below, risk_above = np.zeros(n_thresholds), np.zeros(n_thresholds)
    for m in range(exit_start.size - 1):
        for q in range(exit_start[m], exit_start[m + 1]):
            c = counts[exit_row[q]]
            at_risk[group[exit_row[q]]] -= c
            total_at_risk -= c
        all_total, one_total = 0, 0
        for q in range(event_start[m], event_start[m + 1]):
            c = counts[event_row[q]]
            d_all[group[event_row[q]]] += c
            all_total += c
            if event_is_outcome[q]:
                d_one[group[event_row[q]]] += c
                one_total += c
        if all_total == 0:
            continue  # nobody counted ends here: every curve stays as it is
        # Counts are whole numbers, exact as floats, so each step divides exactly the numbers a per-threshold
        # fit would. A step with nobody ending (survival × 1) or no outcome (incidence + 0) changes nothing and
        # is skipped. Below threshold j means groups 0 … j; above, groups j + 1 … n_thresholds.
        ar, d1, da = 0, 0, 0
        for j in range(n_thresholds):
            ar += at_risk[j]
            d1 += d_one[j]
            da += d_all[j]
            if da > 0:
                if d1 > 0:
                    risk_below[j] += surv_below[j] * (d1 / ar)
                surv_below[j] *= 1.0 - da / ar
            if da < all_total:
                ar_above = total_at_risk - ar
                if d1 < one_total:
                    risk_above[j] += surv_above[j] * ((one_total - d1) / ar_above)
                surv_above[j] *= 1.0 - (all_total - da) / ar_above
        for q in range(event_start[m], event_start[m + 1]):
            d_all[group[event_row[q]]] = 0
            d_one[group[event_row[q]]] = 0
    return group_total, risk_above, risk_below


def _block_starts(block: np.ndarray, n_blocks: int) -> np.ndarray:
    """Start of each block 0 … n_blocks − 1 (and the end of the last) in ``block`` sorted ascending."""
    return np.r_[0, np.cumsum(np.bincount(block, minlength=n_blocks)[:n_blocks])].astype(np.int64)


class ThresholdGroups:
    """Subjects sorted once into threshold groups and outcome times, for any number of (recounted) splits.

    Each :meth:`split` may count every subject a different number of times, e.g. as often as a bootstrap
    resample drew it, without sorting anything again.

    Parameters
    ----------
    time
        Follow-up (days).
    status
        0 censored, 1 outcome, 2 competing event.
    risk
        Predicted risk; a subject is above threshold c when ``risk >= c``.
    horizon
        Days; outcomes and competing events after it are not counted.
    thresholds
        Ascending.
    """

    def __init__(
        self, time: np.ndarray, status: np.ndarray, risk: np.ndarray, horizon: float, thresholds: np.ndarray
    ) -> None:
        self.thresholds = np.asarray(thresholds, dtype=float)
        self.size = int(np.size(time))
        # group g = number of thresholds <= risk: a subject is above threshold j iff g > j
        self._group = np.searchsorted(self.thresholds, risk, side="right").astype(np.int64)
        ended = (status != 0) & (time <= horizon)
        times = np.unique(time[ended])
        # a subject is at risk at times[m] for every m below the number of outcome times <= its own time, so it
        # leaves the risk set just before time number `exit_at` (never, when that is past the last one)
        exit_at = np.searchsorted(times, time, side="right")
        order = np.argsort(exit_at, kind="stable")
        order = order[exit_at[order] < times.size]
        self._exit_start = _block_starts(exit_at[order], times.size)
        self._exit_row = order.astype(np.int64)
        ended_rows = np.flatnonzero(ended)
        at = np.searchsorted(times, time[ended_rows])
        order = np.argsort(at, kind="stable")
        self._event_start = _block_starts(at[order], times.size)
        self._event_row = ended_rows[order].astype(np.int64)
        self._event_is_outcome = np.asarray(status)[self._event_row] == 1

    def split(self, counts: np.ndarray | None = None) -> ThresholdSplit:
        """Subject counts and observed risk by the horizon above and below each threshold.

        Parameters
        ----------
        counts
            Per subject, how many times it counts (whole numbers >= 0, e.g. how often a bootstrap resample drew
            it: ``np.bincount(rows, minlength=n)``); the result is exactly the one for the repeated rows.
            ``None``: once each.

        Returns
        -------
        ThresholdSplit
            ``n_above`` / ``n_below`` count repeats; risks are proportions (0 where nobody counted has the
            outcome by the horizon).
        """
        if counts is None:
            w = np.ones(self.size, np.int64)
        else:
            given = np.asarray(counts)
            if (
                given.shape != (self.size,)
                or not np.issubdtype(given.dtype, np.integer)
                or (given.size and given.min() < 0)
            ):
                raise MetricInputError(
                    f"`counts` must be {self.size} whole numbers >= 0 (an integer array), one per subject"
                )
            w = np.ascontiguousarray(given, dtype=np.int64)
        group_total, risk_above, risk_below = _incidence_above_below(
            self._group,
            self.thresholds.size + 1,
            self._exit_start,
            self._exit_row,
            self._event_start,
            self._event_row,
            self._event_is_outcome,
            w,
        )
        n_below = np.cumsum(group_total)[:-1].astype(float)
        return ThresholdSplit(self.thresholds, float(group_total.sum()) - n_below, n_below, risk_above, risk_below)


def split_by_thresholds(
    time: np.ndarray, status: np.ndarray, risk: np.ndarray, horizon: float, thresholds: np.ndarray
) -> ThresholdSplit:
    """Observed risk by ``horizon`` (days) above (risk >= c) and below (risk < c) each threshold c.

    ``status``: 0 censored, 1 outcome, 2 competing event. ``thresholds`` must be ascending. To split many
    resamples of the same subjects, build one :class:`ThresholdGroups` and pass each resample's counts to its
    :meth:`~ThresholdGroups.split`.
    """
    return ThresholdGroups(time, status, risk, horizon, thresholds).split()
