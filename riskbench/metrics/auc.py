"""Cumulative/dynamic time-dependent AUC (Uno et al. 2007, inverse-probability-of-censoring weights), its
integral over horizons, and the ROC curve at one horizon.

At horizon t, cases are subjects with the outcome at or before t (weighted by 1/G(T_i)), controls are
subjects still event-free after t (weight 1/G(t), a constant). Equal risks count one half. Agrees with
scikit-survival's ``cumulative_dynamic_auc``, including its integrated ("mean") AUC weighted by the
Kaplan–Meier survival drops.

With competing events (code 2), a subject whose competing event comes at or before t is a control weighted
by 1/G(T_j) (Blanche, Dartigues & Jacqmin-Gadda 2013, Stat Med, "definition 2" of controls), and the
integrated AUC weights by the rises of the Aalen–Johansen cumulative incidence.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np
import pandas as pd

from riskbench.metrics.censoring import (
    StepCurve,
    aalen_johansen,
    censoring_weights_at,
    inverse_censoring_weights,
    kaplan_meier,
)
from riskbench.metrics.concordance import TIED_TOL
from riskbench.metrics.inputs import ArrayLike, MetricInputError, as_status, as_time
from riskbench.metrics.risk_sets import OutcomeSet, censoring_curve, dense_rank, horizon_inputs


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


@dataclass(frozen=True)
class HorizonWeights:
    """Inverse-probability-of-censoring weights for cases and controls at horizons.

    ``at_end[i]`` = 1/G(T_i) for subjects whose outcome or competing event is at or before the last
    horizon (0 otherwise); ``at_horizon[k]`` = 1/G(h_k) for subjects still event-free after h_k.
    """

    at_end: np.ndarray
    at_horizon: np.ndarray

    def case(self, t: np.ndarray, status: np.ndarray, horizon: float) -> np.ndarray:
        """Weights of the cases at horizon ``k``: outcome (code 1) at or before it."""
        return np.where((status == 1) & (t <= horizon), self.at_end, 0.0)

    def control(self, t: np.ndarray, status: np.ndarray, k: int, horizon: float) -> np.ndarray:
        """Weights of the controls: event-free after the horizon, or a competing event (code 2) before it."""
        return np.where(t > horizon, self.at_horizon[k], np.where((status == 2) & (t <= horizon), self.at_end, 0.0))


def horizon_weights(t, status, horizons, train_time, train_event, outcomes: OutcomeSet | None = None) -> HorizonWeights:
    """Censoring weights from the Kaplan–Meier of censoring (training data if given; else the one of
    ``outcomes``, the same rows as an evaluation set, when given)."""
    if outcomes is not None and train_time is None and train_event is None:
        g_curve = outcomes.censoring
    else:
        g_curve = censoring_curve(t, status, train_time, train_event)
    at_end = inverse_censoring_weights(g_curve, t, (status != 0) & (t <= horizons[-1]))
    g_h = censoring_weights_at(g_curve, horizons, what="horizons")
    if (g_h <= 0).any():
        raise MetricInputError(
            f"no follow-up remains uncensored at horizon(s) {horizons[g_h <= 0].tolist()}: choose shorter horizons"
        )
    return HorizonWeights(at_end, 1.0 / g_h)


def case_control_weights(
    t: np.ndarray,
    status: np.ndarray,
    horizons: np.ndarray,
    train_time: ArrayLike | None = None,
    train_event: ArrayLike | None = None,
    outcomes: OutcomeSet | None = None,
) -> list[tuple[np.ndarray, np.ndarray]]:
    """Per horizon (days, sorted), the weights of the cases and of the controls (:class:`HorizonWeights`).

    They depend on the rows and horizons only, so with ``outcomes`` (the same rows as an evaluation set) and no
    training data they are computed once for every model measured there, and shared by the AUC and the Brier score.
    """

    def make() -> list[tuple[np.ndarray, np.ndarray]]:
        weights = horizon_weights(t, status, horizons, train_time, train_event, outcomes)
        return [(weights.case(t, status, hz), weights.control(t, status, k, hz)) for k, hz in enumerate(horizons)]

    if outcomes is not None and train_time is None and train_event is None:
        return outcomes.cached(("case_control", tuple(horizons.tolist())), make)
    return make()


def observed_incidence(
    t: np.ndarray, status: np.ndarray, *, distinct_times: tuple[np.ndarray, np.ndarray] | None = None
) -> StepCurve:
    """Observed risk curve of the outcome: Aalen–Johansen with competing events, else 1 − Kaplan–Meier;
    ``distinct_times``: ``np.unique(t, return_inverse=True)`` when at hand."""
    if (status == 2).any():
        return aalen_johansen(t, status, cause=1, distinct_times=distinct_times)
    km = kaplan_meier(t, status, distinct_times=distinct_times)
    return StepCurve(km.times, 1.0 - km.values, km.variance, 0.0, km.last_time)


class AUCValues(NamedTuple):
    """The AUC at each horizon (days, ascending) with its numbers of cases and controls, as arrays."""

    horizon: np.ndarray
    auc: np.ndarray
    n_cases: np.ndarray
    n_controls: np.ndarray


def auc_values(
    time: ArrayLike,
    event: ArrayLike,
    risk: ArrayLike,
    horizons: float | ArrayLike,
    *,
    train_time: ArrayLike | None = None,
    train_event: ArrayLike | None = None,
    outcomes: OutcomeSet | None = None,
    ranks: np.ndarray | Sequence[np.ndarray] | None = None,
) -> AUCValues:
    """The AUCs of :func:`auc_cumulative_dynamic` without its table and integrated AUC, for resampling loops
    (the same parameters).

    Returns
    -------
    AUCValues
    """
    t, status, r, h = horizon_inputs(time, event, risk, horizons, probability=False, outcomes=outcomes)
    column_ranks = _column_ranks(r, horizons, ranks)
    weights = case_control_weights(t, status, h, train_time, train_event, outcomes)
    aucs, n_cases, n_ctrl = np.empty(h.size), np.empty(h.size, dtype=int), np.empty(h.size, dtype=int)
    for k, hz in enumerate(h):
        rk = column_ranks[0] if len(column_ranks) == 1 else column_ranks[k]
        case_w, ctrl_w = weights[k]
        if not (ctrl_w > 0).any():
            raise MetricInputError(f"no subject is event-free after horizon {hz:g}: AUC is undefined there")
        ctrl_per_rank = np.bincount(rk, weights=ctrl_w, minlength=int(rk.max()) + 1)
        below = np.cumsum(ctrl_per_rank) - ctrl_per_rank
        is_case = case_w > 0
        rc, wc = rk[is_case], case_w[is_case]
        aucs[k] = float(np.sum(wc * (below[rc] + 0.5 * ctrl_per_rank[rc])) / (wc.sum() * ctrl_w.sum()))
        n_cases[k], n_ctrl[k] = int(is_case.sum()), int((ctrl_w > 0).sum())
    return AUCValues(h, aucs, n_cases, n_ctrl)


def auc_cumulative_dynamic(
    time: ArrayLike,
    event: ArrayLike,
    risk: ArrayLike,
    horizons: float | ArrayLike,
    *,
    train_time: ArrayLike | None = None,
    train_event: ArrayLike | None = None,
    outcomes: OutcomeSet | None = None,
    ranks: np.ndarray | Sequence[np.ndarray] | None = None,
) -> AUCResult:
    """Cumulative/dynamic AUC at each horizon.

    Parameters
    ----------
    time, event
        Evaluation follow-up (days) and status (0 censored, 1 outcome, 2 competing event).
    risk
        Higher = worse; 1-D (one score for all horizons) or shape (n, len(horizons)).
    horizons
        Times (days) within [min(time), max(time)).
    train_time, train_event
        Data for the censoring Kaplan–Meier (default: the evaluation data).
    outcomes
        ``time`` and ``event`` as an evaluation set (:class:`riskbench.metrics.risk_sets.OutcomeSet`), whose
        censoring curve then serves every model and horizon measured on these rows.
    ranks
        ``dense_rank(risk, TIED_TOL)`` when already at hand (e.g. shared with the concordance of the same score):
        one array for a 1-D ``risk``, else one array per column, in the order of ``horizons``.

    Returns
    -------
    AUCResult
    """
    values = auc_values(
        time,
        event,
        risk,
        horizons,
        train_time=train_time,
        train_event=train_event,
        outcomes=outcomes,
        ranks=ranks,
    )
    h, aucs = values.horizon, values.auc
    if h.size == 1:
        integrated = float(aucs[0])
    else:
        t, status = as_time(time), as_status(event, np.size(time), allow_competing=True)
        curve = (
            outcome_incidence(outcomes)
            if outcomes is not None and train_time is None and train_event is None
            else observed_incidence(t, status)
        )
        incidence = curve(h)
        rises = np.diff(np.r_[0.0, incidence])
        integrated = float(np.sum(aucs * rises) / incidence[-1])
    table = pd.DataFrame({"horizon": h, "auc": aucs, "n_cases": values.n_cases, "n_controls": values.n_controls})
    return AUCResult(table=table, integrated=integrated)


def _column_ranks(
    r: np.ndarray, horizons: float | ArrayLike, ranks: np.ndarray | Sequence[np.ndarray] | None
) -> list[np.ndarray]:
    """Dense ranks (``TIED_TOL``) of the one score, or of each column of ``r`` (columns already in the order of
    the sorted horizons): those given, reordered like the columns, or computed."""
    if ranks is None:
        return [dense_rank(r, TIED_TOL)] if r.ndim == 1 else [dense_rank(c, TIED_TOL) for c in r.T]
    if r.ndim == 1:
        given = [np.asarray(ranks)]
    else:  # a sequence of columns, or one (n, len(horizons)) array
        given = list(ranks.T) if isinstance(ranks, np.ndarray) and ranks.ndim == 2 else list(ranks)
    if r.ndim == 2:
        order = np.argsort(np.atleast_1d(np.asarray(horizons, dtype=float)), kind="stable")
        given = [given[k] for k in order] if len(given) == order.size else given
    if len(given) != (1 if r.ndim == 1 else r.shape[1]) or any(g.shape != (r.shape[0],) for g in given):
        raise MetricInputError("`ranks` must hold one rank per subject for the score, or for each column of `risk`")
    return given


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
    t, status, r, h = horizon_inputs(time, event, risk, horizon, probability=False)
    weights = horizon_weights(t, status, h, train_time, train_event)
    if r.ndim == 2:
        r = r[:, 0]
    hz = float(h[0])
    thresholds, rk = np.unique(r, return_inverse=True)
    case_w = np.bincount(rk, weights=weights.case(t, status, hz), minlength=thresholds.size)
    ctrl_n = np.bincount(rk, weights=weights.control(t, status, 0, hz), minlength=thresholds.size)
    # positives at threshold c are risk >= c: reverse cumulative sums over descending thresholds
    tp = np.cumsum(case_w[::-1]) / case_w.sum()
    fp = np.cumsum(ctrl_n[::-1]) / ctrl_n.sum()
    return pd.DataFrame(
        {
            "threshold": np.r_[np.inf, thresholds[::-1]],
            "sensitivity": np.r_[0.0, tp],
            "specificity": np.r_[1.0, 1.0 - fp],
        }
    )


def outcome_incidence(outcomes: OutcomeSet) -> StepCurve:
    """:func:`observed_incidence` of an evaluation set, estimated once for every model and horizon."""
    return outcomes.cached(
        "incidence",
        lambda: observed_incidence(outcomes.time, outcomes.status, distinct_times=outcomes.distinct_times()),
    )
