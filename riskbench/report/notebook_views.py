"""What a notebook holds after a stage: the cohort, concordance, calibration and comparison as objects.

Each object keeps the numbers (numeric DataFrames, the metric's own result object), shows itself in Jupyter
as the report would (``_repr_html_``: tables formatted by :func:`riskbench.report.html_report.table_html`,
every text escaped, small counts hidden as in the report) and draws its figure on request (``plot()``
returns a matplotlib figure; nothing is written to disk).
"""

from __future__ import annotations

import html
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import matplotlib.pyplot as plt
import numpy as np
import pandas as pd

from riskbench.metrics.calibration import Calibration
from riskbench.report.calibration_plot import calibration_figure
from riskbench.report.display_format import MEASURES, format_years
from riskbench.report.flow_diagram import flow_figure
from riskbench.report.html_report import table_html
from riskbench.report.suppression import format_count
from riskbench.time_units import DAYS_PER_YEAR
from riskbench.validation.comparison import Comparison

#: The caution every displayed result carries (the report's caution, shortened).
CAUTION_TEXT = (
    "Research software, not a medical device: not for clinical decisions without proper validation; "
    "local ethics approval, data-protection rules and clinical governance decide what may be done."
)

CONCORDANCE_MEASURES: tuple[str, ...] = ("harrell_c", "uno_c")


def titled_html(title: str, parts: Mapping[str, pd.DataFrame], lead: str = "") -> str:
    """A heading, an optional lead sentence, the named tables (as the report shows them) and the caution.

    Every text is escaped; tables go through :func:`~riskbench.report.html_report.table_html`.
    """
    out = [f"<div><h4>{html.escape(title)}</h4>"]
    if lead:
        out.append(f"<p>{html.escape(lead)}</p>")
    for name, table in parts.items():
        heading = f"<p><strong>{html.escape(name)}</strong></p>" if name else ""
        out.append(heading + table_html(table))
    out.append(f"<p><em>{html.escape(CAUTION_TEXT)}</em></p></div>")
    return "".join(out)


@dataclass(frozen=True)
class CohortSummary:
    """The cohort as the report describes it: flow, rows used per source table, landmarks, baseline.

    Attributes
    ----------
    tables : dict of DataFrame
        ``cohort_flow``, ``ledger_summary``, ``landmark_summary``, ``baseline_characteristics`` (and missing-data
        tables when present), small counts already hidden.
    flow : DataFrame or None
        The patient flow with exact counts (``step, n_patients, n_excluded, level``); only :meth:`plot_flow`
        uses it, through the same suppression as the report's figure. Not displayed. None for a finished run
        read back from its folder (the exact counts are not kept there).
    n_patients, n_intervals, n_landmark_rows : int
        Patients included, counting-process intervals, landmark-stack rows (shown with small counts hidden).
    threshold : int
        The small-count threshold.
    flow_png : Path or None
        The run's ``figures/cohort_flow.png``, drawn by :meth:`plot_flow` when ``flow`` is None.
    """

    tables: dict[str, pd.DataFrame]
    flow: pd.DataFrame | None
    n_patients: int
    n_intervals: int
    n_landmark_rows: int
    threshold: int
    flow_png: Path | None = None

    def _repr_html_(self) -> str:
        t = self.threshold
        lead = (
            f"{format_count(self.n_patients, t)} patients included; {format_count(self.n_intervals, t)} "
            f"counting-process intervals; {format_count(self.n_landmark_rows, t)} landmark rows."
        )
        return titled_html("Cohort", {k.replace("_", " "): v for k, v in self.tables.items()}, lead)

    def plot_flow(self) -> plt.Figure:
        """The cohort flow diagram (small counts hidden as in the report).

        Raises
        ------
        FileNotFoundError
            For a run read back from its folder whose ``figures/cohort_flow.png`` is missing.
        """
        if self.flow is not None:
            return flow_figure(self.flow, threshold=self.threshold)
        if self.flow_png is None or not self.flow_png.is_file():
            raise FileNotFoundError(
                f"no exact flow counts and no saved flow figure ({self.flow_png}); rerun the cohort stage"
            )
        image = plt.imread(self.flow_png)
        fig, ax = plt.subplots(figsize=(image.shape[1] / 100, image.shape[0] / 100))
        ax.imshow(image)
        ax.set_axis_off()
        return fig


