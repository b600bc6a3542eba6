"""Median follow-up by the reverse Kaplan–Meier method (Schemper & Smith 1996).

Schemper M, Smith TL. A note on quantifying follow-up in studies of failure time. Controlled Clinical
Trials 1996;17:343–346. The follow-up distribution is the Kaplan–Meier estimate with the indicator
reversed: the end of follow-up without an event is the "event", and an outcome or a competing event (which
stop follow-up before it was due to end) censors the follow-up time.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from riskbench.metrics.inputs import ArrayLike, MetricInputError, as_time

__all__ = ["FollowUp", "reverse_km_follow_up", "reverse_km_quantile"]


def _reverse_km(time: np.ndarray, censored: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Distinct times with a censoring (the reverse "event") and the reverse KM survival just after each."""
    times = np.unique(time[censored])
    if times.size == 0:
        return times, np.empty(0)
    at_risk = time.size - np.searchsorted(np.sort(time), times, side="left")
    ended = np.bincount(np.searchsorted(times, time[censored]), minlength=times.size)
    return times, np.cumprod(1.0 - ended / at_risk)


def reverse_km_quantile(time: ArrayLike, status: ArrayLike, q: float = 0.5) -> float:
    """The ``q`` quantile of follow-up by reverse Kaplan–Meier: the first time its survival falls to ≤ 1 − q.

    Parameters
    ----------
    time : array of follow-up times (days).
    status : array, 0 for the end of follow-up without an event, any other code (1 outcome, 2 competing
        event) for follow-up stopped by an event.
    q : quantile in (0, 1); 0.5 for the median.

    Returns
    -------
    float
        Days; ``inf`` when the reverse survival never falls that low (too little follow-up ended).
    """
    t = as_time(time)
    s = np.asarray(status)
    if s.shape != t.shape:
        raise MetricInputError(f"status has {s.size} values but time has {t.size}; pass one status per time.")
    if not 0.0 < q < 1.0:
        raise MetricInputError(f"q must lie in (0, 1); got {q!r}.")
    times, surv = _reverse_km(t, s == 0)
    below = np.flatnonzero(surv <= 1.0 - q + 1e-12)
    return float(times[below[0]]) if below.size else float("inf")


@dataclass(frozen=True)
class FollowUp:
    """Median follow-up with its interquartile range (days), by reverse Kaplan–Meier."""

    median: float
    lower_quartile: float
    upper_quartile: float


def reverse_km_follow_up(time: ArrayLike, status: ArrayLike) -> FollowUp:
    """Median and quartiles of follow-up by reverse Kaplan–Meier (Schemper & Smith 1996); days."""
    return FollowUp(*(reverse_km_quantile(time, status, q) for q in (0.5, 0.25, 0.75)))
