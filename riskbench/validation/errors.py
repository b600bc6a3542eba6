"""The error raised for unusable input to the validation stage."""

from __future__ import annotations


class ValidationInputError(ValueError):
    """Bad input to a validation function; the message names the column or argument and the fix."""
