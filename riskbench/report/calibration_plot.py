"""Calibration figure at one horizon: the smoothed observed-vs-predicted curve with its band, quantile groups
with 95% intervals, the ideal diagonal and the distribution of predicted risks beneath.

The axes span the bulk of the predictions (up to a little above their 99th percentile), so that the points do
not sit in one corner; how many rows lie beyond is written under the figure. The legend and the measures sit
in a panel beside the plot, never on the data. The subtitle says what the predictions estimate and what they
are compared with (cumulative incidence against Aalen–Johansen, or a cause-specific 1 − S against
1 − Kaplan–Meier with competing events censored), so the diagonal is the ideal for that comparison.
"""

from __future__ import annotations

import matplotlib

matplotlib.use("Agg", force=False)
import matplotlib.pyplot as plt
import numpy as np

from riskbench.metrics.calibration import Calibration
from riskbench.report.suppression import format_count
from riskbench.time_units import format_duration

#: What the figure says each target is compared with.
_COMPARISON = {
    "cumulative_incidence": "predicted cumulative incidence vs observed (Aalen–Johansen, competing events kept)",
    "cause_specific": "predicted cause-specific 1 − S vs observed 1 − Kaplan–Meier (competing events censored)",
}

#: Share of the predictions inside the axes (the rest are counted in the note below the figure).
AXIS_QUANTILE = 0.99


def plain_text(text: str) -> str:
    """A user-supplied string for a matplotlib label: no mathtext (``$``), one line, at most 60 characters."""
    one_line = " ".join(str(text).split())
    return one_line[:60].replace("$", r"\$")


def axis_top(risk: np.ndarray) -> float:
    """Upper end of both axes: 10% above the 99th percentile of the predicted risks, at least 0.02, at most 1."""
    return float(min(1.0, max(np.quantile(risk, AXIS_QUANTILE) * 1.1, 0.02)))


