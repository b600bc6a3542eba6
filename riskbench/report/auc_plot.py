"""Time-dependent AUC curves: discrimination at each horizon, one line per model."""

from __future__ import annotations

import matplotlib.pyplot as plt
import pandas as pd

DAYS_PER_YEAR = 365.25


def auc_curve_figure(auc_table: pd.DataFrame) -> plt.Figure:
    """Plot cumulative/dynamic AUC against the horizon for every model.

    Parameters
    ----------
    auc_table
        Columns ``model``, ``horizon`` (days) and ``auc``; optional ``auc_lower``/``auc_upper``.
    """
    missing = {"model", "horizon", "auc"} - set(auc_table.columns)
    if missing:
        raise ValueError(f"auc_curve_figure: table lacks column(s) {sorted(missing)}")
    fig, ax = plt.subplots(figsize=(6, 3.8))
    for model, rows in auc_table.groupby("model", sort=False):
        rows = rows.sort_values("horizon")
        years = rows["horizon"] / DAYS_PER_YEAR
        ax.plot(years, rows["auc"], marker="o", markersize=3, label=str(model))
        if {"auc_lower", "auc_upper"} <= set(rows.columns):
            ax.fill_between(years, rows["auc_lower"], rows["auc_upper"], alpha=0.15)
    ax.axhline(0.5, color="grey", linestyle=":", linewidth=1, label="no discrimination")
    ax.set_xlabel("horizon after the landmark (years)")
    ax.set_ylabel("time-dependent AUC")
    ax.set_ylim(0.4, 1.0)
    ax.legend(frameon=False, fontsize=8)
    ax.grid(alpha=0.3)
    fig.tight_layout()
    return fig
