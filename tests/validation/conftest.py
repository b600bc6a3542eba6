"""Shared helper: small synthetic landmark stacks with a known hazard."""

import numpy as np
import pandas as pd


def simulate_stack(
    n: int,
    seed: int,
    *,
    beta_clinical: float = 0.6,
    beta_imaging: float = 0.8,
    landmarks=(0.0, 180.0, 365.0),
    horizon: float = 730.0,
    base_rate: float = 1 / 1500,
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Exponential event times with hazard base_rate * exp(b_c * clinical + b_i * imaging) (days),
    uniform censoring; returns (landmark stack, counting-process table with one row per patient)."""
    rng = np.random.default_rng(seed)
    clinical = rng.normal(size=n)
    imaging = rng.normal(size=n)
    rate = base_rate * np.exp(beta_clinical * clinical + beta_imaging * imaging)
    t_event = rng.exponential(1 / rate)
    t_cens = rng.uniform(200, 1500, n)
    stop = np.maximum(np.minimum(t_event, t_cens).round(), 1.0)
    status = (t_event <= t_cens).astype(int)
    ids = np.array([f"P{i:05d}" for i in range(n)])
    cp = pd.DataFrame(
        {"patient_id": ids, "start": 0.0, "stop": stop, "status": status, "clinical": clinical, "imaging": imaging}
    )
    rows = []
    for s in landmarks:
        at_risk = stop > s
        t = np.minimum(stop[at_risk], s + horizon) - s
        st = np.where(stop[at_risk] <= s + horizon, status[at_risk], 0)
        rows.append(
            pd.DataFrame(
                {
                    "patient_id": ids[at_risk],
                    "landmark": s,
                    "time": t,
                    "status": st,
                    "clinical": clinical[at_risk],
                    "imaging": imaging[at_risk],
                }
            )
        )
    return pd.concat(rows, ignore_index=True), cp
