"""Net reclassification improvement (NRI) and integrated discrimination improvement (IDI) at a horizon.

Both compare an old and a new model's predicted risk of the outcome by a horizon on the same patients.
Censored follow-up is handled as in the survival extensions of these measures:

* NRI: the event probabilities among patients moved up, moved down and overall are Kaplan–Meier
  estimates at the horizon (Pencina, D'Agostino Sr & Steyerberg 2011, *Stat Med* 30:11–21, section 4;
  Steyerberg & Pencina 2010, *Circulation* 121:e330).
* IDI: the mean risks among events and non-events are inverse-probability-of-censoring weighted
  (a patient whose status at the horizon is known gets weight 1 / G, G the censoring Kaplan–Meier,
  as in Uno, Tian, Cai, Kohane & Wei 2013, *Stat Med* 32:2430–2442); without censoring this is
  exactly Pencina et al. 2008 (*Stat Med* 27:157–172).

Competing events: pass them as censored (event 0). The event probabilities are then the
cause-specific 1 − Kaplan–Meier, which overstates the cumulative incidence when competing events are
common; read the result as a comparison of the two models' rankings rather than of absolute risks.

Caveats (Kerr, Wang, Janes, McClelland, Psaty & Pepe 2014, *Epidemiology* 25:114–121; Pepe et al. 2015):
the NRI is not a proper scoring measure — a badly calibrated new model can show a positive NRI, and
adding a pure-noise marker to a model fitted on the same data can give a "significant" NRI. Report
the event and non-event parts separately (never only their sum), prefer out-of-sample predictions,
and read NRI beside calibration and the Brier score. Hilden & Gerds (2014, *Stat Med* 33:3405-3414) show
the same for new data. This project's own simulated null shows it too: with the demo cohort's imaging
covariates replaced by pure noise, out-of-bag bootstrap intervals for the differences in Harrell's C, Uno's
C, AUC and IDI all contained 0, while the category-free NRI was about +0.24 with an interval above 0,
nearly all of it from the non-event part (extra noise covariates spread the linear predictor, which lowers
the Breslow baseline and moves most low-risk non-events "down").
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from riskbench.validation.errors import ValidationInputError


@dataclass(frozen=True)
class NetReclassification:
    """NRI at one horizon.

    Attributes
    ----------
    horizon : float
        Horizon (same unit as ``time``, days in riskbench).
    events : float
        Event part: P(up | event) − P(down | event).
    nonevents : float
        Non-event part: P(down | non-event) − P(up | non-event).
    total : float
        ``events + nonevents`` (ranges over [−2, 2]).
    event_probability : float
        Kaplan–Meier probability of the outcome by the horizon in all patients.
    n_up, n_down, n_unchanged : int
        Patients moved to a higher / lower / the same category (category-free: higher / lower / equal risk).
    categories : tuple of float or None
        Risk cut points used, or None for the category-free NRI.
    """

    horizon: float
    events: float
    nonevents: float
    total: float
    event_probability: float
    n_up: int
    n_down: int
    n_unchanged: int
    categories: tuple[float, ...] | None

    @property
    def kind(self) -> str:
        """Which NRI this is, in words (:func:`nri_kind`)."""
        return nri_kind(self.categories)


def nri_kind(categories: Sequence[float] | None) -> str:
    """The NRI's type as a reader needs it stated: category-free, or categorical with its cut points.

    >>> nri_kind(None)
    'category-free (continuous) NRI: any rise or fall of the predicted risk counts as a move'
    >>> nri_kind([0.05, 0.2])
    'categorical NRI with risk categories cut at 0.05 and 0.2'
    """
    if categories is None or len(categories) == 0:
        return "category-free (continuous) NRI: any rise or fall of the predicted risk counts as a move"
    cuts = [f"{float(c):g}" for c in categories]
    shown = cuts[0] if len(cuts) == 1 else ", ".join(cuts[:-1]) + " and " + cuts[-1]
    return f"categorical NRI with risk categories cut at {shown}"


@dataclass(frozen=True)
class IntegratedDiscrimination:
    """IDI at one horizon.

    Attributes
    ----------
    horizon : float
        Horizon (days).
    events : float
        Mean increase of predicted risk among events (weighted).
    nonevents : float
        Mean decrease of predicted risk among non-events (weighted).
    total : float
        ``events + nonevents`` = difference of the discrimination slopes.
    slope_old, slope_new : float
        Discrimination slope (mean risk in events minus in non-events) of each model.
    """

    horizon: float
    events: float
    nonevents: float
    total: float
    slope_old: float
    slope_new: float


def _check_arrays(time, event, risk_old, risk_new, horizon) -> tuple[np.ndarray, ...]:
    t = np.asarray(time, dtype=float)
    e = np.asarray(event)
    old = np.asarray(risk_old, dtype=float)
    new = np.asarray(risk_new, dtype=float)
    n = t.shape[0]
    for name, arr in (("event", e), ("risk_old", old), ("risk_new", new)):
        if arr.shape != (n,):
            raise ValidationInputError(f"{name} must be 1-D with one entry per patient ({n}); got shape {arr.shape}.")
    if not np.isin(e, (0, 1)).all():
        raise ValidationInputError(
            "event must be 0/1 (pass competing events as 0, see the module notes); "
            f"found values {np.unique(e[~np.isin(e, (0, 1))])[:5].tolist()}."
        )
    for name, arr in (("time", t), ("risk_old", old), ("risk_new", new)):
        if not np.isfinite(arr).all():
            raise ValidationInputError(
                f"{name} has missing or infinite values at rows {np.flatnonzero(~np.isfinite(arr))[:5].tolist()}."
            )
    if (t < 0).any():
        raise ValidationInputError("time must be non-negative (days from the landmark or entry).")
    if not np.isfinite(horizon) or horizon <= 0:
        raise ValidationInputError(f"horizon must be a positive number of days; got {horizon!r}.")
    return t, e.astype(int), old, new


def kaplan_meier_at(time: np.ndarray, event: np.ndarray, horizon: float) -> float:
    """Kaplan–Meier survival probability at ``horizon`` (events at t counted before censorings at t)."""
    if len(time) == 0:
        return float("nan")
    event_times = np.unique(time[(event == 1) & (time <= horizon)])
    if len(event_times) == 0:
        return 1.0
    sorted_time = np.sort(time)
    at_risk = len(time) - np.searchsorted(sorted_time, event_times, side="left")
    deaths = np.bincount(
        np.searchsorted(event_times, time[(event == 1) & (time <= horizon)]), minlength=len(event_times)
    )
    return float(np.prod(1.0 - deaths / at_risk))


def _censoring_survival_before(time: np.ndarray, event: np.ndarray, at: np.ndarray) -> np.ndarray:
    """Censoring Kaplan–Meier G(at−): probability of remaining uncensored just before each ``at``."""
    cens_times = np.unique(time[event == 0])
    if len(cens_times) == 0:
        return np.ones_like(at, dtype=float)
    sorted_time = np.sort(time)
    at_risk = len(time) - np.searchsorted(sorted_time, cens_times, side="left")
    counts = np.bincount(np.searchsorted(cens_times, time[event == 0]), minlength=len(cens_times))
    steps = np.cumprod(1.0 - counts / at_risk)
    # G(a−) multiplies the factors of censoring times strictly before a.
    idx = np.searchsorted(cens_times, at, side="left")
    out = np.ones_like(at, dtype=float)
    has = idx > 0
    out[has] = steps[idx[has] - 1]
    return out


def _categorise(risk: np.ndarray, cuts: tuple[float, ...]) -> np.ndarray:
    # Category i holds risks in [cut_{i-1}, cut_i): a risk equal to a cut point moves up.
    return np.searchsorted(np.asarray(cuts), risk, side="right")


def net_reclassification(
    time: Sequence[float] | np.ndarray,
    event: Sequence[int] | np.ndarray,
    risk_old: Sequence[float] | np.ndarray,
    risk_new: Sequence[float] | np.ndarray,
    horizon: float,
    *,
    categories: Sequence[float] | None = None,
) -> NetReclassification:
    """Net reclassification improvement of a new over an old model at a horizon, with censoring.

    Parameters
    ----------
    time : array-like of float
        Follow-up time from the prediction moment (days).
    event : array-like of {0, 1}
        1 if the outcome was observed at ``time``; competing events and censoring are 0.
    risk_old, risk_new : array-like of float
        Predicted probability of the outcome by ``horizon`` under the old and new model.
    horizon : float
        Prediction horizon (days).
    categories : sequence of float, optional
        Increasing risk cut points in (0, 1), e.g. ``(0.05, 0.20)`` for low / intermediate / high;
        a risk equal to a cut point belongs to the higher category. None gives the category-free
        (continuous) NRI, where any increase of risk counts as "up".

    Returns
    -------
    NetReclassification

    Notes
    -----
    Pencina, D'Agostino Sr & Steyerberg (2011), with n patients, KM-estimated P(D) overall and in the
    up- and down-movers::

        NRI_events    = [P(D|up) n_up − P(D|down) n_down] / (n P(D))
        NRI_nonevents = [(1 − P(D|down)) n_down − (1 − P(D|up)) n_up] / (n (1 − P(D)))

    Without censoring before the horizon these are the proportions of Pencina et al. (2008).
    See the module notes for the Kerr et al. (2014) caveats.
    """
    t, e, old, new = _check_arrays(time, event, risk_old, risk_new, horizon)
    cuts: tuple[float, ...] | None = None
    if categories is not None:
        cuts = tuple(float(c) for c in categories)
        if len(cuts) == 0 or any(not 0.0 < c < 1.0 for c in cuts) or any(np.diff(cuts) <= 0):
            raise ValidationInputError(
                "categories must be increasing risk cut points strictly between 0 and 1, e.g. (0.05, 0.2); "
                f"got {categories!r}."
            )
        move = np.sign(_categorise(new, cuts) - _categorise(old, cuts))
    else:
        move = np.sign(new - old)
    p_event = 1.0 - kaplan_meier_at(t, e, horizon)
    if not 0.0 < p_event < 1.0:
        raise ValidationInputError(
            f"the Kaplan–Meier probability of the outcome by {horizon} days is {p_event:.3g}; NRI needs both "
            "events and non-events by the horizon. Choose another horizon or a larger evaluation set."
        )
    n = len(t)
    up, down = move > 0, move < 0
    n_up, n_down = int(up.sum()), int(down.sum())
    p_up = 1.0 - kaplan_meier_at(t[up], e[up], horizon) if n_up else 0.0
    p_down = 1.0 - kaplan_meier_at(t[down], e[down], horizon) if n_down else 0.0
    nri_events = (p_up * n_up - p_down * n_down) / (n * p_event)
    nri_nonevents = ((1.0 - p_down) * n_down - (1.0 - p_up) * n_up) / (n * (1.0 - p_event))
    return NetReclassification(
        horizon=float(horizon),
        events=float(nri_events),
        nonevents=float(nri_nonevents),
        total=float(nri_events + nri_nonevents),
        event_probability=float(p_event),
        n_up=n_up,
        n_down=n_down,
        n_unchanged=n - n_up - n_down,
        categories=cuts,
    )


def integrated_discrimination(
    time: Sequence[float] | np.ndarray,
    event: Sequence[int] | np.ndarray,
    risk_old: Sequence[float] | np.ndarray,
    risk_new: Sequence[float] | np.ndarray,
    horizon: float,
) -> IntegratedDiscrimination:
    """Integrated discrimination improvement of a new over an old model at a horizon, with censoring.

    Parameters
    ----------
    time, event, risk_old, risk_new, horizon
        As in :func:`net_reclassification`.

    Returns
    -------
    IntegratedDiscrimination

    Notes
    -----
    Patients with the outcome by the horizon weigh 1 / G(T−), patients still event-free at the
    horizon weigh 1 / G(horizon), patients censored before the horizon weigh 0 (their status is
    unknown); G is the censoring Kaplan–Meier of the evaluation set. With these weights the mean
    risks among events and non-events are consistent under independent censoring (Uno et al. 2013).
    Without censoring this is Pencina et al. (2008)'s IDI.
    """
    t, e, old, new = _check_arrays(time, event, risk_old, risk_new, horizon)
    case = (e == 1) & (t <= horizon)
    control = t > horizon
    weight = np.zeros(len(t))
    weight[case] = 1.0 / _censoring_survival_before(t, e, t[case])
    g_h = _censoring_survival_before(t, e, np.array([np.nextafter(horizon, np.inf)]))[0]
    weight[control] = 1.0 / g_h
    if weight[case].sum() == 0 or weight[control].sum() == 0:
        raise ValidationInputError(
            f"IDI at {horizon} days needs patients with the outcome by the horizon and patients followed "
            "event-free past it; the evaluation set lacks one of them. Choose another horizon."
        )

    def wmean(values: np.ndarray, mask: np.ndarray) -> float:
        return float(np.sum(weight[mask] * values[mask]) / np.sum(weight[mask]))

    slope_old = wmean(old, case) - wmean(old, control)
    slope_new = wmean(new, case) - wmean(new, control)
    events = wmean(new - old, case)
    nonevents = wmean(old - new, control)
    return IntegratedDiscrimination(
        horizon=float(horizon),
        events=events,
        nonevents=nonevents,
        total=events + nonevents,
        slope_old=slope_old,
        slope_new=slope_new,
    )