def calibration_figure(
    calibration: Calibration,
    risk: np.ndarray,
    *,
    model_name: str = "model",
    min_group_size: int = 10,
    row_unit: str = "landmark rows",
    horizon_days: float | None = None,
) -> plt.Figure:
    """Draw observed against predicted risk at the horizon of ``calibration``.

    Parameters
    ----------
    calibration
        Result of :func:`riskbench.metrics.calibration_at_horizon` for these risks.
    risk
        The predicted risks that were assessed (for the histogram beneath and the axis range).
    model_name
        Shown in the title (user text: shown as plain text).
    min_group_size
        Small-count threshold: groups and histogram bars with fewer rows are not drawn, and a count of rows
        beyond the axes below it is shown as "<threshold".
    row_unit
        What one element of ``risk`` is ("landmark rows", "patients"): the histogram's axis label.
    horizon_days
        The horizon to print (days); default ``calibration.horizon``.

    Returns
    -------
    matplotlib.figure.Figure
    """
    risk = np.asarray(risk, dtype=float)
    top = axis_top(risk)
    fig = plt.figure(figsize=(8.0, 6.0))
    grid = fig.add_gridspec(
        2,
        2,
        width_ratios=[3, 1.35],
        height_ratios=[4, 1],
        hspace=0.06,
        wspace=0.05,
        left=0.1,
        right=0.98,
        top=0.87,
        bottom=0.15,
    )
    ax = fig.add_subplot(grid[0, 0])
    hist_ax = fig.add_subplot(grid[1, 0], sharex=ax)
    side = fig.add_subplot(grid[:, 1])
    side.axis("off")

    curve = calibration.curve
    inside = curve[curve["predicted"] <= top]
    y_values = [top]
    if len(inside):
        if inside["observed_lower"].notna().all():
            ax.fill_between(
                inside["predicted"],
                inside["observed_lower"],
                inside["observed_upper"],
                color="C0",
                alpha=0.2,
                linewidth=0,
                label="95% band (bootstrap\nover patients)",
            )
            y_values.append(float(inside["observed_upper"].max()))
        ax.plot(
            inside["predicted"],
            inside["observed"],
            color="C0",
            label="smoothed: pseudo-\nobservations on a spline\nof cloglog predicted risk",
        )
        y_values.append(float(inside["observed"].max()))
    groups = calibration.groups[(calibration.groups["n"] >= min_group_size) & (calibration.groups["predicted"] <= top)]
    if len(groups):
        err = np.vstack([groups["observed"] - groups["observed_lower"], groups["observed_upper"] - groups["observed"]])
        ax.errorbar(
            groups["predicted"],
            groups["observed"],
            yerr=np.nan_to_num(np.abs(err)),
            fmt="o",
            color="C1",
            markersize=4,
            capsize=2,
            label="quantile groups of\npredicted risk\n(observed, 95% CI)",
        )
        y_values.append(float(np.nanmax(groups["observed_upper"].to_numpy(), initial=0.0)))
    y_top = float(min(1.0, max(y_values) * 1.05))
    ax.plot([0, top], [0, top], color="grey", linestyle=":", linewidth=1, label="ideal: observed =\npredicted")
    ax.set_xlim(0, top)
    ax.set_ylim(0, y_top)
    ax.set_ylabel("observed risk")
    ax.grid(alpha=0.3)
    ax.tick_params(labelbottom=False)

    counts, edges = np.histogram(risk[risk <= top], bins=30, range=(0, top))
    shown = np.where(counts >= max(min_group_size, 1), counts, 0)
    hist_ax.bar(edges[:-1], shown, width=np.diff(edges), align="edge", color="grey")
    hist_ax.set_xlabel(f"predicted risk by {format_duration(round(_horizon(calibration, horizon_days), 3))}")
    hist_ax.set_ylabel(row_unit)

    horizon_text = format_duration(round(_horizon(calibration, horizon_days), 3))
    fig.suptitle(f"Calibration of {plain_text(model_name)} at {horizon_text}", x=0.1, ha="left", fontsize=12)
    fig.text(0.1, 0.905, _COMPARISON[calibration.target], fontsize=8, ha="left")
    handles, labels = ax.get_legend_handles_labels()
    side.legend(handles, labels, loc="upper left", frameon=False, fontsize=7.5)
    side.text(
        0.02, 0.42, _measures_text(calibration), transform=side.transAxes, va="top", fontsize=8, family="monospace"
    )
    fig.text(0.1, 0.02, _beyond_text(risk, top, min_group_size, row_unit, counts, shown), fontsize=7.5, ha="left")
    return fig


def _horizon(calibration: Calibration, horizon_days: float | None) -> float:
    return float(calibration.horizon if horizon_days is None else horizon_days)


def _measures_text(cal: Calibration) -> str:
    """The calibration measures, each from the same :class:`Calibration` as the summary table."""
    lines = [
        f"O/E        {cal.oe_ratio:.2f} ({cal.oe_lower:.2f}–{cal.oe_upper:.2f})",
        f"intercept  {cal.intercept:.2f} (SE {cal.intercept_se:.2f})",
        f"slope      {cal.slope:.2f} (SE {cal.slope_se:.2f})",
        f"ICI        {cal.ici:.3f}",
        f"E50        {cal.e50:.3f}",
        f"E90        {cal.e90:.3f}",
    ]
    return "\n".join(lines)


def _beyond_text(
    risk: np.ndarray, top: float, threshold: int, row_unit: str, counts: np.ndarray, shown: np.ndarray
) -> str:
    """Note under the figure: rows beyond the axes and histogram bars hidden as small counts."""
    beyond = int((risk > top).sum())
    parts = [
        f"Axes end at predicted risk {top:.2f} (10% above the 99th percentile); "
        f"{format_count(beyond, threshold)} {row_unit} with higher predicted risk are not drawn."
    ]
    if (shown != counts).any():
        parts.append(f"Histogram bars with fewer than {threshold} {row_unit} are not drawn.")
    return "\n".join(parts)
