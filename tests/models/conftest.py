"""Shared fixtures for the models tests: a small simulated landmark stack with a known hazard."""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
import pandas as pd
import pytest


def simulate_stack(
    n_patients: int = 300,
    landmarks: tuple[float, ...] = (0.0, 182.625, 365.25),
    horizon: float = 730.5,
    beta: tuple[float, float] = (0.7, -0.4),
    beta_slope: tuple[float, float] = (0.0, 0.0),
    competing_rate: float = 1 / 1500,
    seed: int = 0,
    id_prefix: str = "P",
) -> pd.DataFrame:
    """Landmark stack: exponential outcome hazard exp(β(s)·x)/800 per day with β(s) = beta + beta_slope·s/S,
    exponential competing hazard, uniform censoring; the same patients appear at every landmark (their
    covariates drift a little between landmarks), as in a real stack."""
    rng = np.random.default_rng(seed)
    ids = np.array([f"{id_prefix}{i:05d}" for i in range(n_patients)])
    x = rng.normal(size=(n_patients, 2))
    scale = max(landmarks) or 1.0
    frames = []
    for s in landmarks:
        x = x + rng.normal(scale=0.2, size=x.shape)
        b = np.asarray(beta) + np.asarray(beta_slope) * s / scale
        t1 = rng.exponential(800.0 / np.exp(x @ b))
        t2 = rng.exponential(1.0 / competing_rate, size=n_patients) if competing_rate > 0 else np.inf
        censor = rng.uniform(60.0, 1500.0, size=n_patients)
        time = np.minimum.reduce([t1, np.broadcast_to(t2, t1.shape), censor, np.full(n_patients, horizon)])
        status = np.where(time == t1, 1, np.where(time == t2, 2, 0))
        frames.append(
            pd.DataFrame(
                {"patient_id": ids, "landmark": s, "time": time, "status": status, "x1": x[:, 0], "x2": x[:, 1]}
            )
        )
    return pd.concat(frames, ignore_index=True)


@pytest.fixture
def make_stack() -> Callable[..., pd.DataFrame]:
    """Factory for simulated landmark stacks (see :func:`simulate_stack`)."""
    return simulate_stack
