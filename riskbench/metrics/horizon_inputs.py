"""Shared checks for the metrics that judge predicted probabilities at one horizon (calibration, net
benefit, triage): status 0/1/2, one probability per subject, horizon within follow-up, outcomes before it,
and the risk direction."""

from __future__ import annotations

import numpy as np

from riskbench.metrics.inputs import (
    ArrayLike,
    MetricInputError,
    as_horizons,
    as_risk,
    as_status,
    as_time,
    require_events_before,
)
from riskbench.metrics.risk_direction import check_risk_direction


def single_horizon_inputs(
    time: ArrayLike, event: ArrayLike, risk: ArrayLike, horizon: float, *, metric: str, check_direction: bool
) -> tuple[np.ndarray, np.ndarray, np.ndarray, float]:
    """Validated ``(time, status, risk, horizon)``; ``metric`` names the caller in messages."""
    t = as_time(time)
    status = as_status(event, t.size, allow_competing=True)
    r = as_risk(risk, t.size, probability=True)
    if r.ndim != 1:
        raise MetricInputError(f"`risk` must be one predicted probability per subject (1-D) for {metric}")
    h = float(as_horizons(horizon, t, name="horizon", include_last=True)[0])
    require_events_before(t, status, h)
    if check_direction:
        check_risk_direction(t, status, r)
    return t, status, r, h
