"""The joint model's inputs recovered from a counting-process table (the cohort stage's output)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from riskbench.models.joint_inputs import (
    measurements_from_counting_process,
    staleness_column,
    survival_from_counting_process,
)
from riskbench.models.risk_contract import ModelInputError


def _counting() -> pd.DataFrame:
    # patient A: measured at entry (value 1.0), at day 100 (2.0); an interval split at day 150 by another
    # variable carries 2.0 with staleness 50; event at day 300. Patient B: value dated 20 days before entry.
    return pd.DataFrame(
        {
            "patient_id": ["A", "A", "A", "B", "B"],
            "start": [0.0, 100.0, 150.0, 0.0, 80.0],
            "stop": [100.0, 150.0, 300.0, 80.0, 400.0],
            "status": [0, 0, 1, 0, 2],
            "log_v": [1.0, 2.0, 2.0, 5.0, np.nan],
            "v_staleness_days": [0.0, 0.0, 50.0, 20.0, np.nan],
            "age": [60.0, 60.0, 60.0, 70.0, 70.0],
        }
    )


def test_measurements_are_the_distinct_dated_values():
    """Worked example by hand: a carried-forward value is one measurement, not two; a value dated before
    entry is placed at entry; a missing value is no measurement."""
    out = measurements_from_counting_process(_counting(), "log_v")
    assert staleness_column("log_v") == "v_staleness_days"
    assert out.to_dict("list") == {"patient_id": ["A", "A", "B"], "time": [0.0, 100.0, 0.0], "log_v": [1.0, 2.0, 5.0]}


def test_survival_is_last_stop_and_status_with_baseline_covariates():
    out = survival_from_counting_process(_counting(), ["age"])
    assert out.to_dict("list") == {
        "patient_id": ["A", "B"],
        "time": [300.0, 400.0],
        "status": [1, 2],
        "age": [60.0, 70.0],
    }


def test_missing_column_is_named():
    with pytest.raises(ModelInputError, match="v_staleness_days"):
        measurements_from_counting_process(_counting().drop(columns="v_staleness_days"), "log_v")
