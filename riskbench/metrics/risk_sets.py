"""Risk-set machinery shared by the survival measures: ranks, the censoring curve, validated horizon inputs, and
one evaluation set that keeps them for every measure and horizon.

Concordance, time-dependent AUC, the Brier score and net benefit all ask the same questions of one set of
(time, status) pairs: who is still under observation after an outcome, and how likely was each subject to stay
uncensored that long (the Kaplan–Meier of censoring, G). :class:`OutcomeSet` answers them once per set of
subjects, so a bootstrap replicate that measures several models at several horizons sorts the times and
estimates G once.
"""

from __future__ import annotations

from collections.abc import Callable, Hashable
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from riskbench.metrics.censoring import StepCurve, censoring_survival
from riskbench.metrics.inputs import (
    ArrayLike,
    MetricInputError,
    as_horizons,
    as_risk,
    as_status,
    as_time,
    require_events_before,
)


def dense_rank(values: np.ndarray, tol: float = 0.0) -> np.ndarray:
    """Dense ranks (0 = smallest); with ``tol`` > 0, sorted neighbours closer than ``tol`` share a rank."""
    uniq, inv = np.unique(values, return_inverse=True)
    if tol > 0 and uniq.size > 1:
        step = np.r_[0, np.cumsum(np.diff(uniq) > tol)]
        return step[inv.reshape(-1)]
    return inv.reshape(-1)


def censoring_curve(
    t: np.ndarray, status: np.ndarray, train_time: ArrayLike | None = None, train_event: ArrayLike | None = None
) -> StepCurve:
    """Kaplan–Meier of censoring G from the evaluation data, or from ``train_time``/``train_event`` when given
    (both or neither); a competing event (2) is not a censoring."""
    if (train_time is None) != (train_event is None):
        raise MetricInputError("give both `train_time` and `train_event`, or neither")
    if train_time is None or train_event is None:
        return censoring_survival(t, status)
    tt = as_time(train_time, "train_time")
    te = as_status(train_event, tt.size, allow_competing=True, name="train_event")
    return censoring_survival(tt, te)


def horizon_inputs(
    time: ArrayLike, event: ArrayLike, risk: ArrayLike, horizons: float | ArrayLike, *, probability: bool
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Validated ``(time, status, risk, horizons)`` for a measure at one or more horizons: horizons sorted and
    distinct, within the follow-up, each with an outcome before it; ``risk`` 1-D or one column per horizon
    (columns reordered with the horizons); ``probability`` asks for values in [0, 1]."""
    t = as_time(time)
    status = as_status(event, t.size, allow_competing=True)
    h = as_horizons(horizons, t)
    order = np.argsort(h, kind="stable")
    r = as_risk(risk, t.size, h.size, probability=probability)
    if r.ndim == 2:
        r = r[:, order]
    h = h[order]
    if np.unique(h).size != h.size:
        raise MetricInputError(f"`horizons` repeat a value ({h.tolist()}): give each horizon once")
    for hz in h:
        require_events_before(t, status, hz)
    return t, status, r, h


@dataclass
class OutcomeSet:
    """One set of subjects' follow-up, validated once, with what every measure and horizon shares.

    Attributes
    ----------
    time
        Days from the landmark (or entry) to the event or censoring.
    status
        0 censored, 1 outcome, 2 competing event.
    """

    time: np.ndarray
    status: np.ndarray
    _cache: dict = field(default_factory=dict, repr=False)

    @classmethod
    def from_arrays(cls, time: ArrayLike, status: ArrayLike) -> OutcomeSet:
        """Validate ``time`` and ``status`` once (see :mod:`riskbench.metrics.inputs`)."""
        t = as_time(time)
        return cls(t, as_status(status, t.size, allow_competing=True))

    def cached(self, name: Hashable, make: Callable[[], Any]) -> Any:
        """``make()`` computed once for these rows under ``name`` (a value that depends on the rows only, e.g.
        the pseudo-observations at a horizon)."""
        if name not in self._cache:
            self._cache[name] = make()
        return self._cache[name]

    @property
    def censoring(self) -> StepCurve:
        """Kaplan–Meier of censoring, G (estimated once)."""
        return self.cached("censoring", lambda: censoring_survival(self.time, self.status))

    def later_key(self) -> tuple[np.ndarray, np.ndarray]:
        """Order key for "later than" (a larger time first; a censoring or competing event before an outcome at
        an equal time) and the dense rank of -time (computed once)."""

        def make() -> tuple[np.ndarray, np.ndarray]:
            t_rank = dense_rank(-self.time)
            return 2 * t_rank + (self.status == 1).astype(np.int64), t_rank

        return self.cached("later_key", make)

    def time_rank(self) -> np.ndarray:
        """Dense rank of the time, ascending (computed once)."""
        return self.cached("time_rank", lambda: dense_rank(self.time))
