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

from riskbench.metrics.censoring import ObservedRisk, StepCurve, censoring_survival, observed_risk_curve
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
    return _merge_close(uniq, inv.reshape(-1), tol)


def _merge_close(uniq: np.ndarray, code: np.ndarray, tol: float) -> np.ndarray:
    """Dense ranks from the sorted distinct values and each element's position among them."""
    if tol > 0 and uniq.size > 1:
        step = np.r_[0, np.cumsum(np.diff(uniq) > tol)]
        return step[code]
    return code


@dataclass(frozen=True)
class DistinctValues:
    """The sorted distinct values of one array and each element's position among them.

    A bootstrap replicate measures selections of the same rows (repeats allowed) again and again; the distinct
    values of a selection, and so its dense ranks, follow from these by counting which values occur, without
    sorting the selection.

    Attributes
    ----------
    values
        Sorted distinct values of the array.
    code
        Position of each element of the array in ``values``.
    """

    values: np.ndarray
    code: np.ndarray

    @classmethod
    def of(cls, array: np.ndarray) -> DistinctValues:
        """The distinct values of ``array`` (one sort)."""
        values, code = np.unique(np.asarray(array), return_inverse=True)
        return cls(values, code.reshape(-1))

    def select(self, index: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """``np.unique(array[index], return_inverse=True)``, by counting; ``index`` may repeat elements."""
        code = self.code[index]
        present = np.zeros(self.values.size, bool)
        present[code] = True
        kept = np.flatnonzero(present)  # the codes that occur, ascending
        position = np.empty(self.values.size, np.int64)
        position[kept] = np.arange(kept.size)
        return self.values[kept], position[code]

    def dense_rank(self, index: np.ndarray, tol: float = 0.0) -> np.ndarray:
        """``dense_rank(array[index], tol)``, by counting."""
        uniq, code = self.select(index)
        return _merge_close(uniq, code, tol)


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
    time: ArrayLike,
    event: ArrayLike,
    risk: ArrayLike,
    horizons: float | ArrayLike,
    *,
    probability: bool,
    outcomes: OutcomeSet | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Validated ``(time, status, risk, horizons)`` for a measure at one or more horizons: horizons sorted and
    distinct, within the follow-up, each with an outcome before it; ``risk`` 1-D or one column per horizon
    (columns reordered with the horizons); ``probability`` asks for values in [0, 1]. When ``time`` and
    ``event`` are the very arrays of ``outcomes``, they were checked when the set was built and are not again."""
    if outcomes is not None and time is outcomes.time and event is outcomes.status:
        t, status = outcomes.time, outcomes.status
    else:
        t = as_time(time)
        status = as_status(event, t.size, allow_competing=True)
    h = as_horizons(horizons, t)
    order = np.argsort(h, kind="stable")
    r = as_risk(risk, t.size, h.size, probability=probability)
    if r.ndim == 2 and (order != np.arange(order.size)).any():  # no copy when already in order
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
    def from_arrays(
        cls, time: ArrayLike, status: ArrayLike, distinct_times: tuple[np.ndarray, np.ndarray] | None = None
    ) -> OutcomeSet:
        """Validate ``time`` and ``status`` once (see :mod:`riskbench.metrics.inputs`); ``distinct_times``:
        ``np.unique(time, return_inverse=True)`` when already at hand (e.g. from :meth:`DistinctValues.select`)."""
        t = as_time(time)
        out = cls(t, as_status(status, t.size, allow_competing=True))
        if distinct_times is not None:
            out._cache["distinct_times"] = distinct_times
        return out

    def cached(self, name: Hashable, make: Callable[[], Any]) -> Any:
        """``make()`` computed once for these rows under ``name`` (a value that depends on the rows only, e.g.
        the pseudo-observations at a horizon)."""
        if name not in self._cache:
            self._cache[name] = make()
        return self._cache[name]

    def distinct_times(self) -> tuple[np.ndarray, np.ndarray]:
        """Sorted distinct times (days) and each row's position among them (computed once)."""

        def make() -> tuple[np.ndarray, np.ndarray]:
            uniq, inv = np.unique(self.time, return_inverse=True)
            return uniq, inv.reshape(-1)

        return self.cached("distinct_times", make)

    @property
    def censoring(self) -> StepCurve:
        """Kaplan–Meier of censoring, G (estimated once)."""
        return self.cached(
            "censoring", lambda: censoring_survival(self.time, self.status, distinct_times=self.distinct_times())
        )

    def observed_risk(self, target: str, status: np.ndarray) -> ObservedRisk:
        """The observed risk curve of the outcome (:func:`riskbench.metrics.censoring.observed_risk_curve`) for
        ``status``, these rows' status as the estimand ``target`` reads it (estimated once per target)."""
        return self.cached(
            ("observed_risk", target),
            lambda: observed_risk_curve(self.time, status, distinct_times=self.distinct_times()),
        )

    def later_key(self) -> tuple[np.ndarray, np.ndarray]:
        """Order key for "later than" (a larger time first; a censoring or competing event before an outcome at
        an equal time) and the dense rank of -time (computed once)."""

        def make() -> tuple[np.ndarray, np.ndarray]:
            uniq, inv = self.distinct_times()
            t_rank = (uniq.size - 1) - inv  # the dense rank of -time: the distinct times in reverse
            return 2 * t_rank + (self.status == 1).astype(np.int64), t_rank

        return self.cached("later_key", make)

    def time_rank(self) -> np.ndarray:
        """Dense rank of the time, ascending (computed once)."""
        return self.distinct_times()[1]
