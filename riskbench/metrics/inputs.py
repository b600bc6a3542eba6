"""Checks on the arrays every metric receives: same length, finite, 0/1(/2) status, horizons in follow-up.

Every error is a :class:`MetricInputError` (a ``ValueError``) that names the argument and says how to fix it.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from riskbench.errors import RiskbenchError

ArrayLike = Sequence[float] | np.ndarray


class MetricInputError(RiskbenchError):
    """Bad arrays handed to a metric (wrong length, missing values, wrong codes, horizon out of range)."""


def as_time(time: ArrayLike, name: str = "time") -> np.ndarray:
    """Return ``time`` as a finite, non-negative float array (days, or any unit used consistently)."""
    arr = np.asarray(time, dtype=float)
    if arr.ndim != 1:
        raise MetricInputError(
            f"`{name}` must be one-dimensional (one follow-up time per subject); got shape {arr.shape}"
        )
    if arr.size == 0:
        raise MetricInputError(f"`{name}` is empty: a metric needs at least one subject")
    bad = np.flatnonzero(~np.isfinite(arr))
    if bad.size:
        raise MetricInputError(
            f"`{name}` has {bad.size} missing or infinite value(s) (first rows {bad[:5].tolist()}); "
            "drop those subjects or fill in their follow-up time"
        )
    neg = np.flatnonzero(arr < 0)
    if neg.size:
        raise MetricInputError(
            f"`{name}` has {neg.size} negative value(s) (first rows {neg[:5].tolist()}); time is counted from entry "
            "(or from the landmark) and cannot be negative"
        )
    return arr


def as_status(event: ArrayLike, n: int, *, allow_competing: bool, name: str = "event") -> np.ndarray:
    """Return ``event`` as an int array coded 0 censored, 1 outcome (and 2 competing when allowed)."""
    raw = np.asarray(event)
    if raw.ndim != 1 or raw.shape[0] != n:
        raise MetricInputError(
            f"`{name}` has {raw.shape[0] if raw.ndim else 1} entries but `time` has {n}: give one status per subject"
        )
    if raw.dtype == bool:
        return raw.astype(np.int64)
    arr = np.asarray(raw, dtype=float)
    allowed = (0.0, 1.0, 2.0) if allow_competing else (0.0, 1.0)
    bad = np.flatnonzero(~np.isin(arr, allowed))
    if bad.size:
        codes = "0 (censored), 1 (outcome) or 2 (competing event)" if allow_competing else "0 (censored) or 1 (outcome)"
        hint = (
            ""
            if allow_competing
            else "; for a competing event (code 2) pass `event == 1` to score the outcome cause-specifically"
        )
        raise MetricInputError(
            f"`{name}` must be coded {codes}; rows {bad[:5].tolist()} hold {np.unique(arr[bad])[:5].tolist()}{hint}"
        )
    return arr.astype(np.int64)


def as_risk(risk: ArrayLike, n: int, n_columns: int | None = None, *, probability: bool = False) -> np.ndarray:
    """Return ``risk`` (higher = worse) as a float array of ``n`` rows (1-D, or ``n_columns`` columns).

    With ``probability=True`` the values must lie in [0, 1] (a predicted probability of the outcome).
    """
    arr = np.asarray(risk, dtype=float)
    if arr.ndim not in (1, 2) or arr.shape[0] != n:
        raise MetricInputError(
            f"`risk` has shape {arr.shape} but `time` has {n} subjects: give one predicted risk per subject "
            "(or one column per horizon)"
        )
    if arr.ndim == 2 and n_columns is not None and arr.shape[1] != n_columns:
        raise MetricInputError(
            f"`risk` has {arr.shape[1]} columns but {n_columns} horizon(s) were given: give one column per horizon"
        )
    bad = np.flatnonzero(~np.isfinite(arr).reshape(n, -1).all(axis=1))
    if bad.size:
        raise MetricInputError(
            f"`risk` has missing or infinite values in {bad.size} row(s) (first rows {bad[:5].tolist()}); "
            "predict for those subjects or leave them out of time, event and risk alike"
        )
    if probability and ((arr < 0).any() or (arr > 1).any()):
        raise MetricInputError(
            "`risk` must be a predicted probability of the outcome by the horizon, in [0, 1]; "
            f"got values from {arr.min():.4g} to {arr.max():.4g}"
        )
    return arr


def as_horizons(
    horizons: float | ArrayLike, time: np.ndarray, *, name: str = "horizons", include_last: bool = False
) -> np.ndarray:
    """Return the horizons as a float array, each within the follow-up of the evaluation data.

    Weighted (IPCW) metrics need ``[min(time), max(time))``: at or beyond the last observed time nobody
    remains event-free under observation, so there are no controls and the censoring weights are
    undefined. Kaplan–Meier based metrics (``include_last=True``) also accept ``max(time)`` itself.
    """
    arr = np.atleast_1d(np.asarray(horizons, dtype=float))
    if arr.ndim != 1 or arr.size == 0 or not np.isfinite(arr).all():
        raise MetricInputError(f"`{name}` must be one or more finite times (same unit as `time`); got {horizons!r}")
    lo, hi = float(time.min()), float(time.max())
    too_late = arr > hi if include_last else arr >= hi
    outside = arr[(arr < lo) | too_late]
    if outside.size:
        bracket = "]" if include_last else ")"
        why = (
            "beyond the last observed time the Kaplan–Meier estimate is undefined"
            if include_last
            else "from the last observed time on no subject remains event-free under observation, so there are "
            "no controls and the censoring weights are undefined"
        )
        raise MetricInputError(
            f"`{name}` {outside[:5].tolist()} lie outside the follow-up of the evaluation data: allowed range is "
            f"[{lo:g}, {hi:g}{bracket} (first to last observed time) because {why}; choose shorter horizons "
            "(for data administratively censored at the horizon, evaluate just inside it, e.g. horizon − 0.01)"
        )
    return arr


def require_events_before(time: np.ndarray, status: np.ndarray, horizon: float) -> None:
    """Raise when no outcome (status 1) happens at or before ``horizon``: nothing would be measured."""
    if not ((status == 1) & (time <= horizon)).any():
        raise MetricInputError(
            f"no outcome (event == 1) happens at or before the horizon {horizon:g}: the metric is undefined; "
            "choose a later horizon or check the event coding"
        )


def check_lengths(**arrays: np.ndarray) -> int:
    """Raise unless all 1-D arrays have one common length; return it."""
    lengths = {k: int(np.shape(v)[0]) if np.ndim(v) else 1 for k, v in arrays.items()}
    if len(set(lengths.values())) > 1:
        listing = ", ".join(f"`{k}` {v}" for k, v in lengths.items())
        raise MetricInputError(f"arrays differ in length ({listing}): give one entry per subject (or row) in each")
    return next(iter(lengths.values()))
