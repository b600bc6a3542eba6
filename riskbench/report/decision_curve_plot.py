"""Decision curve: net benefit of acting on the model against treating everyone and treating no one."""

from __future__ import annotations

import matplotlib

matplotlib.use("Agg", force=False)
import matplotlib.pyplot as plt  # noqa: E402
import pandas as pd  # noqa: E402

DAYS_PER_YEAR = 365.25


def decision_curve_figure(table: pd.DataFrame, *, horizon_days: float | None = None, model_name: str = "model") -> plt.Figure:
    """Plot net benefit against the threshold probability.

    Parameters
    ----------
    table
        Output of :func:`riskbench.metrics.net_benefit` (``threshold, model, treat_all, treat_none``);
        an optional ``model_name`` column draws one line per model.
    horizon_days
        Shown in the title (as years).
    model_name
        Label when the table has no ``model_name`` column.

    Returns
    -------
    matplotlib.figure.Figure
    """
    missing = {"threshold", "model", "treat_all", "treat_none"} - set(table.columns)
    if missing:
        raise ValueError(f"decision_curve_figure: table lacks column(s) {sorted(missing)}; pass net_benefit's output")
    fig, ax = plt.subplots(figsize=(6, 4))
    groups = table.groupby("model_name", sort=False) if "model_name" in table.columns else [(model_name, table)]
    first = None
    for name, rows in groups:
        rows = rows.sort_values("threshold")
        first = rows if first is None else first
        ax.plot(rows["threshold"], rows["model"], linewidth=2, label=str(name))
    ax.plot(first["threshold"], first["treat_all"], color="grey", linewidth=1, label="treat all")
    ax.plot(first["threshold"], first["treat_none"], color="black", linewidth=1, linestyle="--", label="treat none")
    best = max(float(table["model"].max()), float(table["treat_all"].max()), 0.01)
    ax.set_ylim(-0.1 * best, best * 1.15)
    ax.set_xlim(float(table["threshold"].min()), float(table["threshold"].max()))
    ax.set_xlabel("threshold probability")
    ax.set_ylabel("net benefit")
    title = "Decision curve"
    if horizon_days is not None:
        title += f" at {horizon_days / DAYS_PER_YEAR:.2g} years"
    ax.set_title(title)
    ax.legend(frameon=False, fontsize=8)
    ax.grid(alpha=0.3)
    fig.tight_layout()
    return fig
