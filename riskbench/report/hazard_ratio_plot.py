"""Hazard-ratio forest plot: one row per covariate, point estimate and confidence interval on a log axis."""

from __future__ import annotations

from collections.abc import Mapping

import matplotlib

matplotlib.use("Agg", force=False)

import matplotlib.pyplot as plt
import numpy as np
import pandas as pd

from riskbench.report.log_axis import readable_log_ticks

__all__ = ["hazard_ratio_figure"]


def _interval_columns(summary: pd.DataFrame) -> tuple[str, str]:
    lower = [c for c in summary.columns if c.startswith("hr_lower")]
    upper = [c for c in summary.columns if c.startswith("hr_upper")]
    if "hazard_ratio" not in summary.columns or not lower or not upper:
        raise ValueError(
            "hazard_ratio_figure needs a summary table with columns 'hazard_ratio', 'hr_lower_<level>' and "
            f"'hr_upper_<level>' (CoxModel.summary()); got {list(summary.columns)}"
        )
    return lower[0], upper[0]


def hazard_ratio_figure(
    summaries: pd.DataFrame | Mapping[str, pd.DataFrame],
    *,
    labels: Mapping[str, str] | None = None,
    title: str | None = None,
) -> plt.Figure:
    """Forest plot of hazard ratios with their confidence intervals.

    Parameters
    ----------
    summaries
        A ``CoxModel.summary()`` table (index = covariate; columns ``hazard_ratio``, ``hr_lower_95``,
        ``hr_upper_95``), or a mapping of model name to such tables (drawn side by side per covariate).
    labels
        Optional display names for covariates (e.g. units: ``{"age_at_entry": "age (per year)"}``).
    title
        Optional axis title.

    Returns
    -------
    matplotlib Figure (hazard ratio on a log axis; the line at 1 marks no effect).
    """
    tables = {"": summaries} if isinstance(summaries, pd.DataFrame) else dict(summaries)
    if not tables:
        raise ValueError("hazard_ratio_figure: no summary tables given")
    covariates: list[str] = []
    for table in tables.values():
        _interval_columns(table)
        covariates += [c for c in table.index if c not in covariates]
    labels = dict(labels or {})
    n_models = len(tables)
    height = 0.8 / n_models
    fig, ax = plt.subplots(figsize=(6.4, 1.2 + 0.38 * len(covariates) * max(1, n_models * 0.7)))
    for m, (name, table) in enumerate(tables.items()):
        lo_col, hi_col = _interval_columns(table)
        rows = table.reindex(covariates)
        y = np.arange(len(covariates)) + (m - (n_models - 1) / 2) * height
        hr = rows["hazard_ratio"].to_numpy(float)
        err = np.vstack([hr - rows[lo_col].to_numpy(float), rows[hi_col].to_numpy(float) - hr])
        ax.errorbar(hr, y, xerr=err, fmt="s", markersize=4, capsize=2, linewidth=1.2, label=name or None)
    level = _interval_columns(next(iter(tables.values())))[0].removeprefix("hr_lower_")
    ax.axvline(1.0, color="grey", linestyle=":", linewidth=1)
    ax.set_xscale("log")
    ax.set_yticks(np.arange(len(covariates)))
    ax.set_yticklabels([labels.get(c, c) for c in covariates])
    for tick in ax.get_yticklabels():  # labels are user text: a '$' is a dollar, not mathematics
        tick.set_parse_math(False)
    ax.invert_yaxis()
    ax.set_xlabel(f"hazard ratio ({level}% interval, log scale)")
    readable_log_ticks(ax.xaxis)  # plain 0.5, 1, 2 instead of overlapping powers of ten
    ax.grid(axis="x", alpha=0.3, which="both")
    if n_models > 1:  # beside the plot, never on the intervals
        ax.legend(frameon=False, fontsize=8, loc="upper left", bbox_to_anchor=(1.01, 1.0))
    if title:
        ax.set_title(title)
    fig.tight_layout()
    return fig
