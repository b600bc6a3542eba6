"""Time units: the one place where days, months and years are converted.

Inside the library every time is a number of days (float) since the patient's entry. The configuration
writes every duration as a text with an explicit unit (``"180 days"``, ``"6 months"``, ``"2 years"``) and
reports speak in months or years. A year is 365.25 days and a month a twelfth of that, so that landmarks
and horizons written in months or years agree with each other exactly.
"""

from __future__ import annotations

import math
import re

from riskbench.errors import RiskbenchError

DAYS_PER_YEAR: float = 365.25
DAYS_PER_MONTH: float = DAYS_PER_YEAR / 12
DAYS_PER_WEEK: float = 7.0

#: Unit words accepted in a duration text and their length in days.
UNIT_DAYS: dict[str, float] = {
    "day": 1.0,
    "days": 1.0,
    "week": DAYS_PER_WEEK,
    "weeks": DAYS_PER_WEEK,
    "month": DAYS_PER_MONTH,
    "months": DAYS_PER_MONTH,
    "year": DAYS_PER_YEAR,
    "years": DAYS_PER_YEAR,
}

_DURATION = re.compile(r"^\s*([0-9]+(?:\.[0-9]*)?|\.[0-9]+)\s*([A-Za-z]+)\s*$")


class DurationError(RiskbenchError):
    """A duration text is not a non-negative number followed by a unit (days, weeks, months, years)."""


def parse_duration(text: str) -> float:
    """Days in a duration written as ``"<number> <unit>"``.

    Parameters
    ----------
    text
        For example ``"180 days"``, ``"6 months"``, ``"2 years"``, ``"0.5 year"``; units are
        day(s), week(s), month(s) (365.25 / 12 days) and year(s) (365.25 days).

    Returns
    -------
    float
        The duration in days.

    Raises
    ------
    DurationError
        If the text has no unit, an unknown unit or a number that is negative or not finite.
    """
    if not isinstance(text, str):
        raise DurationError(f'{text!r} is not a duration; write a number and a unit in quotes, e.g. "6 months"')
    match = _DURATION.match(text)
    if not match:
        raise DurationError(
            f'{text!r} is not a duration; write a non-negative number and a unit, e.g. "180 days", '
            '"6 months" or "2 years"'
        )
    number, unit = float(match.group(1)), match.group(2).lower()
    if unit not in UNIT_DAYS:
        raise DurationError(f"{text!r}: unknown unit {match.group(2)!r}; use days, weeks, months or years")
    days = number * UNIT_DAYS[unit]
    if not math.isfinite(days):
        raise DurationError(f"{text!r} is not a finite duration")
    return days


def days_to_years(days: float) -> float:
    """Years (of 365.25 days) in ``days``."""
    return days / DAYS_PER_YEAR


def days_to_months(days: float) -> float:
    """Months (of 365.25 / 12 days) in ``days``."""
    return days / DAYS_PER_MONTH


def years_to_days(years: float) -> float:
    """Days in ``years`` (of 365.25 days)."""
    return years * DAYS_PER_YEAR


def months_to_days(months: float) -> float:
    """Days in ``months`` (of 365.25 / 12 days)."""
    return months * DAYS_PER_MONTH


def format_duration(days: float) -> str:
    """A duration in days as the shortest exact text in years, months or days (``"2 years"``, ``"6 months"``)."""
    for unit, size in (("year", DAYS_PER_YEAR), ("month", DAYS_PER_MONTH)):
        n = days / size
        if n > 0 and abs(n - round(n, 3)) < 1e-9:
            value = f"{round(n, 3):g}"
            return f"{value} {unit}" + ("" if value == "1" else "s")
    value = f"{days:g}"
    return f"{value} day" + ("" if value == "1" else "s")