@dataclass(frozen=True)
class ConcordanceView:
    """Harrell's and Uno's C of each model at each report horizon.

    ``table``: ``horizon_years, metric`` (``harrell_c`` / ``uno_c``) and one numeric column per model, as in
    ``tables/discrimination.csv``; ``obtained_by`` says how the predictions were obtained.
    """

    table: pd.DataFrame
    obtained_by: str = ""

    @classmethod
    def from_discrimination(cls, discrimination: pd.DataFrame, obtained_by: str = "") -> ConcordanceView:
        """The concordance rows of a discrimination table (``riskbench.validation.comparison_statistics``)."""
        rows = discrimination[discrimination["metric"].isin(CONCORDANCE_MEASURES)]
        return cls(rows.drop(columns=["obtained_by"], errors="ignore").reset_index(drop=True), obtained_by)

    @property
    def models(self) -> list[str]:
        """The models in the table."""
        return [str(c) for c in self.table.columns if c not in ("horizon_years", "metric")]

    def _repr_html_(self) -> str:
        return titled_html("Concordance", {"": self.table}, self.obtained_by)

    def plot(self) -> plt.Figure:
        """C against the horizon (years), one panel per measure and one line per model."""
        measures = [m for m in CONCORDANCE_MEASURES if (self.table["metric"] == m).any()]
        fig, axes = plt.subplots(1, max(len(measures), 1), figsize=(4.2 * max(len(measures), 1), 3.4), squeeze=False)
        for ax, measure in zip(axes[0], measures):
            rows = self.table[self.table["metric"] == measure].sort_values("horizon_years")
            for model in self.models:
                ax.plot(rows["horizon_years"], rows[model], marker="o", label=model)
            ax.axhline(0.5, color="grey", lw=0.8, ls=":")
            ax.set_title(MEASURES[measure][0])
            ax.set_xlabel("Horizon after the landmark (years)")
            ax.set_ylabel("Concordance")
        axes[0][0].legend(frameon=False, fontsize="small")
        fig.tight_layout()
        return fig


@dataclass(frozen=True)
class CalibrationView:
    """One model's calibration at one horizon, with the risks it was computed from.

    Attributes
    ----------
    calibration : Calibration
        The metric's result (:func:`riskbench.metrics.calibration.calibration_at_horizon`).
    risk : ndarray
        The predicted risks that were calibrated (one per landmark row).
    model : str
    horizon_days : float
    summary : dict
        The row of ``tables/calibration_summary`` (counts already shown with small counts hidden).
    threshold : int
        Groups smaller than this are not drawn.
    """

    calibration: Calibration
    risk: np.ndarray
    model: str
    horizon_days: float
    summary: dict[str, Any] = field(default_factory=dict)
    threshold: int = 10

    def _repr_html_(self) -> str:
        years = format_years(self.horizon_days / DAYS_PER_YEAR)
        return titled_html(
            f"Calibration of {self.model} at {years} years",
            {"": pd.DataFrame([self.summary])},
            self.calibration.target_text,
        )

    def plot(self) -> plt.Figure:
        """Observed against predicted risk (the report's calibration figure)."""
        return calibration_figure(
            self.calibration,
            self.risk,
            model_name=self.model,
            min_group_size=self.threshold,
            row_unit="landmark rows",
            horizon_days=self.horizon_days,
        )


@dataclass(frozen=True)
class ComparisonView:
    """The paired bootstrap comparison of a candidate against a reference model.

    ``comparison`` holds every replicate (:class:`riskbench.validation.comparison.Comparison`); ``table`` is
    ``tables/model_comparison.csv`` (numbers; intervals as ``_low`` / ``_high`` columns).
    """

    comparison: Comparison
    table: pd.DataFrame
    reference: str
    candidate: str

    @property
    def difference_column(self) -> str:
        """The column holding candidate minus reference."""
        return f"{self.candidate} minus {self.reference}"

    def _repr_html_(self) -> str:
        return titled_html(
            f"{self.candidate} against {self.reference}",
            {"": self.table},
            "Out-of-bag bootstrap estimates with 95% percentile intervals; the difference is "
            "candidate minus reference.",
        )

    def plot(self) -> plt.Figure:
        """The differences with their 95% intervals, one row per measure and horizon (0: no difference)."""
        d = self.difference_column
        rows = self.table.reset_index(drop=True)
        labels = [
            f"{MEASURES.get(m, (m,))[0]}, {format_years(h)} y" for m, h in zip(rows["metric"], rows["horizon_years"])
        ]
        y = np.arange(len(rows))[::-1]
        fig, ax = plt.subplots(figsize=(6.0, 0.45 * len(rows) + 1.2))
        estimate = rows[d].to_numpy(float)
        low, high = rows[f"{d}_low"].to_numpy(float), rows[f"{d}_high"].to_numpy(float)
        ax.errorbar(estimate, y, xerr=[estimate - low, high - estimate], fmt="o", color="#1f4e79", capsize=3)
        ax.axvline(0.0, color="grey", lw=0.8)
        ax.set_yticks(y, labels)
        ax.set_xlabel(f"{self.candidate} minus {self.reference} (95% interval)")
        fig.tight_layout()
        return fig
