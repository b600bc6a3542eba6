"""Vectorised simulation of the surveillance process of a whole cohort (arrays, no DataFrames).

Order of the data-generating process (all patients at once, one visit round at a time):

1. static facts: entry date (uniform over the entry period), age, sex, pack-years;
2. hidden nodule state (aggressiveness, initial ln volume, growth rate, marker level);
3. CT exams from day 0 (entry = the first CT) on the size-dependent protocol with jitter and missed
   visits, until the study closes; each exam measures volume and suspicion score;
4. discharge from surveillance: from ``discharge_after_days`` on, an exam showing a small stable
   nodule ends surveillance with probability ``discharge_probability``;
5. serum-marker draws from day 0 on their own schedule;
6. the covariate path: the six covariates change only on exam / lab days (a value dated d holds on
   (d, next change]);
7. the outcome time by exact inverse-transform sampling of the piecewise cumulative hazard
   (Bender, Augustin & Blettner 2005), the competing death time from the Gompertz hazard and the
   loss-to-follow-up time; the first of these, discharge or study close ends follow-up. Continuous
   event times are recorded on the calendar day that contains them (day ``ceil(t)``), which keeps
   every event inside the covariate piece it was drawn in.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from riskbench.demo.hazards import sample_death_days, sample_piecewise_event_days
from riskbench.demo.parameters import COVARIATES, DAYS_PER_YEAR, GeneratorParameters
from riskbench.demo.process import (
    HiddenState,
    draw_hidden_state,
    measure_exam,
    measure_lab,
    next_exam_day,
    next_lab_day,
)

#: End-of-follow-up reasons (codes in :attr:`SimulatedProcess.end_reason`).
END_REASONS: tuple[str, ...] = ("outcome", "competing", "discharged", "lost_to_follow_up", "study_closed")
OUTCOME, COMPETING, DISCHARGED, LOST, STUDY_CLOSED = range(5)

# Days fit in 16 bits (follow-up < 179 years), so (patient, day) packs into one sortable int64.
_DAY_BITS = 16


def day_key(patient: np.ndarray, day: np.ndarray) -> np.ndarray:
    """Sortable int64 key of (patient index, integer day >= 0)."""
    return (patient.astype(np.int64) << _DAY_BITS) + day.astype(np.int64)


def forward_fill(values: np.ndarray) -> np.ndarray:
    """Carry the last non-NaN value forward along a flat array (NaN before the first value)."""
    idx = np.where(np.isnan(values), 0, np.arange(values.size))
    np.maximum.accumulate(idx, out=idx)
    return values[idx]


@dataclass(frozen=True)
class CovariatePath:
    """The covariate state after each change day, one row per (patient, day), sorted.

    Attributes are flat arrays of equal length: ``patient`` (index), ``day`` (days since entry),
    ``log_volume`` (ln of the last volume), ``volume`` (last volume, mm3), ``suspicion``, ``marker``
    (ng/mL), ``last_exam_day`` and ``last_lab_day``.
    """

    patient: np.ndarray
    day: np.ndarray
    log_volume: np.ndarray
    volume: np.ndarray
    suspicion: np.ndarray
    marker: np.ndarray
    last_exam_day: np.ndarray
    last_lab_day: np.ndarray


def build_covariate_path(
    exam_patient: np.ndarray,
    exam_day: np.ndarray,
    exam_volume: np.ndarray,
    exam_suspicion: np.ndarray,
    lab_patient: np.ndarray,
    lab_day: np.ndarray,
    lab_marker: np.ndarray,
) -> CovariatePath:
    """Merge exams and labs into the state after each change day.

    Each group (patient or simulated path) must have an exam and a lab on its first day, so that
    carrying values forward never crosses from one group into the next.
    """
    n_e, n_l = exam_day.size, lab_day.size
    nan_e, nan_l = np.full(n_e, np.nan), np.full(n_l, np.nan)
    patient = np.concatenate([exam_patient, lab_patient])
    day = np.concatenate([exam_day, lab_day])
    order = np.argsort(day_key(patient, day), kind="stable")
    patient, day = patient[order], day[order]
    volume = forward_fill(np.concatenate([exam_volume, nan_l])[order])
    suspicion = forward_fill(np.concatenate([exam_suspicion, nan_l])[order])
    marker = forward_fill(np.concatenate([nan_e, lab_marker])[order])
    last_exam = forward_fill(np.concatenate([exam_day.astype(float), nan_l])[order])
    last_lab = forward_fill(np.concatenate([nan_e, lab_day.astype(float)])[order])
    # keep the state after the last change of each day
    keep = np.r_[(patient[1:] != patient[:-1]) | (day[1:] != day[:-1]), True]
    return CovariatePath(
        patient=patient[keep],
        day=day[keep],
        log_volume=np.log(volume[keep]),
        volume=volume[keep],
        suspicion=suspicion[keep],
        marker=marker[keep],
        last_exam_day=last_exam[keep],
        last_lab_day=last_lab[keep],
    )


def piece_stops(group: np.ndarray, start: np.ndarray, group_end: np.ndarray) -> np.ndarray:
    """End of each piece: the next piece's start within the group, else the group's end."""
    stop = np.empty(start.size, dtype=float)
    stop[:-1] = start[1:]
    last = np.r_[group[1:] != group[:-1], True]
    stop[last] = group_end[group[last]]
    return stop


def covariate_matrix(
    path: CovariatePath, first_log_volume: np.ndarray, age_at_entry: np.ndarray, pack_years: np.ndarray
) -> np.ndarray:
    """The six true covariates (columns in :data:`COVARIATES` order) on each row of ``path``.

    ``first_log_volume``, ``age_at_entry`` and ``pack_years`` are indexed by ``path.patient``.
    """
    g = path.patient
    return np.column_stack(
        [
            path.log_volume,
            path.log_volume - first_log_volume[g],
            path.suspicion,
            path.marker,
            age_at_entry[g],
            pack_years[g],
        ]
    )


@dataclass(frozen=True)
class SimulatedProcess:
    """Everything the generator drew, as arrays indexed by patient (0..n-1) or by row.

    Days are integers counted from each patient's entry (``entry_day`` is days since 1970-01-01).
    """

    parameters: GeneratorParameters
    entry_day: np.ndarray
    birth_day: np.ndarray
    age_at_entry: np.ndarray
    male: np.ndarray
    pack_years: np.ndarray
    hidden: HiddenState
    first_log_volume: np.ndarray
    exam_patient: np.ndarray
    exam_day: np.ndarray
    exam_volume: np.ndarray
    exam_suspicion: np.ndarray
    lab_patient: np.ndarray
    lab_day: np.ndarray
    lab_marker: np.ndarray
    end_day: np.ndarray
    end_reason: np.ndarray
    path: CovariatePath  # potential covariate path (up to discharge or study close)
    interval_patient: np.ndarray
    interval_start: np.ndarray
    interval_stop: np.ndarray
    interval_status: np.ndarray
    interval_covariates: np.ndarray  # (rows, 6) in COVARIATES order

    @property
    def n_patients(self) -> int:
        return int(self.entry_day.size)


def _iso_day(text: str) -> int:
    return int(np.datetime64(text, "D").astype(np.int64))


def visit_rounds(
    step: Callable[[np.ndarray, np.ndarray], tuple[np.ndarray, ...]],
    rows: np.ndarray,
    day: np.ndarray,
    limit: np.ndarray,
) -> list[np.ndarray]:
    """Repeated visits, one vectorised round at a time, while the visit day is before ``limit[row]``.

    ``step(rows, day)`` measures the visit and returns ``(next_day, value, ...)``. Returns the
    concatenated ``[row, day, value, ...]`` of every visit (grouped by round, not sorted).
    """
    keep = day < limit[rows]
    rows, day = rows[keep], day[keep]
    out: list[tuple[np.ndarray, ...]] = []
    while rows.size:
        nxt, *values = step(rows, day)
        out.append((rows, day, *values))
        keep = nxt < limit[rows]
        rows, day = rows[keep], nxt[keep]
    return [np.concatenate(c) for c in zip(*out)] if out else []


def _by_patient(columns: list[np.ndarray]) -> tuple[np.ndarray, ...]:
    order = np.argsort(columns[0], kind="stable")  # rounds already run forward in time
    return tuple(c[order] for c in columns)


def _simulate_exams(
    hidden: HiddenState, admin_days: np.ndarray, p: GeneratorParameters, rng: np.random.Generator
) -> tuple[np.ndarray, ...]:
    """All CT exams up to the study close: patient, day, volume, suspicion (sorted by patient, day)."""

    def step(rows: np.ndarray, day: np.ndarray) -> tuple[np.ndarray, ...]:
        volume, suspicion = measure_exam(hidden, rows, day, p, rng)
        return next_exam_day(day, volume, p, rng), volume, suspicion

    n = admin_days.size
    return _by_patient(visit_rounds(step, np.arange(n), np.zeros(n), admin_days))


def _simulate_labs(
    hidden: HiddenState, end_days: np.ndarray, p: GeneratorParameters, rng: np.random.Generator
) -> tuple[np.ndarray, ...]:
    """All serum-marker draws before ``end_days``: patient, day, marker (sorted by patient, day)."""

    def step(rows: np.ndarray, day: np.ndarray) -> tuple[np.ndarray, ...]:
        marker = measure_lab(hidden, rows, day, p, rng)
        return next_lab_day(day, p, rng), marker

    n = end_days.size
    return _by_patient(visit_rounds(step, np.arange(n), np.zeros(n), end_days))


def _discharge_days(
    patient: np.ndarray, day: np.ndarray, volume: np.ndarray, n: int, p: GeneratorParameters, rng: np.random.Generator
) -> np.ndarray:
    """Day of the exam that discharges each patient from surveillance (inf if none)."""
    first_row = np.r_[True, patient[1:] != patient[:-1]]
    log_first = np.log(volume[first_row])[np.cumsum(first_row) - 1]
    eligible = (
        (day >= p.discharge_after_days)
        & (volume < p.discharge_max_volume_mm3)
        & (np.log(volume) - log_first < p.discharge_max_log_change)
        & (rng.random(day.size) < p.discharge_probability)
    )
    out = np.full(n, np.inf)
    who, first_hit = np.unique(patient[eligible], return_index=True)
    out[who] = day[eligible][first_hit]
    return out


def simulate_process(n: int, p: GeneratorParameters, rng: np.random.Generator) -> SimulatedProcess:
    """Simulate ``n`` patients' surveillance and outcomes (see the module docstring for the steps)."""
    start, entry_end, close = _iso_day(p.study_start), _iso_day(p.entry_end), _iso_day(p.study_close)
    entry_day = rng.integers(start, entry_end, size=n)
    age = np.clip(rng.normal(p.age_mean, p.age_sd, n), p.age_min, p.age_max)
    birth_day = entry_day - np.rint(age * DAYS_PER_YEAR).astype(np.int64)
    age_at_entry = (entry_day - birth_day) / DAYS_PER_YEAR  # exactly what the dates imply
    male = rng.random(n) < p.male_fraction
    smoker = rng.random(n) >= p.never_smoker_fraction
    pack_years = np.where(
        smoker, np.minimum(np.round(rng.gamma(p.pack_years_shape, p.pack_years_scale, n), 1), p.pack_years_max), 0.0
    )
    hidden = draw_hidden_state(n, p, rng)
    admin_days = (close - entry_day).astype(float)

    e_pat, e_day, e_vol, e_sus = _simulate_exams(hidden, admin_days, p, rng)
    discharge = _discharge_days(e_pat, e_day, e_vol, n, p, rng)
    keep = e_day <= discharge[e_pat]  # no exams after a discharge
    e_pat, e_day, e_vol, e_sus = e_pat[keep], e_day[keep], e_vol[keep], e_sus[keep]
    potential_end = np.minimum(admin_days, discharge)
    l_pat, l_day, l_mark = _simulate_labs(hidden, potential_end, p, rng)

    before_end = e_day < potential_end[e_pat]
    path = build_covariate_path(
        e_pat[before_end], e_day[before_end], e_vol[before_end], e_sus[before_end], l_pat, l_day, l_mark
    )
    first_log_volume = np.log(e_vol[np.r_[True, e_pat[1:] != e_pat[:-1]]])
    x = covariate_matrix(path, first_log_volume, age_at_entry, pack_years)
    eta = x @ np.asarray(p.beta())
    start_piece = path.day.astype(float)
    stop_piece = piece_stops(path.patient, start_piece, potential_end)
    t_outcome = sample_piecewise_event_days(path.patient, start_piece, stop_piece, eta, n, p, rng)
    t_death = sample_death_days(age_at_entry, p, rng)
    if p.loss_rate_per_year > 0:
        t_loss = rng.exponential(DAYS_PER_YEAR / p.loss_rate_per_year, n)
    else:
        t_loss = np.full(n, np.inf)

    continuous = np.column_stack([t_outcome, t_death, t_loss])
    first_cont = np.argmin(continuous, axis=1)
    t_cont = continuous[np.arange(n), first_cont]
    ends_continuous = t_cont <= potential_end
    end_day = np.where(ends_continuous, np.ceil(t_cont), potential_end).astype(np.int64)
    end_reason = np.where(
        ends_continuous,
        np.array([OUTCOME, COMPETING, LOST])[first_cont],
        np.where(discharge <= admin_days, DISCHARGED, STUDY_CLOSED),
    )

    # the generator's own counting-process rows: pieces cut at the end of follow-up
    in_follow_up = start_piece < end_day[path.patient]
    iv_patient = path.patient[in_follow_up]
    iv_start = start_piece[in_follow_up]
    iv_stop = np.minimum(stop_piece[in_follow_up], end_day[iv_patient])
    is_last = iv_stop == end_day[iv_patient]
    reason = end_reason[iv_patient]
    iv_status = np.where(is_last & (reason == OUTCOME), 1, np.where(is_last & (reason == COMPETING), 2, 0))

    # what the records show: nothing on or after the end day, except the discharging exam itself
    e_keep = (e_day < end_day[e_pat]) | ((end_reason[e_pat] == DISCHARGED) & (e_day == end_day[e_pat]))
    l_keep = l_day < end_day[l_pat]
    return SimulatedProcess(
        parameters=p,
        entry_day=entry_day,
        birth_day=birth_day,
        age_at_entry=age_at_entry,
        male=male,
        pack_years=pack_years,
        hidden=hidden,
        first_log_volume=first_log_volume,
        exam_patient=e_pat[e_keep],
        exam_day=e_day[e_keep].astype(np.int64),
        exam_volume=e_vol[e_keep],
        exam_suspicion=e_sus[e_keep],
        lab_patient=l_pat[l_keep],
        lab_day=l_day[l_keep].astype(np.int64),
        lab_marker=l_mark[l_keep],
        end_day=end_day,
        end_reason=end_reason,
        path=path,
        interval_patient=iv_patient,
        interval_start=iv_start,
        interval_stop=iv_stop.astype(float),
        interval_status=iv_status.astype(np.int64),
        interval_covariates=x[in_follow_up],
    )


__all__ = ["COVARIATES", "END_REASONS", "SimulatedProcess", "simulate_process"]
