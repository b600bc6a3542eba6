"""Missing-data tables of the report (riskbench.report.missing_table), checked by hand-counted examples."""

from __future__ import annotations

import numpy as np
import pandas as pd

from riskbench.report.missing_table import complete_case_table, missing_data_table
from riskbench.time_units import DAYS_PER_YEAR


def _stack() -> pd.DataFrame:
    """40 patients at landmark 0 and 30 at landmark 1 year; volume missing for 12 and 3 rows; staleness known."""
    rows = []
    for i in range(40):
        rows.append(
            {
                "patient_id": f"P{i}",
                "landmark": 0.0,
                "log_volume": np.nan if i < 12 else 1.0,
                "volume_staleness_days": np.nan if i < 12 else float(i),
                "age_at_entry": 60.0,
            }
        )
    for i in range(30):
        rows.append(
            {
                "patient_id": f"P{i}",
                "landmark": DAYS_PER_YEAR,
                "log_volume": np.nan if i < 3 else 2.0,
                "volume_staleness_days": 500.0 if i < 3 else 10.0 * i,
                "age_at_entry": 60.0,
            }
        )
    return pd.DataFrame(rows)


def test_share_missing_and_median_staleness_by_hand() -> None:
    table = missing_data_table(_stack(), ["log_volume", "age_at_entry"], ["volume_staleness_days"])
    volume = table[table["covariate"] == "log_volume"].set_index("landmark_years")
    assert volume.loc[0.0, ["rows", "rows_missing", "rows_observed"]].tolist() == [40, 12, 28]
    assert volume.loc[0.0, "share_missing"] == 12 / 40
    assert volume.loc[0.0, "median_staleness_days"] == np.median(np.arange(12, 40))  # observed values only
    assert volume.loc[1.0, "share_missing"] == 3 / 30
    assert volume.loc[1.0, "median_staleness_days"] == np.median(10.0 * np.arange(3, 30))
    age = table[table["covariate"] == "age_at_entry"]
    assert (age["share_missing"] == 0).all() and age["median_staleness_days"].isna().all()  # a static
    # the mapping form names the staleness column of each covariate
    mapped = missing_data_table(_stack(), ["log_volume"], {"log_volume": "volume_staleness_days"})
    pd.testing.assert_frame_equal(mapped, table[table["covariate"] == "log_volume"].reset_index(drop=True))
    labelled = missing_data_table(_stack(), ["log_volume"], ["volume_staleness_days"], labels=str.upper)
    assert list(labelled.columns[:2]) == ["covariate", "label"] and set(labelled["label"]) == {"LOG_VOLUME"}


def test_small_counts_are_hidden_with_the_share_and_staleness() -> None:
    """3 missing of 30 (threshold 10) is hidden, and so is its complement (27 observed) since the total is
    shown; the share and the median staleness are blanked with them (common practice)."""
    table = missing_data_table(_stack(), ["log_volume"], ["volume_staleness_days"], threshold=10)
    later = table[table["landmark_years"] == 1.0].iloc[0]
    assert later["rows_missing"] == "<10" and later["rows_observed"] == "suppressed"
    assert np.isnan(later["share_missing"]) and np.isnan(later["median_staleness_days"])
    first = table[table["landmark_years"] == 0.0].iloc[0]
    assert (first["rows_missing"], first["rows_observed"], first["share_missing"]) == ("12", "28", 0.3)


def test_complete_case_table_counts_dropped_rows_per_model_and_landmark() -> None:
    stack = _stack()
    stack.loc[stack.index[-1], "age_at_entry"] = np.nan  # one more incomplete row at 1 year
    table = complete_case_table(stack, {"imaging": ["log_volume", "age_at_entry"], "clinical": ["age_at_entry"]})
    imaging = table[table["model"] == "imaging"].set_index("landmark_years")
    assert imaging.loc[0.0, ["rows", "rows_dropped", "rows_kept", "patients_dropped"]].tolist() == [40, 12, 28, 12]
    assert imaging.loc[1.0, ["rows_dropped", "rows_kept"]].tolist() == [4, 26]
    clinical = table[table["model"] == "clinical"].set_index("landmark_years")
    assert clinical["rows_dropped"].tolist() == [0, 1]
    hidden = complete_case_table(stack, {"clinical": ["age_at_entry"]}, threshold=10)
    assert hidden["rows_dropped"].tolist() == ["0", "<10"]
