"""Shared helpers for the cohort-stage tests: a small random surveillance cohort builder."""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
import pandas as pd
import pytest

BASE = pd.Timestamp("2020-01-01")


def random_cohort(
    n_patients: int,
    seed: int,
    *,
    n_vars: int = 2,
    max_values: int = 6,
    follow_up_days: int = 1500,
    lookback: bool = True,
) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    """Random patients / measurements / outcomes tables in the input contract (integer days).

    Values fall on integer days in [-60, end]; some share a day with the end or with each other; variable
    ``v0`` ... ``v{n_vars-1}`` with positive values.
    """
    rng = np.random.default_rng(seed)
    ids = [f"P{i:04d}" for i in range(n_patients)]
    entry = BASE + pd.to_timedelta(rng.integers(0, 400, n_patients), unit="D")
    end = rng.integers(1, follow_up_days, n_patients)
    kinds = rng.choice(["outcome", "competing", "end_of_follow_up"], n_patients, p=[0.3, 0.2, 0.5])
    patients = pd.DataFrame(
        {
            "patient_id": ids,
            "entry_date": entry.strftime("%Y-%m-%d"),
            "birth_date": (entry - pd.to_timedelta(rng.integers(40 * 365, 80 * 365, n_patients), unit="D")).strftime(
                "%Y-%m-%d"
            ),
            "sex": rng.choice(["F", "M"], n_patients),
            "pack_years": rng.gamma(2.0, 10.0, n_patients).round(1),
        }
    )
    rows = []
    for i in range(n_patients):
        for v in range(n_vars):
            k = rng.integers(0, max_values + 1)
            low = -60 if lookback else 0
            days = np.unique(rng.integers(low, end[i] + 1, k))
            for d in days:
                rows.append((ids[i], entry[i] + pd.Timedelta(days=int(d)), f"v{v}", float(rng.integers(1, 50))))
    meas = pd.DataFrame(rows, columns=["patient_id", "date", "variable", "value"])
    meas["date"] = pd.to_datetime(meas["date"]).dt.strftime("%Y-%m-%d")
    outcomes = pd.DataFrame(
        {"patient_id": ids, "date": (entry + pd.to_timedelta(end, unit="D")).strftime("%Y-%m-%d"), "kind": kinds}
    )
    return patients, meas, outcomes


@pytest.fixture(scope="session")
def make_random_cohort() -> Callable[..., tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]]:
    """The :func:`random_cohort` builder."""
    return random_cohort
