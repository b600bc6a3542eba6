"""Cohort flow diagram: a column of boxes (patients remaining after each step) with the exclusions to the
side, and the included patients split by how follow-up ended along the bottom. Small counts are hidden
(small exclusion steps merged, so no hidden count can be worked out by subtraction)."""

from __future__ import annotations

import textwrap
from typing import Any

import matplotlib.pyplot as plt
import pandas as pd
from matplotlib.patches import FancyBboxPatch

from riskbench.report.flow_suppression import suppress_flow

_BOX: dict[str, Any] = {"facecolor": "#eef3f8", "edgecolor": "#34495e"}
_ARROW = {"arrowstyle": "->", "color": "#34495e"}


def _box(ax, x: float, y: float, w: float, text: str) -> None:
    ax.add_patch(FancyBboxPatch((x - w / 2, y - 0.3), w, 0.6, boxstyle="round,pad=0.05", **_BOX))
    ax.text(x, y, text, ha="center", va="center", fontsize=8.5)


def flow_figure(flow: pd.DataFrame, *, threshold: int = 10) -> plt.Figure:
    """Draw the cohort flow.

    Parameters
    ----------
    flow
        Rows in order with ``step`` (text), ``n_patients`` (patients remaining after the step),
        ``n_excluded`` (patients removed at the step) and ``level``: 0 for the main column, 1 for the
        groups the last main box splits into.
    threshold
        Small counts are hidden with :func:`~riskbench.report.flow_suppression.suppress_flow`, which also
        merges small exclusion steps so that no hidden count follows from its neighbours.
    """
    shown = suppress_flow(flow, threshold)
    main = shown[shown["level"] == 0].reset_index(drop=True)
    split = shown[shown["level"] == 1].reset_index(drop=True)
    n_rows = len(main) + (1 if len(split) else 0)
    fig, ax = plt.subplots(figsize=(8, 1.05 * n_rows + 0.3))
    ax.set_xlim(0, 10)
    ax.set_ylim(-n_rows + 0.4, 0.6)
    ax.axis("off")
    for i, row in main.iterrows():
        y = -float(i)
        _box(ax, 3.2, y, 5.0, f"{textwrap.fill(row['step'], 56)}\nn = {row['n_patients']}")
        if i + 1 < len(main):
            ax.annotate("", xy=(3.2, y - 0.66), xytext=(3.2, y - 0.36), arrowprops=_ARROW)
        if row["n_excluded"] != "0":
            ax.annotate(
                "", xy=(6.6, y + 0.5), xytext=(3.2, y + 0.5), arrowprops={"arrowstyle": "->", "color": "#7f8c8d"}
            )
            ax.text(6.7, y + 0.5, f"excluded: {row['n_excluded']}", ha="left", va="center", fontsize=8, color="#7f3f00")
    if len(split):
        y = -float(len(main))
        width = 9.4 / len(split)
        for j, row in split.iterrows():
            x = 0.3 + width * (j + 0.5)
            _box(ax, x, y, width - 0.3, f"{row['step']}\nn = {row['n_patients']}")
            ax.annotate("", xy=(x, y + 0.36), xytext=(3.2, y + 0.64), arrowprops=_ARROW)
    fig.tight_layout()
    return fig
