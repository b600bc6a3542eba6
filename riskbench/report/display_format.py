"""How numbers look in the HTML report: rounding by what a column holds, intervals, p-values, headers.

The CSV tables keep full precision (6 significant digits, compared byte for byte across runs); this module
only turns a table, read as text, into the strings a reader sees. Every cell that does not parse as a number
(a suppressed count such as ``"<10"``, a label, an already formatted ``"64 (58.8–69.4)"``) is shown as it is.
An interval is stored as three numeric columns and shown as one: the fixed triples of :data:`INTERVALS`, and
any ``<name>``, ``<name>_low``, ``<name>_high`` (a model's estimate in the comparison table, a measure in the
performance per landmark).

Conventions (**common practice** in medical journals' statistical reporting guidelines, e.g. the
*Annals of Internal Medicine* / *NEJM* author instructions, **from memory**): p-values with two decimals,
three below 0.01, ``"<0.001"`` below that; ratios with two decimals; C, AUC, Brier and proportions with
three decimals; counts as integers; an interval as ``"1.01 (0.98–1.04)"``, written with "to" when a bound
is negative so the dash is not read as a minus sign.
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable
from dataclasses import dataclass

import pandas as pd

Formatter = Callable[[float], str]

_NUMBER = re.compile(r"^\s*[-+]?(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?\s*$")


def _parse(cell: object) -> float | None:
    """The cell as a float, or ``None`` when it is not a plain number (labels, ``"<10"``, empty)."""
    if isinstance(cell, (int, float)) and not isinstance(cell, bool):
        return float(cell)
    if isinstance(cell, str) and _NUMBER.match(cell):
        return float(cell)
    return None


def _no_negative_zero(text: str) -> str:
    # "-0.000" reads as a negative value that is not there
    return text[1:] if text.startswith("-") and not re.search(r"[1-9]", text) else text


def format_fixed(value: float, decimals: int = 3) -> str:
    """``value`` with a fixed number of decimals (``0.0166796`` → ``"0.017"``); never ``"-0.000"``."""
    return _no_negative_zero(f"{value:.{decimals}f}")


def format_significant(value: float, digits: int = 3, max_decimals: int = 6) -> str:
    """``value`` to ``digits`` significant digits in plain notation, never e-notation.

    ``0.00976298`` → ``"0.00976"``, ``0.0129613`` → ``"0.0130"``, ``7279.59`` → ``"7280"``. Values smaller
    than ``10**-max_decimals`` are shown with ``max_decimals`` zeros rather than in e-notation.
    """
    if digits < 1:
        raise ValueError(f"digits must be at least 1, got {digits}")
    if value == 0 or not math.isfinite(value):
        return format_fixed(value, digits - 1) if value == 0 else str(value)
    magnitude = math.floor(math.log10(abs(value)))
    decimals = digits - 1 - magnitude
    if decimals <= 0:
        scale = 10 ** (-decimals)
        return _no_negative_zero(f"{round(value / scale) * scale:.0f}")
    # rounding can carry into the next power of ten (0.09996 → 0.100): recompute the decimals once
    rounded = round(value, decimals)
    if rounded != 0 and math.floor(math.log10(abs(rounded))) > magnitude:
        decimals -= 1
    return format_fixed(value, min(max(decimals, 0), max_decimals))


def format_p_value(p: float) -> str:
    """A p-value as journals print it: ``"0.45"``, ``"0.048"``, ``"0.002"``, ``"<0.001"``, ``">0.99"``.

    Two decimals, three below 0.01 and between 0.045 and 0.05 (so 0.049 is not shown as "0.05").
    """
    if not 0 <= p <= 1:
        raise ValueError(f"a p-value must lie in [0, 1], got {p}")
    if p < 0.001:
        return "<0.001"
    if p < 0.01 or 0.045 <= p < 0.05:
        return f"{p:.3f}"
    if p > 0.99:
        return ">0.99"
    return f"{p:.2f}"


def format_ratio(value: float) -> str:
    """A ratio (hazard ratio, observed/expected): two decimals, three significant digits outside 0.1–10.

    ``1.00981`` → ``"1.01"``, ``25.7309`` → ``"25.7"``, ``7279.59`` → ``"7280"``, ``0.00582623`` →
    ``"0.00583"``.
    """
    if 0.1 <= abs(value) < 10:
        return format_fixed(value, 2)
    return format_significant(value, 3)


def format_count(value: float) -> str:
    """A count as an integer (``"3000"``); a fractional value is a mistake upstream and is kept visible."""
    return str(int(value)) if float(value).is_integer() else format_significant(value, 3)


def format_years(value: float) -> str:
    """A time in years with at most two decimals and no trailing zeros (``0.25``, ``1``, ``1.5``)."""
    return f"{round(value, 2):g}"


#: Days per year of the project's time scale (Julian year, as in the analysis configuration).
DAYS_PER_YEAR = 365.25


def format_days_as_years(value: float) -> str:
    """A time given in days shown in years (``730.5`` → ``"2"``), as the other report tables do."""
    return format_years(value / DAYS_PER_YEAR)


def format_days(value: float) -> str:
    """A time in days, rounded to whole days (``91.3125`` → ``"91"``)."""
    return f"{round(value):d}"


def format_interval(estimate: float, low: float, high: float, fmt: Formatter = format_significant) -> str:
    """``"0.85 (0.82–0.87)"``: estimate and interval, each formatted with ``fmt``.

    With a negative bound the bounds are joined by ``" to "`` (``"-0.011 (-0.220 to 0.254)"``). Missing
    bounds give the estimate alone; a missing estimate gives an empty string.
    """
    if estimate is None or math.isnan(estimate):
        return ""
    if low is None or high is None or math.isnan(low) or math.isnan(high):
        return fmt(estimate)
    lo, hi = fmt(low), fmt(high)
    joiner = " to " if lo.startswith("-") or hi.startswith("-") else "–"
    return f"{fmt(estimate)} ({lo}{joiner}{hi})"


_TEXT_INTERVAL = re.compile(r"^(\S+) \((\S+) to (\S+)\)$")


def tidy_interval_text(cell: str) -> str:
    """An interval already written as text, ``"0.725 (0.674 to 0.776)"``, in the report's dash style.

    The digits are left as they are (they were rounded when the table was made).
    """
    m = _TEXT_INTERVAL.match(cell)
    if not m or m.group(2).startswith("-") or m.group(3).startswith("-"):
        return cell
    return f"{m.group(1)} ({m.group(2)}–{m.group(3)})"


# ---------------------------------------------------------------------------------------------------------
# Column and measure roles


def _fixed3(v: float) -> str:
    return format_fixed(v, 3)


def _fixed4(v: float) -> str:
    return format_fixed(v, 4)


def _sig3(v: float) -> str:
    return format_significant(v, 3)


#: How each measure (a value of a ``metric`` / ``quantity`` column) is shown, and its name.
MEASURES: dict[str, tuple[str, Formatter]] = {
    "harrell_c": ("Harrell's C", _fixed3),
    "uno_c": ("Uno's C", _fixed3),
    "auc": ("AUC", _fixed3),
    "brier": ("Brier score", _fixed3),
    "scaled_brier": ("Scaled Brier score", _fixed3),
    "calibration_slope": ("Calibration slope", _fixed3),
    "oe_ratio": ("Observed/expected", format_ratio),
    "ici": ("ICI (risk)", _fixed4),
    "nri": ("NRI (category-free)", _fixed3),  # riskbench.validation.reclassification.nri_kind
    "nri_cat": ("NRI (categorical)", _fixed3),
    "idi": ("IDI", _fixed3),
    "threshold": ("Risk threshold", _fixed4),
    "sensitivity": ("Sensitivity", _fixed3),
    "specificity": ("Specificity", _fixed3),
    "ppv": ("PPV", _fixed3),
    "npv": ("NPV", _fixed3),
    "fraction_below": ("Fraction below threshold", _fixed3),
}

_COUNT_COLUMNS = {
    "n",
    "n_boot",
    "bootstrap_resamples",
    "at_risk",
    "outcomes",
    "competing_events",
    "level",
    "n_patients",
    "n_excluded",
    "rows_remaining",
    "rows_excluded",
    "n_rows",
    "events",
    "count",
}

#: Column name → (header, formatter). Names not listed fall back to :func:`_column_role`.
COLUMNS: dict[str, tuple[str, Formatter | None]] = {
    "coef": ("Coefficient (log hazard)", _sig3),
    "se_robust": ("SE (robust)", _sig3),
    "se_model": ("SE (model)", _sig3),
    "p_value": ("p", format_p_value),
    "hazard_ratio": ("Hazard ratio", format_ratio),
    "observed_expected": ("Observed/expected", format_ratio),
    "slope": ("Calibration slope", _fixed3),
    "slope_se": ("SE of slope", _sig3),
    "prediction": ("Prediction", str),
    "observed_by": ("Observed risk by", str),
    "observed_risk": ("Observed risk", _fixed4),
    "mean_predicted": ("Mean predicted risk", _fixed4),
    "calibration_intercept": ("Calibration intercept (cloglog)", _fixed3),
    "intercept_se": ("SE of intercept", _sig3),
    "landmark_rows": ("Landmark rows", str),
    "patients": ("Patients", str),
    "ici": ("ICI (risk)", _fixed4),
    "e50": ("E50 (risk)", _fixed4),
    "e90": ("E90 (risk)", _fixed4),
    "auc": ("AUC", _fixed3),
    "horizon": ("Horizon (days)", format_days),
    "horizon_days": ("Horizon (years)", format_days_as_years),
    "horizon_years": ("Horizon (years)", format_years),
    "landmark_years": ("Landmark (years)", format_years),
    "apparent": ("Apparent", None),  # None: formatted by the row's measure
    "corrected": ("Optimism-corrected", None),
    "validated": ("Validated", None),
    "out_of_bag": ("Out-of-bag", None),
    "dot632_plus": (".632+", None),
    "obtained_by": ("Obtained by", str),
    "n_boot": ("Bootstrap resamples", format_count),
    "bootstrap_resamples": ("Bootstrap resamples", format_count),
    "better_if": ("Better if", str),
    "n_patients": ("Patients", format_count),
    "n_excluded": ("Excluded", format_count),
    "at_risk": ("At risk", format_count),
    "competing_events": ("Competing events", format_count),
    "rows_remaining": ("Rows remaining", format_count),
    "rows_excluded": ("Rows excluded", format_count),
}


@dataclass(frozen=True)
class IntervalColumns:
    """Three columns shown as one ``"estimate (low–high)"`` column under ``header``."""

    estimate: str
    low: str
    high: str
    header: str
    #: The columns hold a difference of the measure (shown with three decimals even for a ratio).
    difference: bool = False


INTERVALS: tuple[IntervalColumns, ...] = (
    IntervalColumns("hazard_ratio", "hr_lower_95", "hr_upper_95", "Hazard ratio (95% CI)"),
    IntervalColumns("observed_expected", "oe_lower", "oe_upper", "Observed/expected (95% CI)"),
    IntervalColumns("estimate", "lower", "upper", "Estimate (95% bootstrap interval)"),
    IntervalColumns("optimism", "optimism_low", "optimism_high", "Optimism (95% bootstrap interval)", difference=True),
)

_ROW_KEYS = ("metric", "quantity")


def _named_intervals(table: pd.DataFrame, taken: set[str]) -> dict[str, IntervalColumns]:
    """Interval triples named by the estimate's column: ``<name>``, ``<name>_low``, ``<name>_high``.

    The header is the estimate's own (a model name, say) with "(95% interval)"; a column named
    ``"<a> minus <b>"`` holds a difference (see :attr:`IntervalColumns.difference`).
    """
    columns = set(table.columns)
    found = {}
    for column in table.columns:
        name = str(column)
        if name not in taken and {f"{name}_low", f"{name}_high"} <= columns:
            found[name] = IntervalColumns(
                name,
                f"{name}_low",
                f"{name}_high",
                f"{_column_role(name)[0]} (95% interval)",
                difference=" minus " in name,
            )
    return found


def human_name(name: str) -> str:
    """A column or term name for reading: ``"age_at_entry:s2"`` → ``"Age at entry × (s/S)²"``.

    ``:s`` / ``:s2`` are the landmark-time interactions of :mod:`riskbench.models.landmark` (landmark time
    ``s`` over the last landmark ``S``).
    """
    base, _, power = name.partition(":")
    text = base.replace("_", " ").strip()
    text = text[:1].upper() + text[1:]
    if power == "s":
        text += " × (s/S)"
    elif power.startswith("s") and power[1:].isdigit():
        text += " × (s/S)" + "".join("⁰¹²³⁴⁵⁶⁷⁸⁹"[int(d)] for d in power[1:])
    elif power:
        text += ":" + power
    return text


def _column_role(name: str) -> tuple[str, Formatter | None]:
    if name in COLUMNS:
        return COLUMNS[name]
    if name in MEASURES:
        return MEASURES[name]
    if name in _COUNT_COLUMNS or name.startswith("n_") or name.endswith(("_count", "_n")):
        return human_name(name), format_count
    if name.endswith("_years"):
        return human_name(name[: -len("_years")]) + " (years)", format_years
    if name.endswith("_days"):
        return human_name(name[: -len("_days")]) + " (days)", format_days
    return human_name(name), None


def _cell(cell: object, fmt: Formatter | None) -> str:
    if not isinstance(cell, str):
        cell = "" if cell is None or (isinstance(cell, float) and math.isnan(cell)) else str(cell)
    value = _parse(cell)
    if value is None:
        return tidy_interval_text(cell)
    if math.isnan(value):
        return ""
    if fmt is None:  # a number in a column of unknown meaning: three significant digits
        return format_count(value) if value.is_integer() else format_significant(value, 3)
    return fmt(value)


def _label(cell: str) -> str:
    if cell in MEASURES:
        return MEASURES[cell][0]
    # only identifiers are rewritten; prose labels ("Patients, n") stay as written
    head, sep, rest = cell.partition(", ")
    return human_name(head) + sep + rest if "_" in head or ":" in head or " " not in head else cell


def display_table(table: pd.DataFrame) -> pd.DataFrame:
    """The report view of a table read as text: rounded cells, merged intervals, readable headers.

    Parameters
    ----------
    table
        A report table as stored in ``tables/*.csv`` (cells as strings, ``""`` for missing).

    Returns
    -------
    pandas.DataFrame
        The same rows, every cell a display string; interval triples (see :data:`INTERVALS`) merged into
        one column. Values in a ``metric`` / ``quantity`` row are formatted by that measure (see
        :data:`MEASURES`); labels (model, term, metric names) are made readable.
    """
    # columns with no value at all (e.g. a threshold that applies to no row) only take space
    if len(table):
        table = table.loc[:, [c for c in table.columns if (table[c].astype(str).str.strip() != "").any()]]
    row_key = next((k for k in _ROW_KEYS if k in table.columns), None)
    merged: dict[str, IntervalColumns] = {}
    for group in INTERVALS:
        if {group.estimate, group.low, group.high} <= set(table.columns):
            merged[group.estimate] = group
    label_columns = {"model", "term", "cause", "metric", "quantity", "table", "state", "model_name", "characteristic"}
    merged.update(_named_intervals(table, set(merged) | label_columns))
    skip = {c for g in merged.values() for c in (g.low, g.high)}

    out: dict[str, list[str]] = {}
    for column in table.columns:
        if column in skip:
            continue
        header, fmt = _column_role(column)
        if column in label_columns:
            header = human_name(column)
            out[header] = [_label(str(c)) for c in table[column]]
            continue
        rows = []
        for i in range(len(table)):
            row_fmt = fmt
            if row_key is not None and (fmt is None or column in merged):
                measure = str(table[row_key].iloc[i])
                row_fmt = MEASURES[measure][1] if measure in MEASURES else fmt
                if column in merged and merged[column].difference and row_fmt is format_ratio:
                    row_fmt = _fixed3
            if column in merged:
                g = merged[column]
                values = [_parse(table[c].iloc[i]) for c in (g.estimate, g.low, g.high)]
                if values[0] is None:
                    rows.append(_cell(table[column].iloc[i], row_fmt))
                else:
                    estimate, low, high = (math.nan if v is None else v for v in values)
                    rows.append(format_interval(estimate, low, high, fmt=row_fmt or _sig3))
            else:
                rows.append(_cell(table[column].iloc[i], row_fmt))
        out[merged[column].header if column in merged else header] = rows
    return pd.DataFrame(out, index=table.index)
