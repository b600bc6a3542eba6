"""Hazards of the synthetic cohort and exact sampling from them.

Outcome times under a hazard that is the baseline times exp(beta . x) with x piecewise constant are
drawn by **inverse-transform sampling of the cumulative hazard** (Bender, Augustin & Blettner 2005,
"Generating survival times to simulate Cox proportional hazards models", Statistics in Medicine
24:1713-1723; extended to piecewise-constant time-varying covariates by inverting the cumulative
hazard piece by piece): draw E ~ Exp(1), find the piece in which the cumulative hazard passes E and
solve for the time inside that piece in closed form. No time grid, no daily coin toss.

Times are in days since entry; the baseline and Gompertz parameters are per year.
"""

from __future__ import annotations

import numpy as np

from riskbench.demo.parameters import DAYS_PER_YEAR, GeneratorParameters


def baseline_cumhaz(t_days: np.ndarray, p: GeneratorParameters) -> np.ndarray:
    """Weibull cumulative baseline hazard ``rho * (t / 365.25) ** shape`` at ``t_days``."""
    return p.weibull_rho * (np.asarray(t_days, dtype=float) / DAYS_PER_YEAR) ** p.weibull_shape


def baseline_cumhaz_inverse(cumhaz: np.ndarray, p: GeneratorParameters) -> np.ndarray:
    """Time (days) at which the Weibull cumulative baseline hazard reaches ``cumhaz``."""
    return DAYS_PER_YEAR * (np.asarray(cumhaz, dtype=float) / p.weibull_rho) ** (1.0 / p.weibull_shape)


def death_cumhaz(t_days: np.ndarray, age_at_entry: np.ndarray, p: GeneratorParameters) -> np.ndarray:
    """Gompertz cumulative hazard of the competing death from entry to ``t_days``."""
    if p.gompertz_b == 0:
        return np.zeros(np.broadcast(t_days, age_at_entry).shape)
    scale = p.gompertz_b / p.gompertz_c * np.exp(p.gompertz_c * age_at_entry)
    return scale * np.expm1(p.gompertz_c * np.asarray(t_days, dtype=float) / DAYS_PER_YEAR)


def sample_death_days(age_at_entry: np.ndarray, p: GeneratorParameters, rng: np.random.Generator) -> np.ndarray:
    """Continuous time of death (days since entry) by inverting the Gompertz cumulative hazard."""
    e = rng.exponential(size=age_at_entry.size)
    if p.gompertz_b == 0:
        return np.full(age_at_entry.size, np.inf)
    scale = p.gompertz_b / p.gompertz_c * np.exp(p.gompertz_c * age_at_entry)
    return DAYS_PER_YEAR * np.log1p(e / scale) / p.gompertz_c


#: Cumulative hazards are summed with each piece's increment capped here. A cumulative hazard above
#: 50 means a survival probability below 2e-22, so the cap changes no event time (an Exp(1) draw
#: exceeds 50 with probability 2e-22) and no risk by more than 2e-22; without it, one patient with an
#: extreme hazard would swamp the running sum and round away the small hazards of every later patient.
CUMHAZ_CAP = 50.0


def cumulative_before(group: np.ndarray, increment: np.ndarray) -> np.ndarray:
    """Sum of ``increment`` (each capped at :data:`CUMHAZ_CAP`) over the earlier rows of the same group.

    Rows of a group are contiguous. One running sum serves all groups; the cap keeps its magnitude,
    and so its rounding error, small.
    """
    capped = np.minimum(increment, CUMHAZ_CAP)
    running = np.cumsum(capped)
    first = np.r_[True, group[1:] != group[:-1]]
    group_first = np.maximum.accumulate(np.where(first, np.arange(first.size), 0))
    return running - capped - (running[group_first] - capped[group_first])


def sample_piecewise_event_days(
    piece_patient: np.ndarray,
    start: np.ndarray,
    stop: np.ndarray,
    linear_predictor: np.ndarray,
    n_patients: int,
    p: GeneratorParameters,
    rng: np.random.Generator,
) -> np.ndarray:
    """Exact event times under ``baseline(t) * exp(eta_piece)`` on consecutive pieces (start, stop].

    Inverse-transform sampling for piecewise hazards (Bender, Augustin & Blettner 2005): with
    E ~ Exp(1) per patient, the event happens in the piece where the cumulative hazard passes E, at
    the time t solving ``Lambda(start) + exp(eta) * (Lambda0(t) - Lambda0(start)) = E``.

    Parameters
    ----------
    piece_patient : ndarray of int
        Patient index of each piece; pieces of a patient are contiguous and in time order.
    start, stop : ndarray
        Piece bounds in days since entry.
    linear_predictor : ndarray
        beta . x on each piece.
    n_patients : int
        Number of patients (the length of the result).

    Returns
    -------
    ndarray
        Event time in days for each patient, ``inf`` if the cumulative hazard never reaches E
        before the end of the patient's last piece.
    """
    e = rng.exponential(size=n_patients)
    base0 = baseline_cumhaz(start, p)
    increment = np.exp(linear_predictor) * (baseline_cumhaz(stop, p) - base0)
    cum_before = cumulative_before(piece_patient, increment)
    cum_after = cum_before + increment
    target = e[piece_patient]
    hit = (cum_before < target) & (cum_after >= target)
    event = np.full(n_patients, np.inf)
    h = np.flatnonzero(hit)
    solved = baseline_cumhaz_inverse(base0[h] + (target[h] - cum_before[h]) / np.exp(linear_predictor[h]), p)
    # guard against rounding just outside the piece
    event[piece_patient[h]] = np.clip(solved, start[h], stop[h])
    return event
