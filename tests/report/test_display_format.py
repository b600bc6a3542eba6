"""The report's display layer: p-values, intervals, significant digits, and the numbers a reader sees.

Conventions checked (**common practice**, journal statistical-reporting instructions such as the *NEJM* and
*Annals of Internal Medicine* author guidelines, **from memory**): p with two decimals, three below 0.01,
"<0.001" below 0.001; ratios with two decimals; C/AUC/Brier/proportions with three decimals; intervals as
"estimate (low–high)"; suppressed counts shown unchanged.
"""

from __future__ import annotations

import math
import re
from html.parser import HTMLParser
from pathlib import Path

import pandas as pd
import pytest
from hypothesis import given
from hypothesis import strategies as st

from riskbench.report.display_format import (
    display_table,
    format_interval,
    format_p_value,
    format_ratio,
    format_significant,
    human_name,
    tidy_interval_text,
)
from riskbench.report.html_report import build_report
from riskbench.report.outputs import save_table


@pytest.mark.parametrize(
    "p, shown",
    [
        (0.451306, "0.45"),
        (0.826982, "0.83"),
        (0.0784014, "0.08"),
        (0.0499, "0.050"),
        (0.0451, "0.045"),
        (0.00177164, "0.002"),
        (0.00383485, "0.004"),
        (0.001, "0.001"),
        (0.000999, "<0.001"),
        (4.99907e-13, "<0.001"),
        (0.0, "<0.001"),
        (0.995, ">0.99"),
        (1.0, ">0.99"),
        (0.0100, "0.01"),
    ],
)
def test_p_values(p, shown):
    assert format_p_value(p) == shown


def test_p_value_outside_zero_one_is_rejected():
    with pytest.raises(ValueError, match="p-value"):
        format_p_value(1.5)


@pytest.mark.parametrize(
    "x, digits, shown",
    [
        (0.00976298, 3, "0.00976"),
        (0.0129613, 3, "0.0130"),
        (-0.0453253, 3, "-0.0453"),
        (1.17156, 3, "1.17"),
        (7279.59, 3, "7280"),
        (0.09996, 3, "0.100"),
        (9.996, 3, "10.0"),
        (123.456, 4, "123.5"),
        (0.0, 3, "0.00"),
        (-1e-9, 3, "0.000000"),
    ],
)
def test_significant_digits(x, digits, shown):
    assert format_significant(x, digits) == shown


def _significant_digits(text: str) -> int:
    digits = text.lstrip("-").replace(".", "").lstrip("0")
    return len(digits.rstrip("0")) if "." not in text else len(digits)


@given(st.floats(min_value=1e-5, max_value=1e6) | st.floats(min_value=-1e6, max_value=-1e-5), st.integers(1, 5))
def test_significant_digits_round_to_the_nearest_and_never_use_e_notation(x, digits):
    text = format_significant(x, digits)
    assert "e" not in text.lower()
    # rounding to `digits` significant digits moves the value by at most half a unit in the last place,
    # which is never finer than the sixth decimal (max_decimals)
    last_place = max(math.floor(math.log10(abs(x))) - digits + 1, -6)
    assert abs(float(text) - x) <= 0.5 * 10**last_place * (1 + 1e-9)
    assert _significant_digits(text) <= max(digits, len(str(round(abs(x)))))


@pytest.mark.parametrize(
    "x, shown", [(1.00981, "1.01"), (0.955687, "0.96"), (25.7309, "25.7"), (7279.59, "7280"), (0.00582623, "0.00583")]
)
def test_ratios(x, shown):
    assert format_ratio(x) == shown


def test_intervals_use_a_dash_unless_a_bound_is_negative():
    assert format_interval(1.00981, 0.984481, 1.03579, format_ratio) == "1.01 (0.98–1.04)"
    assert format_interval(0.848, 0.8213, 0.8687, lambda v: f"{v:.2f}") == "0.85 (0.82–0.87)"
    assert format_interval(-0.011, -0.22, 0.254, lambda v: f"{v:.3f}") == "-0.011 (-0.220 to 0.254)"
    assert format_interval(0.5, math.nan, math.nan, format_ratio) == "0.50"
    assert format_interval(math.nan, 0.1, 0.2) == ""
    assert tidy_interval_text("0.725 (0.674 to 0.776)") == "0.725 (0.674–0.776)"
    assert tidy_interval_text("0.046 (-0.013 to 0.085)") == "0.046 (-0.013 to 0.085)"


def test_names_for_reading():
    assert human_name("age_at_entry") == "Age at entry"
    assert human_name("serum_marker:s2") == "Serum marker × (s/S)²"


def test_coefficient_table_is_rounded_by_column_role():
    table = pd.DataFrame(
        {
            "cause": ["outcome"],
            "term": ["pack_years"],
            "coef": ["0.012218"],
            "se_robust": ["0.00390843"],
            "hazard_ratio": ["1.01229"],
            "hr_lower_95": ["1.00457"],
            "hr_upper_95": ["1.02008"],
            "p_value": ["4.99907e-13"],
        }
    )
    shown = display_table(table)
    assert list(shown.columns) == [
        "Cause",
        "Term",
        "Coefficient (log hazard)",
        "SE (robust)",
        "Hazard ratio (95% CI)",
        "p",
    ]
    assert list(shown.iloc[0]) == ["Outcome", "Pack years", "0.0122", "0.00391", "1.01 (1.00–1.02)", "<0.001"]


