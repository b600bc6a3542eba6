"""Kaplan–Meier curves for the outcome and for censoring, inverse-probability-of-censoring weights and the
Aalen–Johansen cumulative incidence.

Tie convention (shared with scikit-survival so results agree): at a time with both outcomes and
censorings, outcomes happen first, so a subject censored at that time is still at risk for the outcome and
is not at risk of being censored by the outcomes.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from riskbench.metrics.inputs import MetricInputError


@dataclass(frozen=True)
class StepCurve:
    """A right-continuous step function: ``values[k]`` holds on ``[times[k], times[k+1])``; 1 before ``times[0]``.

    Attributes
    ----------
    times
        Distinct event times (ascending, same unit as the input time).
    values
        Survival (or cumulative incidence) just after each time.
    variance
        Pointwise variance estimate at each time (Greenwood, or the delta method for Aalen–Johansen).
    start
        Value before the first time (1 for survival, 0 for cumulative incidence).
    last_time
        Largest observed follow-up time; evaluation beyond it is refused when the curve has not reached 0.
    """

    times: np.ndarray
    values: np.ndarray
    variance: np.ndarray
    start: float
    last_time: float

    def index(self, t: np.ndarray | float) -> np.ndarray:
        """Position of the step holding at ``t`` (-1 before the first time)."""
        return np.searchsorted(self.times, np.asarray(t, dtype=float), side="right") - 1

    def __call__(self, t: np.ndarray | float) -> np.ndarray:
        idx = self.index(t)
        vals = np.r_[self.start, self.values]
        return vals[idx + 1]

    def var_at(self, t: np.ndarray | float) -> np.ndarray:
        """Variance of the curve at ``t`` (0 before the first time)."""
        return np.r_[0.0, self.variance][self.index(t) + 1]


#: ``np.unique(time, return_inverse=True)`` of a follow-up array: its sorted distinct times and each row's position.
DistinctTimes = tuple[np.ndarray, np.ndarray]


def _counts(
    time: np.ndarray, event: np.ndarray, distinct_times: DistinctTimes | None = None
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Distinct times, outcomes, censorings and number at risk (time >= t) at each distinct time."""
    uniq, inv = np.unique(time, return_inverse=True) if distinct_times is None else distinct_times
    n_total = np.bincount(inv, minlength=uniq.size)
    n_event = np.bincount(inv, weights=event.astype(float), minlength=uniq.size)
    at_risk = time.size - np.r_[0, np.cumsum(n_total)[:-1]]
    return uniq, n_event, n_total - n_event, at_risk.astype(float)


def _product_limit(times: np.ndarray, d: np.ndarray, r: np.ndarray, last_time: float) -> StepCurve:
    with np.errstate(divide="ignore", invalid="ignore"):
        factor = np.where(r > 0, 1.0 - d / r, 1.0)
        surv = np.cumprod(factor)
        # Greenwood: sum d / (r (r - d)); infinite once the curve hits 0
        gw = np.cumsum(np.where(r > d, d / (r * (r - d)), np.where(d > 0, np.inf, 0.0)))
        var = np.where(surv > 0, surv**2 * gw, 0.0)
    return StepCurve(times, surv, var, 1.0, last_time)


def kaplan_meier(time: np.ndarray, event: np.ndarray, *, distinct_times: DistinctTimes | None = None) -> StepCurve:
    """Kaplan–Meier survival for the outcome (``event`` 1 = outcome, anything else = censored);
    ``distinct_times``: ``np.unique(time, return_inverse=True)`` when at hand."""
    time = np.asarray(time, dtype=float)
    uniq, d, _, r = _counts(time, np.asarray(event) == 1, distinct_times)
    return _product_limit(uniq, d, r, float(time.max()))


def censoring_survival(
    time: np.ndarray, event: np.ndarray, *, distinct_times: DistinctTimes | None = None
) -> StepCurve:
    """Kaplan–Meier of the censoring distribution G(t) = P(C > t), outcomes ordered before censorings.

    ``event`` 1 or 2 counts as an observed (non-censoring) end; 0 is a censoring. ``distinct_times``:
    ``np.unique(time, return_inverse=True)`` when at hand.
    """
    time = np.asarray(time, dtype=float)
    uniq, d, c, r = _counts(time, np.asarray(event) != 0, distinct_times)
    return _product_limit(uniq, c, r - d, float(time.max()))


def censoring_weights_at(curve: StepCurve, t: np.ndarray, *, what: str) -> np.ndarray:
    """G(t) from a censoring curve, refusing times after its last follow-up time when G has not reached 0."""
    t = np.asarray(t, dtype=float)
    beyond = t > curve.last_time
    if beyond.any() and curve.values.size and curve.values[-1] > 0:
        raise MetricInputError(
            f"{what} {np.unique(t[beyond])[:5].tolist()} lie after the last follow-up time {curve.last_time:g} of the "
            "data used to estimate the censoring distribution (`train_time`): the censoring weights are not "
            "estimable there; pass training data that covers the evaluation follow-up or shorten the horizon"
        )
    g = np.where(beyond, 0.0, curve(t))
    return g


