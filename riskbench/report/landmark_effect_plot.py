"""Figure of landmark-varying effects: each covariate's hazard ratio per step against the landmark, with its
pointwise 95% band (from :meth:`riskbench.models.landmark.LandmarkSupermodel.landmark_effect_bands`)."""

from __future__ import annotations

from collections.abc import Mapping

import matplotlib

matplotlib.use("Agg", force=False)

import matplotlib.pyplot as plt
import numpy as np
import pandas as pd

from riskbench.report.log_axis import readable_log_ticks
from riskbench.time_units import DAYS_PER_YEAR

__all__ = ["landmark_effect_figure"]


def landmark_effect_figure(
    bands: Mapping[str, pd.DataFrame],
    steps: Mapping[str, float],
    labels: Mapping[str, str] | None = None,
    per: Mapping[str, str] | None = None,
) -> plt.Figure:
    """One panel per covariate: hazard ratio per step, exp(u·β(s)), and its band against the landmark s.

    Parameters
    ----------
    bands : mapping of model name to DataFrame
        ``covariate, landmark_days, coef, lower, upper`` (log hazard ratio per unit and its pointwise band).
    steps : mapping of covariate to float
        The step u (in the covariate's unit) the hazard ratio refers to.
    labels, per : mapping of covariate to str
        Readable names and the text of the step (as in the effects table's ``per``), for the panel titles.

    Returns
    -------
    matplotlib Figure; the x axis is the landmark in years since entry, the y axis a log scale with 1 marked.
    """
    if not bands:
        raise ValueError("landmark_effect_figure: no β(s) tables given")
    labels, per = dict(labels or {}), dict(per or {})
    covariates: list[str] = []
    for table in bands.values():
        covariates += [c for c in table["covariate"].unique() if c not in covariates]
    n_cols = min(3, len(covariates))
    n_rows = int(np.ceil(len(covariates) / n_cols))
    fig, axes = plt.subplots(n_rows, n_cols, figsize=(3.6 * n_cols, 2.9 * n_rows), squeeze=False)
    for ax, covariate in zip(axes.flat, covariates):
        u = float(steps.get(covariate, 1.0))
        for m, (name, table) in enumerate(bands.items()):
            rows = table[table["covariate"] == covariate].sort_values("landmark_days")
            if rows.empty:
                continue
            years = rows["landmark_days"].to_numpy(float) / DAYS_PER_YEAR
            colour = f"C{m}"
            ax.fill_between(
                years,
                np.exp(u * rows["lower"].to_numpy(float)),
                np.exp(u * rows["upper"].to_numpy(float)),
                color=colour,
                alpha=0.2,
                linewidth=0,
            )
            ax.plot(years, np.exp(u * rows["coef"].to_numpy(float)), color=colour, linewidth=1.5, label=name)
        ax.axhline(1.0, color="grey", linestyle=":", linewidth=1)
        ax.set_yscale("log")
        readable_log_ticks(ax.yaxis)
        title = labels.get(covariate, covariate) + (f"\nper {per[covariate]}" if covariate in per else "")
        ax.set_title(title, fontsize=8, parse_math=False)
        ax.set_xlabel("landmark (years since entry)", fontsize=8)
        ax.set_ylabel("hazard ratio (95% band)", fontsize=8)
        ax.tick_params(labelsize=7)
        ax.grid(alpha=0.3, which="both")
    for ax in list(axes.flat)[len(covariates) :]:
        ax.set_visible(False)
    if len(bands) > 1:
        handles, names = axes.flat[0].get_legend_handles_labels()
        fig.legend(handles, names, loc="lower center", ncol=len(bands), frameon=False, fontsize=8)
        fig.tight_layout(rect=(0, 0.06, 1, 1))
    else:
        fig.tight_layout()
    return fig
