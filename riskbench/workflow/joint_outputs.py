"""The models stage's extra outputs for a joint model: its full estimates and one example patient's figure.

The example patient is the first of the example timelines
(:func:`riskbench.report.timelines.choose_example_patients` with the run's seed), so "Patient A" names the same
patient in both figures; no id is drawn.
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path
from typing import Any

import pandas as pd

from riskbench.models.joint_family import SharedTrajectoryModel
from riskbench.report.joint_patient_plot import joint_patient_figure
from riskbench.report.notes import Note
from riskbench.report.outputs import FigureFiles, save_figure
from riskbench.report.timelines import choose_example_patients, pseudonym
from riskbench.workflow.model_effects import PART_ERRORS

__all__ = ["joint_model_outputs"]


def joint_model_outputs(
    config: Any,
    name: str,
    model: Any,
    counting_process: pd.DataFrame,
    run_dir: Path,
    label_of: Callable[[str], str],
) -> tuple[dict[str, pd.DataFrame], dict[str, FigureFiles], list[Note]]:
    """Tables (``joint_estimates_<name>``), figures (``joint_patient_<name>``) and notes of one fitted model.

    Nothing is returned for a model that is not a joint model; a part that cannot be drawn becomes a note.
    """
    if not isinstance(model, SharedTrajectoryModel):
        return {}, {}, []
    tables = {f"joint_estimates_{name}": model.joint_summary()}
    figures: dict[str, FigureFiles] = {}
    notes: list[Note] = []
    if config.report.example_patients > 0:
        try:
            chosen = choose_example_patients(counting_process, 1, config.seed)
            rows = counting_process[counting_process["patient_id"] == chosen[0]].sort_values("start")
            figure = joint_patient_figure(
                model,
                rows.head(1),
                float(rows["stop"].max()),
                config.landmarks.horizon_days,
                pseudonym(0),
                labels=label_of,
            )
            figures[f"joint_patient_{name}"] = save_figure(figure, run_dir, f"joint_patient_{name}")
        except PART_ERRORS as exc:
            notes.append(Note("models", "joint model example patient", f"not drawn: {exc}", model=name))
    return tables, figures, notes