def test_rows_are_formatted_by_their_measure_and_suppressed_counts_stay():
    table = pd.DataFrame(
        {
            "model": ["a", "a", "a"],
            "horizon_days": ["730.5"] * 3,
            "quantity": ["threshold", "npv", "n_flagged"],
            "estimate": ["0.0373102", "0.980358", "<10"],
            "lower": ["0.032373", "0.977839", ""],
            "upper": ["0.0431332", "0.982136", ""],
            "empty": ["", "", ""],
        }
    )
    shown = display_table(table)
    assert list(shown.columns) == ["Model", "Horizon (years)", "Quantity", "Estimate (95% bootstrap interval)"]
    assert list(shown.iloc[:, 3]) == ["0.0373 (0.0324–0.0431)", "0.980 (0.978–0.982)", "<10"]
    assert list(shown["Horizon (years)"]) == ["2"] * 3  # days shown in years like the other tables
    assert list(display_table(pd.DataFrame({"horizon": ["91.3125"]})).iloc[0]) == ["91"]  # whole days


class _Cells(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.cells: list[str] = []
        self._in_cell = False

    def handle_starttag(self, tag, attrs):
        if tag in ("td", "th"):
            self._in_cell = True
            self.cells.append("")

    def handle_endtag(self, tag):
        if tag in ("td", "th"):
            self._in_cell = False

    def handle_data(self, data):
        if self._in_cell:
            self.cells[-1] += data


_TOKEN = re.compile(r"-?\d[\d.]*(?:[eE][-+]?\d+)?")


def test_report_cells_show_at_most_four_significant_digits_and_the_csv_keeps_full_precision(tmp_path: Path):
    """Tables as the stages write them (values from the demo run); the page must round, the CSV must not."""
    save_table(
        pd.DataFrame(
            {
                "cause": ["outcome", "outcome"],
                "term": ["age_at_entry", "suspicion_score:s"],
                "coef": [0.00976298, 1.82711],
                "se_robust": [0.0129613, 2.36115],
                "se_model": [0.011953, 2.68438],
                "hazard_ratio": [1.00981, 6.21592],
                "hr_lower_95": [0.984481, 0.0607697],
                "hr_upper_95": [1.03579, 635.804],
                "p_value": [4.99907e-13, 0.439036],
            }
        ),
        tmp_path,
        "coefficients_m",
    )
    save_table(
        pd.DataFrame(
            {
                "model": ["m"],
                "horizon_years": [1.0],
                "observed_expected": [1.0115],
                "oe_lower": [0.89032],
                "oe_upper": [1.14918],
                "slope": [0.887005],
                "slope_se": [0.057181],
                "ici": [0.00247968],
                "e50": [0.00178399],
                "e90": [0.00345412],
            }
        ),
        tmp_path,
        "calibration_summary",
    )
    save_table(
        pd.DataFrame({"horizon_years": [1.0, 1.0], "metric": ["harrell_c", "brier"], "m": [0.725288, 0.0166796]}),
        tmp_path,
        "discrimination",
    )
    save_table(
        pd.DataFrame(
            {
                "model": ["m", "m"],
                "horizon_years": [2.0, 2.0],
                "quantity": ["threshold", "n_flagged"],
                "estimate": ["0.0373102", "<10"],
                "lower": [0.032373, None],
                "upper": [0.0431332, None],
            }
        ),
        tmp_path,
        "triage_operating_point",
    )
    save_table(
        pd.DataFrame({"table": ["measurements"], "state": ["read"], "rows_remaining": [88742], "rows_excluded": [0]}),
        tmp_path,
        "ledger_summary",
    )
    csv_before = {p.name: p.read_bytes() for p in (tmp_path / "tables").glob("*.csv")}
    assert b"4.99907e-13" in csv_before["coefficients_m.csv"]

    parser = _Cells()
    parser.feed(build_report(tmp_path, title="t", threshold=10).read_text())
    cells = parser.cells
    assert "1.01 (0.98–1.04)" in cells and "<0.001" in cells and "<10" in cells and "0.725" in cells
    assert "88742" in cells  # counts stay whole
    for cell in cells:
        for token in _TOKEN.findall(cell):
            assert "e" not in token.lower(), cell
            if "." in token:
                assert _significant_digits(token) <= 4, f"{token!r} in {cell!r}"
    for bad in ("se_robust", "hr_lower_95", "p_value", "oe_lower"):
        assert bad not in cells
    assert {p.name: p.read_bytes() for p in (tmp_path / "tables").glob("*.csv")} == csv_before


def test_intervals_named_by_their_estimate_column_are_merged_and_differences_keep_three_decimals():
    """The comparison table stores each interval as ``<name>, <name>_low, <name>_high`` (numbers); the page
    shows one ``"estimate (low–high)"`` cell per model, formatted by the row's measure."""
    table = pd.DataFrame(
        {
            "metric": ["harrell_c", "ici"],
            "horizon_years": ["2", "2"],
            "clinical": ["0.725288", "0.0024797"],
            "clinical_low": ["0.674", "0.00101"],
            "clinical_high": ["0.776", "0.0049"],
            "imaging minus clinical": ["0.0412", "-0.0003"],
            "imaging minus clinical_low": ["0.011", "-0.0011"],
            "imaging minus clinical_high": ["0.07", "0.0004"],
        }
    )
    shown = display_table(table)
    assert list(shown.columns) == [
        "Metric",
        "Horizon (years)",
        "Clinical (95% interval)",
        "Imaging minus clinical (95% interval)",
    ]
    assert list(shown.iloc[:, 2]) == ["0.725 (0.674–0.776)", "0.0025 (0.0010–0.0049)"]
    assert list(shown.iloc[:, 3]) == ["0.041 (0.011–0.070)", "-0.0003 (-0.0011 to 0.0004)"]
