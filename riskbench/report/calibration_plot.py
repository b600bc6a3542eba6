"""Calibration figure at one horizon: smoothed observed-vs-predicted curve with its band, grouped points
with 95% intervals, the ideal diagonal, and the distribution of predicted risks beneath."""

from __future__ import annotations

import matplotlib

matplotlib.use("Agg", force=False)
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from riskbench.metrics.calibration import Calibration  # noqa: E402

DAYS_PER_YEAR = 365.25


def calibration_figure(
    calibration: Calibration,
    risk: np.ndarray,
    *,
    model_name: str = "model",
    min_group_size: int = 10,
) -> plt.Figure:
    """Draw observed against predicted risk at the horizon of ``calibration``.

    Parameters
    ----------
    calibration
        Result of :func:`riskbench.metrics.calibration_at_horizon`.
    risk
        The predicted risks that were assessed (for the histogram beneath).
    model_name
        Shown in the title.
    min_group_size
        Groups with fewer subjects are not drawn (small-count suppression).

    Returns
    -------
    matplotlib.figure.Figure
    """
    risk = np.asarray(risk, dtype=float)
    fig, (ax, hist_ax) = plt.subplots(
        2, 1, figsize=(5.5, 6.0), sharex=True, gridspec_kw={"height_ratios": [4, 1], "hspace": 0.05}
    )
    top = float(max(risk.max(), np.nanmax(calibration.groups["observed_upper"].to_numpy(), initial=0.0), 0.05))
    top = min(1.0, top * 1.05)
    ax.plot([0, top], [0, top], color="grey", linestyle=":", linewidth=1, label="ideal")
    curve = calibration.curve
    if len(curve):
        if curve["observed_lower"].notna().all():
            ax.fill_between(curve["predicted"], curve["observed_lower"], curve["observed_upper"], color="C0",
                            alpha=0.2, linewidth=0, label="95% band (bootstrap)")
        ax.plot(curve["predicted"], curve["observed"], color="C0", label="smoothed (Cox, spline of cloglog risk)")
    groups = calibration.groups[calibration.groups["n"] >= min_group_size]
    err = np.vstack([groups["observed"] - groups["observed_lower"], groups["observed_upper"] - groups["observed"]])
    ax.errorbar(groups["predicted"], groups["observed"], yerr=np.nan_to_num(np.abs(err)), fmt="o", color="C1",
                markersize=4, capsize=2, label="quantile groups (95% CI)")
    ax.set_xlim(0, top)
    ax.set_ylim(0, top)
    ax.set_ylabel("observed risk")
    years = calibration.horizon / DAYS_PER_YEAR
    if np.isnan(calibration.ici):  # competing events: only grouped (Aalen–Johansen) calibration and O/E
        stats_text = f"O/E {calibration.oe_ratio:.2f}"
    else:
        stats_text = (
            f"ICI {calibration.ici:.3f}   E90 {calibration.e90:.3f}\n"
            f"slope {calibration.slope:.2f}   O/E {calibration.oe_ratio:.2f}"
        )
    ax.text(0.03, 0.97, stats_text, transform=ax.transAxes, va="top", fontsize=8)
    ax.set_title(f"Calibration of {model_name} at {years:.2g} years")
    ax.legend(frameon=False, fontsize=7, loc="lower right")
    ax.grid(alpha=0.3)
    hist_ax.hist(risk, bins=40, range=(0, top), color="grey")
    hist_ax.set_xlabel("predicted risk")
    hist_ax.set_ylabel("patients")
    fig.subplots_adjust(left=0.14, right=0.97, top=0.93, bottom=0.1)
    return fig
