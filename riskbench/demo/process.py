"""The hidden nodule process, what each CT exam and lab draw measures, and the visit schedule.

All functions are vectorised over patients (or simulated paths): they take arrays indexed by row and
a ``numpy.random.Generator``. The same functions drive the cohort generator and the oracle risk, so
the oracle averages over exactly the future the generator would have produced.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from riskbench.demo.parameters import DAYS_PER_YEAR, GeneratorParameters


@dataclass(frozen=True)
class HiddenState:
    """Per-patient latent quantities (never written to the input tables).

    Attributes
    ----------
    aggressiveness : ndarray
        Standard normal latent malignancy propensity.
    log_volume0 : ndarray
        True ln nodule volume (mm3) at entry.
    growth_per_year : ndarray
        True ln-volume growth rate (per year).
    marker_log_level : ndarray
        Patient's ln serum-marker level (ng/mL) at entry.
    """

    aggressiveness: np.ndarray
    log_volume0: np.ndarray
    growth_per_year: np.ndarray
    marker_log_level: np.ndarray


def draw_hidden_state(n: int, p: GeneratorParameters, rng: np.random.Generator) -> HiddenState:
    """Draw the latent nodule and marker process of ``n`` patients."""
    a = rng.standard_normal(n)
    v0 = p.log_volume_mean + p.log_volume_aggressiveness * a + p.log_volume_sd * rng.standard_normal(n)
    v0 = np.clip(v0, p.log_volume_min, p.log_volume_max)
    g = p.growth_mean_per_year + p.growth_aggressiveness_per_year * a
    g = g + p.growth_sd_per_year * rng.standard_normal(n)
    m = p.marker_log_mean + p.marker_aggressiveness * a + p.marker_sd * rng.standard_normal(n)
    return HiddenState(a, v0, g, m)


def measure_exam(
    state: HiddenState, rows: np.ndarray, day: np.ndarray, p: GeneratorParameters, rng: np.random.Generator
) -> tuple[np.ndarray, np.ndarray]:
    """Nodule volume (mm3, 0.1 mm3 resolution) and suspicion score (3 decimals) of one CT exam.

    Parameters
    ----------
    state : HiddenState
        Latent state of all patients.
    rows : ndarray of int
        Patient index of each exam.
    day : ndarray
        Exam day (days since entry).
    """
    true_log_volume = np.clip(
        state.log_volume0[rows] + state.growth_per_year[rows] * day / DAYS_PER_YEAR,
        p.log_volume_min,
        p.log_volume_max,
    )
    measured = true_log_volume + p.volume_noise_sd * rng.standard_normal(rows.size)
    volume = np.maximum(np.round(np.exp(measured), 1), 0.1)
    logit = (
        p.suspicion_intercept
        + p.suspicion_aggressiveness * state.aggressiveness[rows]
        + p.suspicion_log_volume * (np.log(volume) - p.log_volume_mean)
        + p.suspicion_noise_sd * rng.standard_normal(rows.size)
    )
    suspicion = np.round(1.0 / (1.0 + np.exp(-logit)), 3)
    return volume, suspicion


def measure_lab(
    state: HiddenState, rows: np.ndarray, day: np.ndarray, p: GeneratorParameters, rng: np.random.Generator
) -> np.ndarray:
    """Serum marker (ng/mL, 0.01 resolution, at most the assay limit) of one lab draw; rises over time
    in aggressive nodules."""
    level = state.marker_log_level[rows] + p.marker_rise_per_year * np.maximum(state.aggressiveness[rows], 0.0) * (
        day / DAYS_PER_YEAR
    )
    measured = level + p.marker_noise_sd * rng.standard_normal(rows.size)
    # the assay reports values beyond its range at its limits
    return np.clip(np.round(np.exp(measured), 2), 0.01, p.marker_max_ng_ml)


def planned_exam_interval(volume_mm3: np.ndarray, p: GeneratorParameters) -> np.ndarray:
    """Protocol interval to the next CT (days): shorter for larger nodules (3, 6 or 12 months)."""
    return np.select(
        [volume_mm3 < p.small_volume_mm3, volume_mm3 < p.large_volume_mm3],
        [p.exam_interval_small_days, p.exam_interval_medium_days],
        p.exam_interval_large_days,
    )


def next_exam_day(
    day: np.ndarray, volume_mm3: np.ndarray, p: GeneratorParameters, rng: np.random.Generator
) -> np.ndarray:
    """Day of the next attended CT: a jittered protocol interval, plus one more if the visit is missed."""
    planned = planned_exam_interval(volume_mm3, p)
    n = day.size
    first = planned * rng.uniform(1 - p.exam_jitter, 1 + p.exam_jitter, n)
    second = planned * rng.uniform(1 - p.exam_jitter, 1 + p.exam_jitter, n)
    missed = rng.random(n) < p.exam_miss_probability
    gap = np.rint(first + np.where(missed, second, 0.0))
    return day + np.maximum(gap, p.min_gap_days)


def next_lab_day(day: np.ndarray, p: GeneratorParameters, rng: np.random.Generator) -> np.ndarray:
    """Day of the next serum-marker draw, on the lab's own schedule (independent of the CT dates)."""
    n = day.size
    first = p.lab_interval_days + rng.uniform(-p.lab_jitter_days, p.lab_jitter_days, n)
    second = p.lab_interval_days + rng.uniform(-p.lab_jitter_days, p.lab_jitter_days, n)
    missed = rng.random(n) < p.lab_miss_probability
    gap = np.rint(first + np.where(missed, second, 0.0))
    return day + np.maximum(gap, p.min_gap_days)


