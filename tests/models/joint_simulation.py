"""Simulate data from a shared-random-effects joint model, written from the published equations.

Not the fitting code: the model is the one of Henderson, Diggle & Dobson (2000, Biostatistics 1:465-480,
section 2) and Rizopoulos (2012, *Joint Models for Longitudinal and Time-to-Event Data*, section 4.1),

    y_ij = m_i(t_ij) + ε_ij,  m_i(t) = β₀ + β₁ t + β₂ x_i + b_i0 + b_i1 t,  b_i ~ N(0, D),  ε_ij ~ N(0, σ²)
    h_1(t) = λ₁ exp(γ₁ w_i + α m_i(t)),   h_2(t) = λ₂ exp(γ₂ w_i)

(time in years). Outcome times invert the cumulative hazard numerically: H₁(t) on a fine grid by the
cumulative trapezoid rule, T₁ = H₁⁻¹(E) with E ~ Exp(1) by linear interpolation. The competing time is
exponential, censoring uniform; visits every ``visit_gap`` years from 0 up to the end of follow-up.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

DAYS = 365.25


@dataclass(frozen=True)
class JointTruth:
    """True parameters (time in years)."""

    beta: tuple[float, float, float] = (4.0, 0.3, 0.5)
    sigma: float = 0.3
    d: tuple[tuple[float, float], tuple[float, float]] = ((0.5, 0.05), (0.05, 0.09))
    rate_outcome: float = 0.02
    gamma_outcome: float = 0.5
    alpha: float = 0.6
    rate_competing: float = 0.03
    gamma_competing: float = -0.3
    censor_years: tuple[float, float] = (3.0, 8.0)
    visit_gap: float = 0.5
    extra: dict = field(default_factory=dict)


def simulate_joint(
    n: int, truth: JointTruth = JointTruth(), seed: int = 0, grid_points: int = 2001
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Measurement table (patient_id, time days, value) and survival table (patient_id, time, status, x, w)."""
    rng = np.random.default_rng(seed)
    x = rng.normal(size=n)
    w = rng.binomial(1, 0.5, size=n).astype(float)
    b = rng.multivariate_normal(np.zeros(2), np.array(truth.d), size=n)
    beta0, beta1, beta2 = truth.beta
    intercept = beta0 + beta2 * x + b[:, 0]
    slope = beta1 + b[:, 1]
    t_max = truth.censor_years[1]
    grid = np.linspace(0.0, t_max, grid_points)
    hazard = truth.rate_outcome * np.exp(
        truth.gamma_outcome * w[:, None] + truth.alpha * (intercept[:, None] + slope[:, None] * grid)
    )
    cumulative = np.concatenate(
        [np.zeros((n, 1)), np.cumsum(0.5 * (hazard[:, 1:] + hazard[:, :-1]) * np.diff(grid), axis=1)], axis=1
    )
    target = rng.exponential(size=n)
    t1 = np.full(n, np.inf)
    for i in range(n):
        if target[i] < cumulative[i, -1]:
            t1[i] = np.interp(target[i], cumulative[i], grid)
    t2 = rng.exponential(1.0 / (truth.rate_competing * np.exp(truth.gamma_competing * w)))
    censor = rng.uniform(*truth.censor_years, size=n)
    end = np.minimum.reduce([t1, t2, censor])
    status = np.where(end == t1, 1, np.where(end == t2, 2, 0))
    ids = np.array([f"S{i:05d}" for i in range(n)])
    visits = [np.arange(0.0, e, truth.visit_gap) for e in end]
    patient = np.repeat(np.arange(n), [len(v) for v in visits])
    times = np.concatenate(visits)
    value = intercept[patient] + slope[patient] * times + rng.normal(scale=truth.sigma, size=len(times))
    measurements = pd.DataFrame({"patient_id": ids[patient], "time": times * DAYS, "value": value})
    survival = pd.DataFrame({"patient_id": ids, "time": end * DAYS, "status": status, "x": x, "w": w})
    return measurements, survival
