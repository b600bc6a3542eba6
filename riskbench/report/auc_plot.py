"""Time-dependent AUC curves: discrimination at each horizon, one line per model, with a pointwise band."""

from __future__ import annotations

import matplotlib.pyplot as plt
import pandas as pd

from riskbench.time_units import DAYS_PER_YEAR


def auc_curve_figure(auc_table: pd.DataFrame, *, band_label: str = "") -> plt.Figure:
    """Plot cumulative/dynamic AUC against the horizon for every model.

    Parameters
    ----------
    auc_table
        Columns ``model``, ``horizon`` (days) and ``auc``; optional ``auc_lower``/``auc_upper`` (a pointwise
        band, drawn shaded in the model's colour).
    band_label
        What the band is (e.g. ``"pointwise 95% band from 200 patient-level bootstrap resamples"``), written
        under the axis; empty: nothing written.
    """
    missing = {"model", "horizon", "auc"} - set(auc_table.columns)
    if missing:
        raise ValueError(f"auc_curve_figure: table lacks column(s) {sorted(missing)}")
    fig, ax = plt.subplots(figsize=(6.4, 4.0))
    banded = {"auc_lower", "auc_upper"} <= set(auc_table.columns)
    lowest = 0.5
    for model, rows in auc_table.groupby("model", sort=False):
        rows = rows.sort_values("horizon")
        years = rows["horizon"] / DAYS_PER_YEAR
        (line,) = ax.plot(years, rows["auc"], marker="o", markersize=3, label=str(model))
        if banded and rows[["auc_lower", "auc_upper"]].notna().any().all():
            ax.fill_between(
                years, rows["auc_lower"], rows["auc_upper"], color=line.get_color(), alpha=0.18, linewidth=0
            )
            lowest = min(lowest, float(rows["auc_lower"].min()))
        lowest = min(lowest, float(rows["auc"].min()))
    ax.axhline(0.5, color="grey", linestyle=":", linewidth=1, label="no discrimination")
    ax.set_xlabel("horizon after the landmark (years)" + (f"\nshaded: {band_label}" if band_label else ""))
    ax.set_ylabel("time-dependent AUC")
    ax.set_ylim(max(0.0, min(0.45, lowest - 0.05)), 1.0)
    ax.legend(frameon=False, fontsize=8, loc="upper left", bbox_to_anchor=(1.01, 1.0))  # off the data
    ax.grid(alpha=0.3)
    fig.tight_layout()
    return fig
