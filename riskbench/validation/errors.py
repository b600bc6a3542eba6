"""The error raised for unusable input to the validation stage."""

from __future__ import annotations

from riskbench.errors import RiskbenchError


class ValidationInputError(RiskbenchError):
    """Bad input to a validation function; the message names the column or argument and the fix."""
