"""One pseudonymised example patient under a joint model: the marker fit and the risk updating over follow-up.

Top panel: the patient's measured marker values, and the joint model's predicted true marker (posterior mean
with a pointwise 95% band) given the measurements up to the last landmark drawn, continued over the prediction
window after it. Bottom panel: the predicted risk of the outcome within the prediction window, asked again
at landmarks every ``step_days`` over the patient's follow-up -- each point uses only the measurements up to
its landmark. Time is in years since entry; the patient is named by a pseudonym, never by an id.
"""

from __future__ import annotations

from collections.abc import Callable

import matplotlib.pyplot as plt
import numpy as np
import pandas as pd

from riskbench.models.joint_family import SharedTrajectoryModel, patient_key
from riskbench.time_units import DAYS_PER_MONTH, DAYS_PER_YEAR

__all__ = ["joint_patient_figure"]


def joint_patient_figure(
    model: SharedTrajectoryModel,
    row: pd.DataFrame,
    end_days: float,
    window_days: float,
    pseudonym: str,
    *,
    step_days: float = 3 * DAYS_PER_MONTH,
    labels: Callable[[str], str] | None = None,
) -> plt.Figure:
    """Draw the marker fit and the updated risk of one patient.

    Parameters
    ----------
    model : SharedTrajectoryModel
        Fitted on data holding this patient's measurements.
    row : DataFrame
        One row with the patient's ``patient_id`` and the model's baseline covariates.
    end_days : float
        End of the patient's follow-up (days since entry); landmarks are drawn before it.
    window_days : float
        Prediction window w (days).
    pseudonym : str
        The name shown (e.g. ``"Patient A"``); drawn as plain text.
    step_days : float
        Spacing of the landmarks at which the risk is asked again (days).
    labels : callable, optional
        Readable label of a column (the marker's axis title).
    """
    joint = model.model_
    marker = joint.marker
    key = patient_key(row["patient_id"])[0]
    history = model.history_[model.history_["patient_id"] == key]
    landmarks = np.arange(0.0, max(end_days, 1.0), step_days)
    rows = pd.concat([row.iloc[[0]]] * len(landmarks), ignore_index=True).assign(patient_id=key, landmark=landmarks)
    risk = joint.predict_risk(rows, window_days, measurements=model.history_)
    last = rows.iloc[[-1]]
    grid = np.linspace(0.0, landmarks[-1] + window_days, 60)
    trajectory = joint.marker_trajectory(last, grid)

    fig, (top, bottom) = plt.subplots(2, 1, figsize=(6.4, 5.6), sharex=True)
    years = trajectory["time_days"].to_numpy() / DAYS_PER_YEAR
    top.fill_between(
        years,
        trajectory["marker_lower"],
        trajectory["marker_upper"],
        color="#9ecae1",
        alpha=0.6,
        label="predicted true value, 95% band",
    )
    top.plot(years, trajectory["marker_mean"], color="#08519c", label="predicted true value")
    seen = history[history["time"] <= landmarks[-1]]
    top.plot(
        seen["time"] / DAYS_PER_YEAR,
        seen[marker],
        "o",
        color="#252525",
        markersize=4,
        label="measured (up to the last landmark)",
    )
    top.axvline(landmarks[-1] / DAYS_PER_YEAR, color="#777777", linestyle="--", linewidth=1)
    top.set_ylabel(labels(marker) if labels else marker)
    top.set_title(f"{pseudonym}: marker fit and risk updated over follow-up", fontsize=10)
    top.legend(fontsize=8, loc="best")
    bottom.plot(landmarks / DAYS_PER_YEAR, risk, "o-", color="#b2182b", markersize=3)
    bottom.set_ylim(0, max(0.05, float(risk.max()) * 1.15))
    bottom.set_ylabel(f"risk within {window_days / DAYS_PER_YEAR:g} years")
    bottom.set_xlabel("years since entry (landmark)")
    fig.tight_layout()
    return fig
