"""The oracle risk: true probability of the outcome in (s, s + w] given the full hidden state at s.

For a patient still under follow-up at landmark s, the future covariate path depends on the hidden
nodule state (known to the oracle) and on the random future exams and lab draws (not known). The
oracle therefore averages over ``n_paths`` simulated futures (Monte Carlo, seeded):

* the next CT is drawn from the protocol rule starting at the last exam before s, conditioned on
  falling after s (exactly, by inverting the conditional distribution: the realised history showed
  no exam in between); likewise the next lab draw; later visits follow the protocol; each visit
  measures new values from the patient's hidden state;
* given one future path, the cumulative incidence of the outcome with death as a competing risk,
  ``integral_s^{s+w} h1(t) exp(-(H1(t) - H1(s)) - (H2(t) - H2(s))) dt``, is computed without sampling
  event times: in each piece the integral is taken over the baseline cumulative hazard by
  4-point Gauss-Legendre quadrature (24 points on pieces starting at entry, where the Weibull
  baseline is not smooth); the quadrature error is far below the Monte Carlo error;
* surveillance is assumed to continue by protocol (no discharge, no loss to follow-up): the risk is
  the one a perfect model should predict, free of censoring.

The result reports the Monte Carlo standard error beside each risk.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd

from riskbench.demo.hazards import baseline_cumhaz, baseline_cumhaz_inverse, cumulative_before, death_cumhaz
from riskbench.demo.parameters import GeneratorParameters
from riskbench.demo.process import (
    exam_interval_bounds,
    lab_interval_bounds,
    measure_exam,
    measure_lab,
    next_exam_day,
    next_lab_day,
    next_visit_after,
)
from riskbench.demo.simulate import (
    SimulatedProcess,
    build_covariate_path,
    covariate_matrix,
    day_key,
    piece_stops,
    visit_rounds,
)

_RULE = np.polynomial.legendre.leggauss(4)
_RULE_AT_ENTRY = np.polynomial.legendre.leggauss(24)
_PATHS_PER_CHUNK = 100_000


def _chunk_risk(
    sim: SimulatedProcess,
    patient: np.ndarray,
    landmark: np.ndarray,
    horizon: float,
    n_paths: int,
    rng: np.random.Generator,
) -> tuple[np.ndarray, np.ndarray]:
    """Oracle risk and its Monte Carlo standard error for rows (patient, landmark)."""
    p = sim.parameters
    path = sim.path
    at = np.searchsorted(day_key(path.patient, path.day), day_key(patient, np.floor(landmark)), side="right") - 1
    g = np.repeat(patient, n_paths)  # patient of each simulated path
    s = np.repeat(landmark, n_paths)
    end = s + horizon
    state = np.repeat(at, n_paths)
    m = g.size
    hidden = sim.hidden
    last_volume = path.volume[state]

    # next exam and lab after s, given that none happened between the last one and s
    first_exam = next_visit_after(
        path.last_exam_day[state],
        *exam_interval_bounds(last_volume, p),
        p.exam_miss_probability,
        p.min_gap_days,
        s,
        rng,
    )
    first_lab = next_visit_after(
        path.last_lab_day[state], *lab_interval_bounds(m, p), p.lab_miss_probability, p.min_gap_days, s, rng
    )

    def exam_step(rows: np.ndarray, day: np.ndarray) -> tuple[np.ndarray, ...]:
        volume, suspicion = measure_exam(hidden, g[rows], day, p, rng)
        return next_exam_day(day, volume, p, rng), volume, suspicion

    def lab_step(rows: np.ndarray, day: np.ndarray) -> tuple[np.ndarray, ...]:
        marker = measure_lab(hidden, g[rows], day, p, rng)
        return next_lab_day(day, p, rng), marker

    # visits on whole days <= s + w, i.e. before floor(s + w) + 1
    paths, limit = np.arange(m), np.floor(end) + 1
    ex_path, ex_day, ex_vol, ex_sus = _or_empty(visit_rounds(exam_step, paths, first_exam, limit), 4)
    lb_path, lb_day, lb_mark = _or_empty(visit_rounds(lab_step, paths, first_lab, limit), 3)
    # the state at s opens every path as an exam and a lab on relative day 0 (days counted from floor(s))
    base = np.arange(m)
    origin = np.floor(s)
    fut = build_covariate_path(
        np.concatenate([base, ex_path]),
        np.concatenate([np.zeros(m), ex_day - origin[ex_path]]),
        np.concatenate([path.volume[state], ex_vol]),
        np.concatenate([path.suspicion[state], ex_sus]),
        np.concatenate([base, lb_path]),
        np.concatenate([np.zeros(m), lb_day - origin[lb_path]]),
        np.concatenate([path.marker[state], lb_mark]),
    )
    start = np.maximum(fut.day + origin[fut.patient], s[fut.patient])  # back to days since entry
    stop = piece_stops(fut.patient, start, end)
    x = covariate_matrix(fut, sim.first_log_volume[g], sim.age_at_entry[g], sim.pack_years[g])
    ratio = np.exp(x @ np.asarray(p.beta()))  # hazard ratio on each piece
    age = sim.age_at_entry[g][fut.patient]
    lo, hi = baseline_cumhaz(start, p), baseline_cumhaz(stop, p)
    death_lo = death_cumhaz(start, age, p)
    piece_cif = np.empty(start.size)
    at_entry = start == 0  # the Weibull baseline is not smooth at t = 0: more nodes there
    for mask, (nodes, weights) in ((~at_entry, _RULE), (at_entry, _RULE_AT_ENTRY)):
        piece_cif[mask] = _piece_incidence(
            lo[mask], hi[mask], ratio[mask], age[mask], death_lo[mask], nodes, weights, p
        )
    increment = ratio * (hi - lo) + death_cumhaz(stop, age, p) - death_lo
    before = cumulative_before(fut.patient, increment)
    per_path = np.bincount(fut.patient, weights=np.exp(-before) * piece_cif, minlength=m)
    per_path = per_path.reshape(-1, n_paths)
    se = per_path.std(axis=1, ddof=1) / np.sqrt(n_paths) if n_paths > 1 else np.full(per_path.shape[0], np.nan)
    return per_path.mean(axis=1), se


def _piece_incidence(
    lo: np.ndarray,
    hi: np.ndarray,
    ratio: np.ndarray,
    age: np.ndarray,
    death_lo: np.ndarray,
    nodes: np.ndarray,
    weights: np.ndarray,
    p: GeneratorParameters,
) -> np.ndarray:
    """Outcome incidence within each piece given event-free at its start.

    Gauss-Legendre in the baseline cumulative hazard u (dH1 = ratio du on the piece, ratio = exp(eta)),
    where the integrand ratio exp(-ratio (u - lo) - (H2(t(u)) - H2(start))) is smooth.
    """
    u = lo[:, None] + (hi - lo)[:, None] * (1 + nodes[None, :]) / 2
    t = baseline_cumhaz_inverse(u, p)
    integrand = ratio[:, None] * np.exp(
        -ratio[:, None] * (u - lo[:, None]) - (death_cumhaz(t, age[:, None], p) - death_lo[:, None])
    )
    return (hi - lo) / 2 * (integrand @ weights)


def _or_empty(columns: list[np.ndarray], n_columns: int) -> list[np.ndarray]:
    """Visit columns, or empty ones when no path had a visit."""
    if columns:
        return columns
    return [np.empty(0, np.int64)] + [np.empty(0) for _ in range(n_columns - 1)]


def oracle_risk(
    sim: SimulatedProcess,
    landmarks_days: Sequence[float],
    horizon_days: float,
    n_paths: int,
    rng: np.random.Generator,
) -> pd.DataFrame:
    """True risk of the outcome in (s, s + horizon] for every patient under follow-up at each landmark.

    Parameters
    ----------
    sim : SimulatedProcess
        The simulated cohort.
    landmarks_days : sequence of float
        Landmarks s (days since entry). A patient is at risk at s if follow-up ends after s.
    horizon_days : float
        Prediction horizon w (days).
    n_paths : int
        Monte Carlo futures per (patient, landmark).
    rng : numpy.random.Generator
        Random stream of the oracle.

    Returns
    -------
    DataFrame
        ``patient_index, landmark, horizon, true_risk, true_risk_se`` (days; probability).
    """
    frames = []
    for s in landmarks_days:
        patient = np.flatnonzero(sim.end_day > s)
        chunk = max(1, _PATHS_PER_CHUNK // n_paths)
        risk = np.empty(patient.size)
        se = np.empty(patient.size)
        for lo in range(0, patient.size, chunk):
            sl = slice(lo, lo + chunk)
            risk[sl], se[sl] = _chunk_risk(
                sim, patient[sl], np.full(patient[sl].size, float(s)), horizon_days, n_paths, rng
            )
        frames.append(
            pd.DataFrame(
                {
                    "patient_index": patient,
                    "landmark": float(s),
                    "horizon": float(horizon_days),
                    "true_risk": risk,
                    "true_risk_se": se,
                }
            )
        )
    return pd.concat(frames, ignore_index=True)
