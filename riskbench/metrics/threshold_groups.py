"""Observed risk by a horizon among subjects above and below each of many risk thresholds at once.

For every threshold c the subjects split into ``risk >= c`` and ``risk < c``; the observed risk in each part is
the Aalen–Johansen cumulative incidence of the outcome (equal to 1 − Kaplan–Meier when no competing event
occurs). Counts are tabulated once per (time, threshold group) and accumulated across thresholds, so all
thresholds cost about as much as a few Kaplan–Meier curves (memory: distinct outcome times up to the
horizon × thresholds).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class ThresholdSplit:
    """Per threshold (ascending): subject counts and observed risk by the horizon above and below it."""

    thresholds: np.ndarray
    n_above: np.ndarray
    n_below: np.ndarray
    risk_above: np.ndarray
    risk_below: np.ndarray


def _cumulative_incidence(d1: np.ndarray, d_all: np.ndarray, at_risk: np.ndarray) -> np.ndarray:
    """Aalen–Johansen incidence of cause 1 at the end of the time axis (axis 0), for every column."""
    with np.errstate(divide="ignore", invalid="ignore"):
        factor = np.where(at_risk > 0, 1.0 - d_all / at_risk, 1.0)
        surv_before = np.cumprod(np.vstack([np.ones((1, factor.shape[1])), factor[:-1]]), axis=0)
        hazard = np.where(at_risk > 0, d1 / at_risk, 0.0)
    return (surv_before * hazard).sum(axis=0)


def split_by_thresholds(
    time: np.ndarray, status: np.ndarray, risk: np.ndarray, horizon: float, thresholds: np.ndarray
) -> ThresholdSplit:
    """Observed risk by ``horizon`` above (risk >= c) and below (risk < c) each threshold c.

    ``status``: 0 censored, 1 outcome, 2 competing event. ``thresholds`` must be ascending.
    """
    c = np.asarray(thresholds, dtype=float)
    k = c.size
    # group g = number of thresholds <= risk: subject is above threshold j iff g > j
    g = np.searchsorted(c, risk, side="right")
    n_group = np.bincount(g, minlength=k + 1).astype(float)
    n_below = np.cumsum(n_group)[:-1]
    n_above = risk.size - n_below

    ended = (status != 0) & (time <= horizon)
    times = np.unique(time[ended])
    risk_above, risk_below = np.zeros(k), np.zeros(k)  # no outcome by the horizon: observed risk 0
    if times.size:
        width = k + 1

        def table(row, col, n_rows):
            return np.bincount(row * width + col, minlength=n_rows * width).reshape(n_rows, width).astype(float)

        # a subject is at risk at times[m] for every m below the number of outcome times <= its own time
        last = table(np.searchsorted(times, time, side="right"), g, times.size + 1)
        at_risk_g = np.cumsum(last[::-1], axis=0)[::-1][1:]
        dall_g = table(np.searchsorted(times, time[ended]), g[ended], times.size)
        one = ended & (status == 1)
        d1_g = table(np.searchsorted(times, time[one]), g[one], times.size)
        # below threshold j: groups 0..j ; above: groups j+1..k
        cum = [np.cumsum(a, axis=1) for a in (d1_g, dall_g, at_risk_g)]
        below = [a[:, :k] for a in cum]
        above = [a[:, -1:] - b for a, b in zip(cum, below)]
        risk_below = _cumulative_incidence(*below)
        risk_above = _cumulative_incidence(*above)
    return ThresholdSplit(c, n_above, n_below, risk_above, risk_below)
