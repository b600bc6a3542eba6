"""Small-count suppression (threshold 10 is common practice) and the baseline table built on it."""

from __future__ import annotations

import numpy as np
import pandas as pd
from hypothesis import given
from hypothesis import strategies as st

from riskbench.report.baseline_table import baseline_table
from riskbench.report.suppression import count_columns, format_count, suppress_counts


def test_format_count_hides_one_to_nine_but_not_zero():
    assert [format_count(n, 10) for n in (0, 1, 9, 10, 250)] == ["0", "<10", "<10", "10", "250"]


@given(st.lists(st.integers(min_value=0, max_value=40), min_size=1, max_size=6), st.integers(2, 15))
def test_no_small_count_survives(counts, threshold):
    table = pd.DataFrame({"group": [f"g{i}" for i in range(len(counts))], "n": counts})
    shown = suppress_counts(table, ["n"], threshold)["n"]
    for original, text in zip(counts, shown):
        if 0 < original < threshold:
            assert text == f"<{threshold}"
        else:
            assert text == str(original)


def test_complementary_suppression_hides_a_second_cell_of_the_row():
    table = pd.DataFrame({"a": [3, 50], "b": [40, 60], "c": [55, 70]})
    shown = suppress_counts(table, ["a", "b", "c"], 10, complementary=True)
    assert list(shown.iloc[0]) == ["<10", "suppressed", "55"]  # 3 could otherwise be total minus 40 and 55
    assert list(shown.iloc[1]) == ["50", "60", "70"]


def test_count_columns_finds_integer_counts_only():
    table = pd.DataFrame({"n_flagged": [3, 12], "npv": [0.98, 0.97], "n": [100, 100], "threshold": [0.1, 0.2]})
    assert count_columns(table) == ["n_flagged", "n"]


def test_baseline_table_hides_small_groups_and_their_complement():
    rng = np.random.default_rng(1)
    n = 60
    status = np.r_[np.full(4, 1), np.full(20, 2), np.full(36, 0)]  # only 4 outcomes
    patients = pd.DataFrame(
        {"patient_id": [f"R{i}" for i in range(n)], "end_days": rng.uniform(100, 2000, n), "end_status": status}
    )
    covs = pd.DataFrame(
        {"patient_id": patients["patient_id"], "age_at_entry": rng.normal(65, 8, n), "sex_male": rng.integers(0, 2, n)}
    )
    table = baseline_table(patients, covs, ["age_at_entry", "sex_male"], threshold=10)
    first = table.iloc[0]
    assert first["Outcome"] == "<10"
    assert first["All"] == "60"
    # with the outcome group hidden, the smallest other group is hidden too (60 - 20 - 36 would give 4)
    assert first["Competing event"] == "suppressed"
    assert (table["Outcome"].iloc[1:] == "").all() and (table["Competing event"].iloc[1:] == "").all()
    assert table.loc[table["characteristic"] == "age_at_entry, median (IQR)", "Censored"].item() != ""
