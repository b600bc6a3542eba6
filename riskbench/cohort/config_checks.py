"""Checks for configuration mappings (TOML sections): unknown keys and wrong types get a clear message."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from riskbench.cohort.errors import SpecError

DAYS_PER_MONTH = 365.25 / 12


def check_keys(mapping: Any, allowed: Mapping[str, str], where: str) -> Mapping[str, Any]:
    """Return ``mapping`` after checking it is a table whose keys are all in ``allowed``.

    ``allowed`` maps each key to a short description used in the error message.
    """
    if not isinstance(mapping, Mapping):
        raise SpecError(f"[{where}] must be a table (key = value pairs), got {mapping!r}")
    unknown = [k for k in mapping if k not in allowed]
    if unknown:
        listing = "; ".join(f"{k} ({d})" for k, d in allowed.items())
        raise SpecError(f"[{where}] has unknown key {unknown[0]!r} = {mapping[unknown[0]]!r}; allowed keys: {listing}")
    return mapping


def number(value: Any, key: str, where: str, *, minimum: float | None = None) -> float:
    """A real number (not a bool), optionally at least ``minimum``."""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise SpecError(f"[{where}] {key} = {value!r} is not allowed: expected a number")
    if minimum is not None and value < minimum:
        raise SpecError(f"[{where}] {key} = {value!r} is not allowed: expected a number >= {minimum}")
    return float(value)


def boolean(value: Any, key: str, where: str) -> bool:
    """A TOML boolean."""
    if not isinstance(value, bool):
        raise SpecError(f"[{where}] {key} = {value!r} is not allowed: expected true or false")
    return value


def text(value: Any, key: str, where: str, *, choices: tuple[str, ...] | None = None) -> str:
    """A string, optionally one of ``choices``."""
    if not isinstance(value, str):
        raise SpecError(f"[{where}] {key} = {value!r} is not allowed: expected a string")
    if choices is not None and value not in choices:
        raise SpecError(f"[{where}] {key} = {value!r} is not allowed: expected one of {', '.join(map(repr, choices))}")
    return value


def text_list(value: Any, key: str, where: str) -> tuple[str, ...]:
    """A list of strings."""
    if not isinstance(value, (list, tuple)) or not all(isinstance(v, str) for v in value):
        raise SpecError(f"[{where}] {key} = {value!r} is not allowed: expected a list of strings")
    return tuple(value)


def text_map(value: Any, key: str, where: str) -> dict[str, str]:
    """A table of string to string."""
    if not isinstance(value, Mapping) or not all(isinstance(k, str) and isinstance(v, str) for k, v in value.items()):
        raise SpecError(f"[{where}] {key} = {value!r} is not allowed: expected a table of string = string")
    return dict(value)


def duration_days(mapping: Mapping[str, Any], stem: str, where: str, default: float | None) -> float | None:
    """Read ``<stem>_days`` or ``<stem>_months`` (months of 365.25 / 12 days); at most one may be given."""
    given = [k for k in (f"{stem}_days", f"{stem}_months") if k in mapping]
    if len(given) > 1:
        raise SpecError(f"[{where}] give either {stem}_days or {stem}_months, not both")
    if not given:
        return default
    key = given[0]
    value = number(mapping[key], key, where, minimum=0)
    return value if key.endswith("_days") else value * DAYS_PER_MONTH