def inverse_censoring_weights(curve: StepCurve, time: np.ndarray, use: np.ndarray, power: int = 1) -> np.ndarray:
    """1/G(T_i)^power for the subjects in ``use`` (0 for the others), refusing G = 0 (infinite weight)."""
    g = censoring_weights_at(curve, time[use], what="outcome times")
    if (g <= 0).any():
        raise MetricInputError(
            "the censoring survival G reaches 0 before some outcome times: inverse-probability weights are "
            "infinite; choose a horizon (or `tau`) before the last censoring"
        )
    weight = np.zeros(time.size)
    weight[use] = 1.0 / g**power
    return weight


def aalen_johansen(
    time: np.ndarray, status: np.ndarray, cause: int = 1, *, distinct_times: DistinctTimes | None = None
) -> StepCurve:
    """Aalen–Johansen cumulative incidence of ``cause`` with competing causes (status 0 = censored).

    The variance is the delta-method estimator of Marubini & Valsecchi (1995), *Analysing Survival Data
    from Clinical Trials and Observational Studies*, the one lifelines' ``AalenJohansenFitter`` reports.
    ``distinct_times``: ``np.unique(time, return_inverse=True)`` when at hand.
    """
    time = np.asarray(time, dtype=float)
    status = np.asarray(status)
    if distinct_times is None:
        uniq, inv = np.unique(time, return_inverse=True)
        distinct_times = (uniq, inv.reshape(-1))
    uniq, d_all, _, r = _counts(time, status != 0, distinct_times)
    _, d_cause, _, _ = _counts(time, status == cause, distinct_times)
    with np.errstate(divide="ignore", invalid="ignore"):
        surv = np.cumprod(np.where(r > 0, 1.0 - d_all / r, 1.0))
        lag_s = np.r_[1.0, surv[:-1]]
        hazard = np.where(r > 0, d_cause / r, 0.0)
        cif = np.cumsum(lag_s * hazard)
        # var F(t) = sum_{tj<=t} (F(t)-F(tj))^2 d/(r(r-d)) + S(tj-)^2 d1 (r-d1)/r^3
        #            - 2 (F(t)-F(tj)) S(tj-) d1/r^2   (evaluated for every t by expanding the squares)
        a = np.where(r > d_all, d_all / (r * (r - d_all)), 0.0)
        b = np.where(r > 0, lag_s**2 * d_cause * (r - d_cause) / r**3, 0.0)
        c = np.where(r > 0, lag_s * d_cause / r**2, 0.0)
    ca, caf, caf2 = np.cumsum(a), np.cumsum(a * cif), np.cumsum(a * cif**2)
    cb, cc, ccf = np.cumsum(b), np.cumsum(c), np.cumsum(c * cif)
    var = cif**2 * ca - 2 * cif * caf + caf2 + cb - 2 * (cif * cc - ccf)
    return StepCurve(uniq, cif, np.maximum(var, 0.0), 0.0, float(time.max()))


@dataclass(frozen=True)
class ObservedRisk:
    """The observed risk curve of the outcome: ``curve`` itself (Aalen–Johansen) or 1 − ``curve``
    (Kaplan–Meier, ``complement`` True)."""

    curve: StepCurve
    complement: bool

    def at(self, horizon: float) -> tuple[float, float]:
        """Observed probability of the outcome by ``horizon`` (days) and its variance."""
        value = self.curve(horizon)
        return float(1.0 - value if self.complement else value), float(self.curve.var_at(horizon))


def observed_risk_curve(
    time: np.ndarray, status: np.ndarray, *, distinct_times: DistinctTimes | None = None
) -> ObservedRisk:
    """The curve :func:`observed_risk` reads, to read it at several horizons; ``distinct_times``:
    ``np.unique(time, return_inverse=True)`` when at hand."""
    if (np.asarray(status) == 2).any():
        return ObservedRisk(aalen_johansen(time, status, cause=1, distinct_times=distinct_times), False)
    return ObservedRisk(kaplan_meier(time, status, distinct_times=distinct_times), True)


def observed_risk(time: np.ndarray, status: np.ndarray, horizon: float) -> tuple[float, float]:
    """Observed probability of the outcome by ``horizon`` and its variance.

    1 − Kaplan–Meier when only codes 0/1 occur; the Aalen–Johansen cumulative incidence of cause 1 when a
    competing event (code 2) is present.
    """
    return observed_risk_curve(time, status).at(horizon)
