"""Kaplan–Meier or Aalen–Johansen curves by group with their pointwise bands and the number at risk beneath.

The upper panel draws each group's step curve (survival, or cumulative incidence) with its confidence band; the
lower panel is the at-risk table: one row per group, one column per chosen time, aligned with the time axis.
Numbers at risk are counts of the same people at consecutive times, so they pass through
:func:`riskbench.report.suppression.coarsen_sequence` (small counts hidden, and every count of a row rounded when
a difference between neighbours would reveal a few people). Group labels are user text: they are shown as plain
text (no mathtext), on one line, shortened.
"""

from __future__ import annotations

from collections.abc import Sequence

import matplotlib

matplotlib.use("Agg", force=False)
import matplotlib.pyplot as plt
import numpy as np
from matplotlib.figure import Figure

from riskbench.metrics.survival_curves import CurveEstimate
from riskbench.report.calibration_plot import plain_text
from riskbench.report.suppression import coarsen_sequence

__all__ = ["CAUTION", "survival_curve_figure"]

CAUTION = "Research software, not a medical device; not for clinical decisions without proper validation."

_Y_LABEL = {"survival": "Survival probability (Kaplan–Meier)", "cumulative_incidence": "Cumulative incidence"}


def _default_times(estimate: CurveEstimate, n: int = 6) -> np.ndarray:
    top = float(estimate.table["time"].max())
    return np.unique(np.round(np.linspace(0.0, top, n), 6))


def survival_curve_figure(
    estimate: CurveEstimate,
    *,
    at_risk_times: Sequence[float] | None = None,
    time_label: str = "Days",
    title: str | None = None,
    show_band: bool = True,
    threshold: int = 10,
) -> Figure:
    """Step curves with bands and an at-risk table beneath; returns the matplotlib figure.

    Parameters
    ----------
    estimate : from :func:`riskbench.metrics.kaplan_meier_estimate` or
        :func:`riskbench.metrics.aalen_johansen_estimate`.
    at_risk_times : times (unit of the estimate) at which the number at risk is shown; default six evenly
        spaced times from 0 to the last follow-up.
    time_label : label of the time axis (say the unit).
    title : optional title (user text, shown as plain text).
    show_band : draw the pointwise confidence band.
    threshold : smallest count shown as it is (see :func:`riskbench.report.suppression.coarsen_sequence`);
        1 shows every count.
    """
    times = _default_times(estimate) if at_risk_times is None else np.asarray(at_risk_times, dtype=float)
    start = 1.0 if estimate.kind == "survival" else 0.0
    n_groups = len(estimate.groups)
    fig, (ax, table_ax) = plt.subplots(
        2,
        1,
        figsize=(7.5, 5.0 + 0.3 * n_groups),
        sharex=True,
        gridspec_kw={"height_ratios": [4.0, 0.6 + 0.35 * n_groups], "hspace": 0.25},
    )
    labels = [plain_text(str(g)) for g in estimate.groups]
    for g, label in zip(estimate.groups, labels):
        rows = estimate.table[estimate.table["group"] == g]
        t = np.r_[0.0, rows["time"].to_numpy(float)]
        (line,) = ax.step(t, np.r_[start, rows["estimate"].to_numpy(float)], where="post", label=label)
        if show_band:
            ax.fill_between(
                t,
                np.r_[start, rows["lower"].to_numpy(float)],
                np.r_[start, rows["upper"].to_numpy(float)],
                step="post",
                alpha=0.2,
                color=line.get_color(),
                linewidth=0,
            )
    ax.set_ylim(-0.02, 1.02)
    ax.set_ylabel(_Y_LABEL[estimate.kind])
    band = f"{100 * estimate.level:g}% pointwise band, {estimate.ci_scale} scale" if show_band else "no band drawn"
    ax.set_title(plain_text(title) if title else band, fontsize=10)
    if n_groups > 1 or estimate.groups[0] != "all":
        ax.legend(loc="best", fontsize=8, frameon=False)
    at_risk = estimate.at_risk(times)
    table_ax.set_ylim(-0.5, n_groups - 0.5)
    table_ax.set_yticks(range(n_groups))
    table_ax.set_yticklabels(labels[::-1], fontsize=8)
    for row, g in enumerate(estimate.groups):
        shown = coarsen_sequence(at_risk.loc[g].to_numpy(float), threshold)
        for x, text in zip(times, shown):
            table_ax.text(x, n_groups - 1 - row, text, ha="center", va="center", fontsize=8)
    table_ax.tick_params(axis="y", length=0, pad=22)
    for side in ("top", "right", "left"):
        table_ax.spines[side].set_visible(False)
    table_ax.set_xticks(times)
    table_ax.set_xlabel(plain_text(time_label))
    table_ax.set_title("Number at risk", fontsize=8, loc="left")
    span = float(times.max()) if times.size else 1.0
    ax.set_xlim(-0.02 * span, span * 1.04)
    fig.subplots_adjust(left=0.2, bottom=0.12)
    fig.text(0.01, 0.005, CAUTION, fontsize=6, color="0.4")
    return fig
