"""Cumulative/dynamic time-dependent AUC (Uno et al. 2007, inverse-probability-of-censoring weights), its
integral over horizons, and the ROC curve at one horizon.

At horizon t, cases are subjects with the outcome at or before t (weighted by 1/G(T_i)), controls are
subjects still event-free after t (weight 1). Equal risks count one half. Agrees with scikit-survival's
``cumulative_dynamic_auc``, including its integrated ("mean") AUC weighted by Kaplan–Meier survival drops.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from riskbench.metrics.censoring import inverse_censoring_weights, kaplan_meier
from riskbench.metrics.concordance import TIED_TOL, _censoring_curve, _dense_rank
from riskbench.metrics.inputs import (
    ArrayLike,
    MetricInputError,
    as_horizons,
    as_risk,
    as_status,
    as_time,
    require_events_before,
)


@dataclass(frozen=True)
class AUCResult:
    """Time-dependent AUC.

    Attributes
    ----------
    table
        Columns ``horizon`` (same unit as ``time``), ``auc``, ``n_cases``, ``n_controls``.
    integrated
        AUC averaged over the horizons with weights equal to the drops of the Kaplan–Meier survival of the
        evaluation data (scikit-survival's mean AUC); equals the single AUC when one horizon is given.
    """

    table: pd.DataFrame
    integrated: float


def _case_weights(t, status, last_horizon, train_time, train_event) -> np.ndarray:
    """1/G(T_i) for outcomes at or before the last horizon, 0 otherwise."""
    g_curve = _censoring_curve(t, status, train_time, train_event)
    return inverse_censoring_weights(g_curve, t, (status == 1) & (t <= last_horizon))


def _prepare_horizon_inputs(time, event, risk, horizons, *, probability: bool):
    t = as_time(time)
    status = as_status(event, t.size, allow_competing=False)
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


def auc_cumulative_dynamic(
    time: ArrayLike,
    event: ArrayLike,
    risk: ArrayLike,
    horizons: float | ArrayLike,
    *,
    train_time: ArrayLike | None = None,
    train_event: ArrayLike | None = None,
) -> AUCResult:
    """Cumulative/dynamic AUC at each horizon.

    Parameters
    ----------
    time, event
        Evaluation follow-up (days) and status (0/1).
    risk
        Higher = worse; 1-D (one score for all horizons) or shape (n, len(horizons)).
    horizons
        Times (days) within [min(time), max(time)).
    train_time, train_event
        Data for the censoring Kaplan–Meier (default: the evaluation data).

    Returns
    -------
    AUCResult
    """
    t, status, r, h = _prepare_horizon_inputs(time, event, risk, horizons, probability=False)
    w = _case_weights(t, status, h[-1], train_time, train_event)
    aucs, n_cases, n_ctrl = np.empty(h.size), np.empty(h.size, dtype=int), np.empty(h.size, dtype=int)
    rank = _dense_rank(r, TIED_TOL) if r.ndim == 1 else None
    for k, hz in enumerate(h):
        rk = rank if rank is not None else _dense_rank(r[:, k], TIED_TOL)
        is_case = (status == 1) & (t <= hz)
        is_ctrl = t > hz
        ctrl_per_rank = np.bincount(rk[is_ctrl], minlength=int(rk.max()) + 1).astype(float)
        below = np.cumsum(ctrl_per_rank) - ctrl_per_rank
        wc = w[is_case]
        n_c = float(is_ctrl.sum())
        if n_c == 0:
            raise MetricInputError(f"no subject is event-free after horizon {hz:g}: AUC is undefined there")
        rc = rk[is_case]
        aucs[k] = float(np.sum(wc * (below[rc] + 0.5 * ctrl_per_rank[rc])) / (wc.sum() * n_c))
        n_cases[k], n_ctrl[k] = int(is_case.sum()), int(n_c)
    if h.size == 1:
        integrated = float(aucs[0])
    else:
        s = kaplan_meier(t, status)(h)
        drops = -np.diff(np.r_[1.0, s])
        integrated = float(np.sum(aucs * drops) / (1.0 - s[-1]))
    table = pd.DataFrame({"horizon": h, "auc": aucs, "n_cases": n_cases, "n_controls": n_ctrl})
    return AUCResult(table=table, integrated=integrated)


def roc_at_horizon(
    time: ArrayLike,
    event: ArrayLike,
    risk: ArrayLike,
    horizon: float,
    *,
    train_time: ArrayLike | None = None,
    train_event: ArrayLike | None = None,
) -> pd.DataFrame:
    """ROC curve at one horizon: weighted sensitivity and specificity of the rule ``risk >= threshold``.

    Returns
    -------
    DataFrame
        ``threshold`` (descending, starting at +inf: nobody positive), ``sensitivity`` (IPCW-weighted share
        of cases with risk >= threshold), ``specificity`` (share of controls with risk < threshold).
    """
    t, status, r, h = _prepare_horizon_inputs(time, event, risk, horizon, probability=False)
    w = _case_weights(t, status, h[-1], train_time, train_event)
    if r.ndim == 2:
        r = r[:, 0]
    hz = float(h[0])
    is_case = (status == 1) & (t <= hz)
    is_ctrl = t > hz
    thresholds, rk = np.unique(r, return_inverse=True)
    case_w = np.bincount(rk, weights=np.where(is_case, w, 0.0), minlength=thresholds.size)
    ctrl_n = np.bincount(rk, weights=is_ctrl.astype(float), minlength=thresholds.size)
    # positives at threshold c are risk >= c: reverse cumulative sums over descending thresholds
    tp = np.cumsum(case_w[::-1]) / case_w.sum()
    fp = np.cumsum(ctrl_n[::-1]) / max(ctrl_n.sum(), 1.0)
    return pd.DataFrame(
        {
            "threshold": np.r_[np.inf, thresholds[::-1]],
            "sensitivity": np.r_[0.0, tp],
            "specificity": np.r_[1.0, 1.0 - fp],
        }
    )
