"""Decision curve: net benefit of acting on the model against treating everyone and treating no one, with
bands when the table carries them."""

from __future__ import annotations

from typing import Any

import matplotlib

matplotlib.use("Agg", force=False)
import matplotlib.pyplot as plt
import pandas as pd

from riskbench.time_units import format_duration


def decision_curve_figure(
    table: pd.DataFrame, *, horizon_days: float | None = None, model_name: str = "model", band_label: str = ""
) -> plt.Figure:
    """Plot net benefit against the threshold probability.

    Parameters
    ----------
    table
        Output of :func:`riskbench.metrics.net_benefit` (``threshold, model, treat_all, treat_none``);
        an optional ``model_name`` column draws one line per model; optional ``model_lower``/``model_upper``
        and ``treat_all_lower``/``treat_all_upper`` are drawn as shaded bands.
    horizon_days
        Shown in the title (as a duration).
    model_name
        Label when the table has no ``model_name`` column.
    band_label
        What the bands are, written under the axis (empty: nothing written).

    Returns
    -------
    matplotlib.figure.Figure
    """
    missing = {"threshold", "model", "treat_all", "treat_none"} - set(table.columns)
    if missing:
        raise ValueError(f"decision_curve_figure: table lacks column(s) {sorted(missing)}; pass net_benefit's output")
    fig, ax = plt.subplots(figsize=(6.6, 4.2))
    groups = table.groupby("model_name", sort=False) if "model_name" in table.columns else [(model_name, table)]
    first = None
    for name, rows in groups:
        rows = rows.sort_values("threshold")
        first = rows if first is None else first
        (line,) = ax.plot(rows["threshold"], rows["model"], linewidth=2, label=str(name))
        _band(ax, rows, "model", line.get_color())
    if first is None:
        raise ValueError("decision_curve_figure: the table has no rows; pass net_benefit's output")
    ax.plot(first["threshold"], first["treat_all"], color="grey", linewidth=1, label="treat all")
    _band(ax, first, "treat_all", "grey")
    ax.plot(first["threshold"], first["treat_none"], color="black", linewidth=1, linestyle="--", label="treat none")
    best = max(float(table["model"].max()), float(table["treat_all"].max()), 0.01)
    ax.set_ylim(-0.1 * best, best * 1.15)
    ax.set_xlim(float(table["threshold"].min()), float(table["threshold"].max()))
    ax.set_xlabel("threshold probability" + (f"\nshaded: {band_label}" if band_label else ""))
    ax.set_ylabel("net benefit")
    title = "Decision curve"
    if horizon_days is not None:
        title += f": outcome within {format_duration(round(float(horizon_days), 3))} of the landmark"
    ax.set_title(title, fontsize=10)
    ax.legend(frameon=False, fontsize=8, loc="upper left", bbox_to_anchor=(1.01, 1.0))  # off the data
    ax.grid(alpha=0.3)
    fig.tight_layout()
    return fig


def _band(ax: plt.Axes, rows: pd.DataFrame, column: str, color: Any) -> None:
    low, high = f"{column}_lower", f"{column}_upper"
    if {low, high} <= set(rows.columns) and rows[[low, high]].notna().any().all():
        ax.fill_between(rows["threshold"], rows[low], rows[high], color=color, alpha=0.15, linewidth=0)
