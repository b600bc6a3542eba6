"""Number and marker text shared by the model sheets (:mod:`riskbench.report.model_sheet`,
:mod:`riskbench.report.joint_sheet`)."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from riskbench.report.markdown_text import md_table, md_text
from riskbench.time_units import DAYS_PER_YEAR

__all__ = ["days_text", "example_patient_table", "full_number", "table_tag"]


def full_number(value: Any) -> str:
    """A float at full precision (``repr``), readable back with ``float``."""
    return repr(float(value))


def days_text(value: float) -> str:
    """A duration in days with its length in years (``730.5 days (2.00 years)``)."""
    return f"{float(value):g} days ({float(value) / DAYS_PER_YEAR:.2f} years)"


def table_tag(what: str) -> str:
    """The HTML comment before a table a program may read back (invisible when the Markdown is rendered)."""
    return f"<!-- table: {what} -->"


def example_patient_table(values: Mapping[str, float], landmark: float, horizon: float) -> list[str]:
    """The tagged table ``example patient`` of a worked example: covariate values, landmark and horizon (days)."""
    rows = [[md_text(c), full_number(v)] for c, v in values.items()]
    rows += [["landmark (days)", full_number(landmark)], ["horizon (days)", full_number(horizon)]]
    return [table_tag("example patient"), *md_table(["covariate", "value"], rows)]