def exam_interval_bounds(volume_mm3: np.ndarray, p: GeneratorParameters) -> tuple[np.ndarray, np.ndarray]:
    """Range (days) of one jittered CT interval after an exam that measured ``volume_mm3``."""
    planned = planned_exam_interval(volume_mm3, p)
    return planned * (1 - p.exam_jitter), planned * (1 + p.exam_jitter)


def lab_interval_bounds(n: int, p: GeneratorParameters) -> tuple[np.ndarray, np.ndarray]:
    """Range (days) of one jittered lab interval."""
    return (np.full(n, p.lab_interval_days - p.lab_jitter_days), np.full(n, p.lab_interval_days + p.lab_jitter_days))


def next_visit_after(
    day: np.ndarray,
    lo: np.ndarray,
    hi: np.ndarray,
    miss_probability: float,
    min_gap_days: int,
    after: np.ndarray,
    rng: np.random.Generator,
) -> np.ndarray:
    """Next attended visit after ``day``, drawn from its law conditioned on falling after ``after``.

    The unconditioned gap is X = U1 (visit attended) or U1 + U2 (one visit missed, probability
    ``miss_probability``), U1, U2 ~ U(lo, hi), rounded to whole days: this is :func:`next_exam_day` /
    :func:`next_lab_day`. The next day exceeds ``after`` iff X >= c = floor(after) + 0.5 - day, so the
    conditional law is the mixture of a truncated uniform and a truncated triangular (the sum of two
    uniforms) with weights proportional to their tail probabilities; both are drawn by inverting
    their distribution functions. Exact (no rejection loop).
    """
    n = day.size
    c = np.floor(after) + 0.5 - day
    width = hi - lo
    a, b, mode = 2 * lo, 2 * hi, lo + hi  # the triangular law of U1 + U2
    tail_one = np.clip((hi - c) / width, 0.0, 1.0)

    def tri_cdf(x: np.ndarray) -> np.ndarray:
        x = np.clip(x, a, b)
        left = (x - a) ** 2 / ((b - a) * (mode - a))
        right = 1 - (b - x) ** 2 / ((b - a) * (b - mode))
        return np.where(x <= mode, left, right)

    def tri_inverse(u: np.ndarray) -> np.ndarray:
        left = a + np.sqrt(u * (b - a) * (mode - a))
        right = b - np.sqrt((1 - u) * (b - a) * (b - mode))
        return np.where(u <= 0.5, left, right)

    start_two = tri_cdf(c)
    tail_two = 1 - start_two
    w_one = (1 - miss_probability) * tail_one
    w_two = miss_probability * tail_two
    total = w_one + w_two
    # a history the protocol cannot produce (no weight left): take the longest possible gap
    impossible = total <= 0
    missed = rng.random(n) * np.where(impossible, 1.0, total) >= w_one
    u = rng.random(n)
    one = np.maximum(c, lo) + u * (hi - np.maximum(c, lo))
    two = tri_inverse(start_two + u * tail_two)
    gap = np.where(impossible, b, np.where(missed, two, one))
    return day + np.maximum(np.rint(gap), min_gap_days)
