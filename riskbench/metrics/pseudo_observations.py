"""Jackknife pseudo-observations of the Aalen–Johansen cumulative incidence at one time, in O(n log n).

The pseudo-observation of subject i at time τ is θ_i = n F(τ) − (n − 1) F₋ᵢ(τ), with F the Aalen–Johansen
cumulative incidence of the cause on all n subjects and F₋ᵢ the same estimator without subject i (Andersen,
Klein & Rosthøj 2003, Biometrika; for calibration, Gerds, Andersen & Kattan 2014, Stat Med). Without competing
events F is 1 − Kaplan–Meier and θ_i the usual Kaplan–Meier pseudo-observation.

Leaving subject i out changes the estimator only at event times up to its own time T_i: before T_i every
risk set loses one member (the same change for every subject still at risk then, so a prefix product and a
prefix sum shared by all subjects hold it), at T_i the risk set and the event counts lose i, and after T_i
nothing changes except the survival factor carried in, so the remainder of F is a suffix sum scaled by one
ratio. Each F₋ᵢ(τ) is therefore a few array look-ups, not a refit of the estimator.
"""

from __future__ import annotations

import numpy as np

from riskbench.metrics.inputs import ArrayLike, MetricInputError


def _safe_ratio(num: np.ndarray, den: np.ndarray) -> np.ndarray:
    """num / den, 0 where den is 0 (an empty risk set has no events)."""
    out = np.zeros(np.broadcast(num, den).shape)
    np.divide(num, den, out=out, where=den > 0)
    return out


def leave_one_out_cumulative_incidence(
    time: ArrayLike, status: ArrayLike, horizon: float, cause: int = 1
) -> tuple[float, np.ndarray]:
    """The Aalen–Johansen cumulative incidence of ``cause`` by ``horizon`` and its leave-one-out values.

    Parameters
    ----------
    time
        Follow-up of each subject (any unit; ``horizon`` in the same unit).
    status
        0 censored, ``cause`` the event of interest, any other non-zero code a competing event.
    horizon
        Time at which the cumulative incidence is read.
    cause
        The status code of the event of interest.

    Returns
    -------
    (float, numpy.ndarray)
        F(horizon) on all subjects, and F₋ᵢ(horizon) for every subject in input order.
    """
    t = np.asarray(time, dtype=float)
    s = np.asarray(status)
    n = t.size
    if n < 2 or s.shape != t.shape:
        raise MetricInputError("pseudo-observations need at least 2 subjects with one status each")
    uniq, pos = np.unique(t, return_inverse=True)
    size = np.bincount(pos, minlength=uniq.size).astype(float)
    d = np.bincount(pos, weights=(s != 0).astype(float), minlength=uniq.size)
    d1 = np.bincount(pos, weights=(s == cause).astype(float), minlength=uniq.size)
    r = n - np.r_[0.0, np.cumsum(size)[:-1]]  # at risk: time >= uniq[j]
    last = int(np.searchsorted(uniq, horizon, side="right"))  # times uniq[:last] are <= horizon

    # full estimator
    hazard, hazard1 = _safe_ratio(d, r), _safe_ratio(d1, r)
    surv_before = np.r_[1.0, np.cumprod(1.0 - hazard)[:-1]]
    full = float(np.sum((surv_before * hazard1)[:last]))

    # prefix with one subject fewer in every risk set (valid before the left-out subject's own time)
    reduced = r - 1.0
    hazard_red, hazard1_red = _safe_ratio(d, reduced), _safe_ratio(d1, reduced)
    surv_red_before = np.r_[1.0, np.cumprod(1.0 - hazard_red)[:-1]]
    prefix = np.r_[0.0, np.cumsum(surv_red_before * hazard1_red)]  # prefix[j] = sum over k < j

    # suffix: sum over j in (p, last) of prod_{p<k<j}(1 - h_k) h1_j, by a backward recursion
    # (0 for p >= last - 1: no event time of interest is left before the horizon)
    suffix = np.zeros(uniq.size + 1)
    for j in range(last - 1, 0, -1):
        suffix[j - 1] = hazard1[j] + (1.0 - hazard[j]) * suffix[j]

    p = pos
    own = (s != 0).astype(float)
    own1 = (s == cause).astype(float)
    r_p = reduced[p]
    inc_p = surv_red_before[p] * _safe_ratio(d1[p] - own1, r_p)
    carried = surv_red_before[p] * (1.0 - _safe_ratio(d[p] - own, r_p))
    within = prefix[p] + inc_p + carried * suffix[p]
    beyond = prefix[last]
    loo = np.where(p < last, within, beyond)
    return full, loo


def pseudo_observations(time: ArrayLike, status: ArrayLike, horizon: float, cause: int = 1) -> np.ndarray:
    """Jackknife pseudo-observations n F(τ) − (n − 1) F₋ᵢ(τ) of the Aalen–Johansen cumulative incidence.

    Parameters
    ----------
    time
        Follow-up of each subject (days from the landmark in riskbench; any unit matching ``horizon``).
    status
        0 censored, ``cause`` the event of interest, any other non-zero code a competing event (recode
        competing events to 0 beforehand to obtain Kaplan–Meier pseudo-observations of a cause-specific
        1 − S).
    horizon
        τ, the time at which the cumulative incidence is read.
    cause
        Status code of the event of interest.

    Returns
    -------
    numpy.ndarray
        One pseudo-observation per subject (input order); they may lie outside [0, 1].

    Notes
    -----
    Their conditional mean given covariates estimates the cumulative incidence given those covariates when
    censoring does not depend on the covariates (Graw, Gerds & Schumacher 2009, Lifetime Data Anal).
    """
    full, loo = leave_one_out_cumulative_incidence(time, status, horizon, cause)
    n = loo.size
    return n * full - (n - 1) * loo
