"""Value types shared by the configuration schemas (pydantic v2): names, durations, finite numbers.

Every table of the configuration is a :class:`ConfigTable`: unknown keys are forbidden, values are not
coerced (``"5"`` is not an integer, ``1`` is not ``true``) and ``nan``/``inf`` are refused.
"""

from __future__ import annotations

from typing import Annotated, Any

from pydantic import AfterValidator, BaseModel, BeforeValidator, ConfigDict

from riskbench.cohort.spec import NAME_PATTERN  # the one definition of a safe name
from riskbench.time_units import DurationError, format_duration, parse_duration

#: Names of variables, statics, levels and models: file names and columns derive from them.
NAME_RULE = (
    "a name of letters, digits and underscores that starts with a letter, at most 40 characters "
    "(^[A-Za-z][A-Za-z0-9_]{0,39}$)"
)
#: Free text (labels, titles) is shown escaped; this only bounds its length.
MAX_TEXT = 300


class ConfigTable(BaseModel):
    """Base of every configuration table: forbidden extras, strict types, finite numbers."""

    model_config = ConfigDict(extra="forbid", strict=True, allow_inf_nan=False, frozen=True)


def is_name(value: object) -> bool:
    """True when ``value`` is a safe name (:data:`NAME_PATTERN`)."""
    return isinstance(value, str) and NAME_PATTERN.fullmatch(value) is not None


def _check_name(value: str) -> str:
    if not is_name(value):
        raise ValueError(f"expected {NAME_RULE}")
    return value


def _check_text(value: str) -> str:
    if not value.strip() or len(value) > MAX_TEXT:
        raise ValueError(f"expected non-empty text of at most {MAX_TEXT} characters")
    if any(ord(c) < 32 for c in value):
        raise ValueError("expected text without control characters (tabs, line breaks)")
    return value


def _to_days(value: object) -> float:
    try:
        return parse_duration(value)  # type: ignore[arg-type]
    except DurationError:
        raise ValueError(
            'expected a duration with a unit in quotes, e.g. "180 days", "6 months" or "2 years"'
        ) from None


def _positive(days: float) -> float:
    if days <= 0:
        raise ValueError('expected a duration longer than zero, e.g. "6 months"')
    return days


Name = Annotated[str, AfterValidator(_check_name)]
Text = Annotated[str, AfterValidator(_check_text)]
#: A duration text (``"6 months"``) read as days (>= 0).
Duration = Annotated[float, BeforeValidator(_to_days)]
#: A duration text read as days (> 0).
PositiveDuration = Annotated[float, BeforeValidator(_to_days), AfterValidator(_positive)]


def readable_duration(value: Any) -> Any:
    """A duration text (or a list of them) in its shortest unit (``"0.5 years"`` -> ``"6 months"``)."""
    if isinstance(value, list):
        return [readable_duration(v) for v in value]
    try:
        return format_duration(parse_duration(value))
    except DurationError:
        return value
