"""The words of the comparison stage: file labels of horizons, its notes, and the report it writes.

The numbers come from :mod:`riskbench.validation.comparison_statistics`; the figures from
:mod:`riskbench.workflow.stage_calibration` and :mod:`riskbench.workflow.landmark_report`; this module
says what could not be computed and why, and assembles ``report.html`` (which formats the numeric tables).
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np

from riskbench import __version__
from riskbench.metrics.triage import TargetUnreachable
from riskbench.report.html_report import build_report
from riskbench.report.notes import Note
from riskbench.time_units import DAYS_PER_YEAR, format_duration
from riskbench.validation.parallel import execution_statement
from riskbench.workflow.config import AnalysisConfig
from riskbench.workflow.fit_diagnosis import hide_small_numbers
from riskbench.workflow.stage_models import FIT_ERRORS


def years_label(days: float) -> str:
    """``"2y"`` / ``"0_5y"``: a horizon in days as a short file-name label in years (letters, digits, ``_``)."""
    return f"{days / DAYS_PER_YEAR:g}y".replace(".", "_")


class StageNotes:
    """The comparison stage's notes, and a way to attempt one part for one model without stopping the run."""

    def __init__(self, threshold: int) -> None:
        self.notes: list[Note] = []
        self.threshold = threshold  # small numbers quoted from a library's message are hidden below it

    def add(self, part: str, text: str, model: str = "", kind: str = "not computed") -> None:
        """Record one note of the comparison stage."""
        self.notes.append(Note("comparison", part, text, model=model, kind=kind))

    def attempt(self, part: str, model: str, compute: Callable[..., Any], *args: Any, **kwargs: Any) -> Any:
        """``compute(*args, **kwargs)``, or None with a note when it fails with a data or numerical error."""
        try:
            return compute(*args, **kwargs)
        except TargetUnreachable as exc:
            reach = (
                f"the best threshold reaches {exc.best:.3f}"
                if np.isfinite(exc.best)
                else "no threshold leaves any patient below it"
            )
            self.add(
                part,
                f"not computed: no risk threshold of this model reaches {exc.what} by "
                f"{format_duration(round(float(exc.horizon), 3))} after the landmark ({reach}); lower the target "
                "([report] triage_target_npv) or switch the part off ([report] triage = false).",
                model,
            )
        except FIT_ERRORS as exc:
            self.add(part, f"not computed: {type(exc).__name__}: {hide_small_numbers(str(exc), self.threshold)}", model)
        return None


def report_facts(config: AnalysisConfig) -> list[tuple[str, str]]:
    """The facts shown under the report's title: version, configuration file, seeds, landmarks, window."""
    return [
        ("riskbench", __version__),
        ("configuration", config.path.name if config.path else "(in memory)"),
        ("seed", str(config.seed)),
        ("validation seed", str(config.validation.seed)),
        ("landmarks", ", ".join(format_duration(s) for s in config.landmarks.landmarks_days)),
        ("prediction window", format_duration(config.landmarks.horizon_days)),
        ("data sent off this machine", execution_statement(config.execution)),
    ]


def write_report(config: AnalysisConfig, run_dir: Path) -> Path:
    """Write the run's ``report.html`` from its tables and figures; return its path."""
    return build_report(
        run_dir, title=config.report.title, threshold=config.report.small_count_threshold, facts=report_facts(config)
    )
