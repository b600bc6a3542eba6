"""Errors of the cohort stage meant for users (they name the file, column, rows and the fix)."""

from __future__ import annotations

from riskbench.errors import RiskbenchError


class CohortInputError(RiskbenchError):
    """The source tables break the input contract (missing column, duplicate ids, ...)."""


class SpecError(RiskbenchError):
    """The cohort or source configuration has an unknown key or a value of the wrong kind."""
