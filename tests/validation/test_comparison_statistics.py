"""The comparison stage's numbers as numeric tables (riskbench.validation.comparison_statistics).

What is checked is the layout against the comparison object it is built from: every interval three numeric
columns at full precision, nothing formatted as text (the report formats, the CSV keeps the numbers).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from riskbench.time_units import DAYS_PER_YEAR
from riskbench.validation.comparison import Comparison
from riskbench.validation.comparison_statistics import (
    comparison_table,
    difference_name,
    prediction_column,
    risk_matrices,
)
from riskbench.validation.errors import ValidationInputError


def _comparison() -> Comparison:
    h = 2 * DAYS_PER_YEAR
    performance = pd.DataFrame(
        {
            "spec": ["clinical", "imaging", "clinical", "imaging", "imaging"],
            "metric": ["harrell_c", "harrell_c", "brier", "brier", "npv"],
            "horizon_days": [h] * 5,
            "threshold": [np.nan] * 4 + [0.05],
            "estimate": [0.7123456789, 0.7812345678, 0.021, 0.0199, 0.98],
            "ci_low": [0.68, 0.75, 0.018, 0.017, 0.97],
            "ci_high": [0.74, 0.81, 0.024, 0.023, 0.99],
            "n_boot": [50] * 5,
        }
    )
    differences = pd.DataFrame(
        {
            "reference": ["clinical"] * 3,
            "candidate": ["imaging"] * 3,
            "metric": ["harrell_c", "brier", "npv"],
            "horizon_days": [h] * 3,
            "threshold": [np.nan, np.nan, 0.05],
            "estimate": [0.0688888889, -0.0011, 0.01],
            "ci_low": [0.03, -0.002, 0.0],
            "ci_high": [0.1, -0.0002, 0.02],
            "n_boot": [50] * 3,
            "better_if": ["higher", "lower", "higher"],
        }
    )
    return Comparison(performance=performance, differences=differences, replicates=pd.DataFrame(), n_failed=0)


def test_comparison_table_keeps_every_interval_as_three_numbers_at_full_precision():
    table = comparison_table(_comparison(), "clinical", "imaging")
    diff = difference_name("imaging", "clinical")
    assert list(table.columns) == [
        "metric",
        "horizon_years",
        "obtained_by",
        "clinical",
        "clinical_low",
        "clinical_high",
        "imaging",
        "imaging_low",
        "imaging_high",
        diff,
        f"{diff}_low",
        f"{diff}_high",
        "better_if",
        "bootstrap_resamples",
    ]
    assert list(table["metric"]) == ["harrell_c", "brier"]  # thresholded measures are not comparison rows
    numeric = [c for c in table.columns if c not in ("metric", "obtained_by", "better_if")]
    assert all(pd.api.types.is_numeric_dtype(table[c]) for c in numeric)
    assert table.loc[0, "clinical"] == 0.7123456789 and table.loc[0, diff] == 0.0688888889
    assert table.loc[1, f"{diff}_high"] == -0.0002
    assert table["horizon_years"].tolist() == [2.0, 2.0]


def test_a_model_without_the_measure_has_nan_not_an_empty_string():
    comparison = _comparison()
    performance = comparison.performance[
        ~((comparison.performance["spec"] == "clinical") & (comparison.performance["metric"] == "brier"))
    ]
    table = comparison_table(Comparison(performance, comparison.differences, pd.DataFrame(), 0), "clinical", "imaging")
    assert np.isnan(table.loc[1, ["clinical", "clinical_low", "clinical_high"]].to_numpy(float)).all()


def test_risk_matrices_and_horizon_lookup():
    cv = pd.DataFrame({"row": [0, 0, 1, 1], "model": "m", "horizon": [365.25, 730.5] * 2, "risk": [0.1, 0.2, 0.3, 0.4]})
    horizons, risks = risk_matrices(cv, 2)
    np.testing.assert_array_equal(risks["m"], [[0.1, 0.2], [0.3, 0.4]])
    assert prediction_column(horizons, 730.5) == 1
    with pytest.raises(ValidationInputError, match="rerun stages 2 and 3"):
        prediction_column(horizons, 1000.0)
    with pytest.raises(ValidationInputError, match="lacks predictions"):
        risk_matrices(cv, 3)
