"""Suppression of a cohort flow, whose counts are linked by subtraction (threshold 10 is common practice)."""

from __future__ import annotations

import itertools

import pandas as pd
import pytest
from hypothesis import assume, given
from hypothesis import strategies as st

from riskbench.report.flow_suppression import suppress_flow
from riskbench.report.suppression import complementary_hidden

PREFIX = "after excluding: "


def _flow(start: int, removed: list[int], groups: list[int] | None = None) -> pd.DataFrame:
    rows, left = [("read", start, 0, 0)], start
    for i, n in enumerate(removed):
        left -= n
        rows.append((f"{PREFIX}reason {i}", left, n, 0))
    rows.append(("included", left, 0, 0))
    for j, n in enumerate(groups or []):
        rows.append((f"group {j}", n, 0, 1))
    return pd.DataFrame(rows, columns=["step", "n_patients", "n_excluded", "level"])


def _number(text: str) -> int | None:
    return int(text) if text.isdigit() else None


def test_small_step_is_merged_with_the_next() -> None:
    shown = suppress_flow(_flow(3000, [3, 250, 40]), 10)
    assert shown["step"].tolist() == ["read", f"{PREFIX}reason 0; reason 1", f"{PREFIX}reason 2", "included"]
    assert shown["n_excluded"].tolist() == ["0", "253", "40", "0"]
    assert shown["n_patients"].tolist() == ["3000", "2747", "2707", "2707"]


def test_small_last_step_joins_the_step_before() -> None:
    shown = suppress_flow(_flow(3000, [250, 4]), 10)
    assert shown["step"].tolist() == ["read", f"{PREFIX}reason 0; reason 1", "included"]
    assert shown["n_excluded"].tolist() == ["0", "254", "0"]


def test_all_exclusions_small_withholds_the_start() -> None:
    shown = suppress_flow(_flow(3000, [3, 4]), 10)
    assert shown["n_patients"].tolist() == ["suppressed", "2993", "2993"]
    assert shown["n_excluded"].tolist() == ["0", "<10", "0"]


def test_small_remaining_count_hides_its_exclusion() -> None:
    shown = suppress_flow(_flow(60, [55]), 10)
    assert shown["n_patients"].tolist() == ["60", "<10", "<10"]
    assert shown["n_excluded"].tolist() == ["0", "suppressed", "0"]


def test_groups_get_complementary_suppression() -> None:
    shown = suppress_flow(_flow(500, [20], groups=[4, 120, 356]), 10)
    assert shown.loc[shown["level"] == 1, "n_patients"].tolist() == ["<10", "suppressed", "356"]


def test_complementary_hidden_until_the_hidden_sum_reaches_the_threshold() -> None:
    assert complementary_hidden([3, 4, 50, 80], 10).tolist() == [True, True, True, False]
    assert complementary_hidden([3, 8, 50], 10).tolist() == [True, True, False]  # 11 >= 10: enough
    assert complementary_hidden([0, 50, 80], 10).tolist() == [False, False, False]


def test_missing_columns_are_named() -> None:
    with pytest.raises(ValueError, match="n_excluded"):
        suppress_flow(pd.DataFrame({"step": ["a"], "n_patients": [1], "level": [0]}), 10)


@given(
    st.integers(0, 400),
    st.lists(st.integers(0, 60), max_size=6),
    st.lists(st.floats(0, 1), max_size=3),
    st.integers(2, 12),
)
def test_no_hidden_count_follows_from_the_shown_ones(start, removed, cuts, threshold) -> None:
    removed = [n for n in removed if n > 0]
    assume(sum(removed) <= start)
    # The groups split the included patients (cut at random points).
    included = start - sum(removed)
    edges = [0, *sorted(round(c * included) for c in cuts), included]
    groups = [b - a for a, b in itertools.pairwise(edges)]
    flow = _flow(start, removed, groups)
    shown = suppress_flow(flow, threshold)
    main = shown[shown["level"] == 0].reset_index(drop=True)
    # Nothing small is ever shown, and nothing is lost: the merged steps remove what the steps removed.
    for text in pd.concat([shown["n_patients"], shown["n_excluded"]]):
        n = _number(text)
        assert n is None or n == 0 or n >= threshold
    removed_total = sum(_number(t) or 0 for t in main["n_excluded"])
    hidden_steps = [t for t in main["n_excluded"] if _number(t) is None]
    assert removed_total == sum(removed) or hidden_steps
    # A hidden exclusion never sits between two shown counts (it would be their difference).
    counts = main["n_patients"].tolist()
    for i in range(1, len(main)):
        if _number(main["n_excluded"][i]) is None:
            assert _number(counts[i - 1]) is None or _number(counts[i]) is None
    # Hidden groups add up to 0 or at least the threshold when the total they split is shown.
    split = shown[shown["level"] == 1]["n_patients"].tolist()
    if split and _number(counts[-1]) is not None:
        hidden_sum = sum(g for g, t in zip(groups, split) if _number(t) is None)
        assert hidden_sum == 0 or hidden_sum >= threshold
