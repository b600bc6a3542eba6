"""Brier score with inverse-probability-of-censoring weights (Graf et al. 1999), its integral over time, and
the scaled Brier score (index of prediction accuracy, Kattan & Gerds 2018) against a Kaplan–Meier null model.

Agrees with scikit-survival's ``brier_score`` and ``integrated_brier_score`` (which take survival
probabilities; here ``risk`` = 1 − survival). With competing events (code 2) the outcome indicator is
"outcome by the horizon", a competing event before the horizon counts as a known non-outcome weighted by
1/G(T_j) (Schoop et al. 2011, Stat Med), and the null model is the Aalen–Johansen cumulative incidence.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
import pandas as pd

from riskbench.metrics.auc import case_control_weights, observed_incidence, outcome_incidence
from riskbench.metrics.inputs import ArrayLike, MetricInputError, as_status, as_time
from riskbench.metrics.risk_direction import check_risk_direction
from riskbench.metrics.risk_sets import OutcomeSet, horizon_inputs


def _ipcw_brier(risk_col: np.ndarray, case_w: np.ndarray, ctrl_w: np.ndarray) -> float:
    return float(np.mean(case_w * (1.0 - risk_col) ** 2 + ctrl_w * risk_col**2))


class BrierValues(NamedTuple):
    """Brier score, null-model Brier score and scaled Brier score at each horizon (days, ascending)."""

    horizon: np.ndarray
    brier: np.ndarray
    brier_null: np.ndarray
    scaled_brier: np.ndarray


def brier_values(
    time: ArrayLike,
    event: ArrayLike,
    risk: ArrayLike,
    horizons: float | ArrayLike,
    *,
    train_time: ArrayLike | None = None,
    train_event: ArrayLike | None = None,
    check_direction: bool = True,
    outcomes: OutcomeSet | None = None,
) -> BrierValues:
    """The Brier scores of :func:`brier_score` as arrays (no table), for resampling loops (the same parameters).

    Returns
    -------
    BrierValues
    """
    t, status, r, h = horizon_inputs(time, event, risk, horizons, probability=True, outcomes=outcomes)
    if r.ndim == 1:
        if h.size != 1:
            raise MetricInputError(
                f"`risk` is one column but {h.size} horizons were given: the risk by each horizon differs, so "
                "give shape (n, len(horizons))"
            )
        r = r[:, None]
    if check_direction:
        check_risk_direction(t, status, r[:, -1])
    weights = case_control_weights(t, status, h, train_time, train_event, outcomes)
    if train_time is None or train_event is None:  # horizon_weights refused one without the other
        null_curve = observed_incidence(t, status) if outcomes is None else outcome_incidence(outcomes)
    else:
        tt = as_time(train_time, "train_time")
        null_curve = observed_incidence(tt, as_status(train_event, tt.size, allow_competing=True, name="train_event"))
    brier, null = np.empty(h.size), np.empty(h.size)
    for k, hz in enumerate(h):
        case_w, ctrl_w = weights[k]
        brier[k] = _ipcw_brier(r[:, k], case_w, ctrl_w)
        null_risk = np.full(t.size, float(null_curve(hz)))
        null[k] = _ipcw_brier(null_risk, case_w, ctrl_w)
    with np.errstate(divide="ignore", invalid="ignore"):
        scaled = np.where(null > 0, 1.0 - brier / null, np.nan)
    return BrierValues(h, brier, null, scaled)


def brier_score(
    time: ArrayLike,
    event: ArrayLike,
    risk: ArrayLike,
    horizons: float | ArrayLike,
    *,
    train_time: ArrayLike | None = None,
    train_event: ArrayLike | None = None,
    check_direction: bool = True,
    outcomes: OutcomeSet | None = None,
) -> pd.DataFrame:
    """IPCW Brier score of predicted risks at each horizon, with the Kaplan–Meier null model.

    Parameters
    ----------
    time, event
        Evaluation follow-up (days) and status (0 censored, 1 outcome, 2 competing event).
    risk
        Predicted probability of the outcome by each horizon: 1-D for one horizon, else shape
        (n, len(horizons)). Not a survival probability.
    horizons
        Times (days) within [min(time), max(time)).
    train_time, train_event
        Data for the censoring Kaplan–Meier and for the null model (default: the evaluation data).
    check_direction
        Refuse a ``risk`` that is clearly anti-concordant (a survival probability passed by mistake).
    outcomes
        ``time`` and ``event`` as an evaluation set (:class:`riskbench.metrics.risk_sets.OutcomeSet`), whose
        censoring curve and null model then serve every model and horizon measured on these rows.

    Returns
    -------
    DataFrame
        ``horizon``, ``brier``, ``brier_null`` (every subject predicted the Kaplan–Meier (or
        Aalen–Johansen) risk by the horizon), ``scaled_brier`` = 1 − brier / brier_null (index of prediction
        accuracy; 0 = no better than the null model, 1 = perfect).
    """
    values = brier_values(
        time,
        event,
        risk,
        horizons,
        train_time=train_time,
        train_event=train_event,
        check_direction=check_direction,
        outcomes=outcomes,
    )
    return pd.DataFrame(
        {
            "horizon": values.horizon,
            "brier": values.brier,
            "brier_null": values.brier_null,
            "scaled_brier": values.scaled_brier,
        }
    )


def integrated_brier_score(
    time: ArrayLike,
    event: ArrayLike,
    risk: ArrayLike,
    horizons: ArrayLike,
    *,
    train_time: ArrayLike | None = None,
    train_event: ArrayLike | None = None,
    check_direction: bool = True,
) -> float:
    """Brier score integrated over the horizons by the trapezoid rule, divided by the time span.

    Same rule as scikit-survival's ``integrated_brier_score``; ``risk`` has shape (n, len(horizons)).
    """
    table = brier_score(
        time, event, risk, horizons, train_time=train_time, train_event=train_event, check_direction=check_direction
    )
    if len(table) < 2:
        raise MetricInputError("integrated Brier score needs at least two horizons")
    h = table["horizon"].to_numpy()
    return float(np.trapezoid(table["brier"].to_numpy(), h) / (h[-1] - h[0]))
