"""What a stage function returns to its notebook: the tables and figures it wrote (already suppressed), and
what it made — the cohort tables, the fitted models, the cross-validated predictions, the evaluations.

:class:`StageResult` is what every stage returns; each stage's subclass adds the objects of that stage
(:class:`CohortStageResult`, :class:`ModelsStageResult`, :class:`ValidationStageResult`,
:class:`ComparisonStageResult`). In Jupyter a result shows itself as the report would (escaped text, small
counts hidden); the views it holds (:mod:`riskbench.report.notebook_views`) draw their figures with ``plot()``.
The pseudonymised tables are held as they were written to ``data/``; the cohort stage's ``cohort`` (source
identifiers and dates) is kept for this session only and is never shown.
"""

from __future__ import annotations

import html
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from matplotlib.figure import Figure

from riskbench.report.html_report import table_html
from riskbench.report.notebook_views import (
    CAUTION_TEXT,
    CalibrationView,
    CohortSummary,
    ComparisonView,
    ConcordanceView,
    titled_html,
)
from riskbench.report.outputs import FigureFiles, safe_file_stem
from riskbench.time_units import parse_duration


@dataclass(frozen=True)
class StageResult:
    """Tables (as written to ``tables/``, small counts hidden) and figures of one stage.

    ``notes`` are plain sentences for the reader (e.g. what was left out and why).
    """

    stage: str
    run_dir: Path
    tables: dict[str, pd.DataFrame] = field(default_factory=dict, repr=False)
    figures: dict[str, FigureFiles] = field(default_factory=dict, repr=False)
    notes: list[str] = field(default_factory=list, repr=False)

    def _repr_html_(self) -> str:
        """Notebook display: the stage's notes and the names of what it wrote (``show`` draws them all)."""
        return _overview_html(self)


def _overview_html(result: StageResult, body: str = "") -> str:
    caution = html.escape(CAUTION_TEXT)
    notes = "".join(f"<li>{html.escape(n)}</li>" for n in result.notes)
    written = ", ".join(html.escape(f"tables/{safe_file_stem(n)}.csv") for n in result.tables)
    drawn = ", ".join(html.escape(f"figures/{f.png.name}") for f in result.figures.values())
    return (
        f"<div><h3>Stage {html.escape(result.stage)}</h3>{body}"
        + (f"<ul>{notes}</ul>" if notes else "")
        + (f"<p>Tables: <code>{written}</code></p>" if written else "")
        + (f"<p>Figures: <code>{drawn}</code></p>" if drawn else "")
        + "<p>(<code>show(result)</code> shows every table and figure.)</p>"
        + ("" if caution in body else f"<p><em>{caution}</em></p>")
        + "</div>"
    )


def horizon_days(horizon: float | str) -> float:
    """A horizon given in days (a number) or as a duration (``"2 years"``), in days."""
    return parse_duration(horizon) if isinstance(horizon, str) else float(horizon)


@dataclass(frozen=True)
class CohortStageResult(StageResult):
    """Stage 1's result: the cohort summary and the pseudonymised tables the later stages read.

    Attributes
    ----------
    counting_process, landmark_stack, patients : DataFrame
        The tables written to ``data/`` (run pseudonyms, no dates).
    cohort : riskbench.cohort.Cohort
        The cohort as built from the sources (full ledger and flow, source identifiers and dates): for
        looking closer in this session only; it is never displayed or written.
    flow : DataFrame
        The patient flow with exact counts (drawn by ``summary.plot_flow()`` with small counts hidden).
    threshold : int
        The small-count threshold.
    """

    counting_process: pd.DataFrame = field(default_factory=pd.DataFrame, repr=False)
    landmark_stack: pd.DataFrame = field(default_factory=pd.DataFrame, repr=False)
    patients: pd.DataFrame = field(default_factory=pd.DataFrame, repr=False)
    cohort: Any = field(default=None, repr=False)
    flow: pd.DataFrame = field(default_factory=pd.DataFrame, repr=False)
    threshold: int = 10

    @property
    def summary(self) -> CohortSummary:
        """Flow, rows used per source table, landmarks and baseline as in the report (``plot_flow()``)."""
        return CohortSummary(
            tables=dict(self.tables),
            flow=self.flow,
            n_patients=len(self.patients),
            n_intervals=len(self.counting_process),
            n_landmark_rows=len(self.landmark_stack),
            threshold=self.threshold,
        )

    def _repr_html_(self) -> str:
        return _overview_html(self, self.summary._repr_html_())


@dataclass(frozen=True)
class ModelsStageResult(StageResult):
    """Stage 2's result: every model fitted on the whole cohort and its apparent predictions.

    Attributes
    ----------
    models : dict
        Model name -> fitted model (``predict_risk(table, horizon_days)``); a model whose fit failed is absent.
    landmark_stack, counting_process : DataFrame
        The tables the models were fitted on.
    prediction_frames : list of DataFrame
        Each model's apparent predictions (see :attr:`apparent_predictions`).
    """

    models: dict[str, Any] = field(default_factory=dict, repr=False)
    landmark_stack: pd.DataFrame | None = field(default=None, repr=False)
    counting_process: pd.DataFrame | None = field(default=None, repr=False)
    prediction_frames: list[pd.DataFrame] = field(default_factory=list, repr=False)

    @property
    def apparent_predictions(self) -> pd.DataFrame:
        """``row, model, horizon, risk`` (horizon in days) of every fitted model, as in ``data/``."""
        if not self.prediction_frames:
            return pd.DataFrame(columns=["row", "model", "horizon", "risk"])
        return pd.concat(self.prediction_frames, ignore_index=True)

    def model_summary(self, name: str) -> Any:
        """A model's summary: the Cox summary object where the model has one (``fit_summary``), else its
        coefficient table as written to ``tables/coefficients_<model>.csv``.

        Raises
        ------
        KeyError
            When no model of that name was fitted (the message lists the fitted ones).
        """
        if name not in self.models:
            raise KeyError(f"no fitted model {name!r}; fitted: {', '.join(self.models) or 'none'}")
        model = self.models[name]
        if hasattr(model, "fit_summary"):  # a Cox model: (start, stop] rows when it was fitted on them
            start = getattr(model, "start_column", None)
            cp = self.counting_process
            on_intervals = cp is not None and start is not None and start in cp.columns
            return model.fit_summary(cp if on_intervals else self.landmark_stack)
        return self.tables.get(f"coefficients_{name}")

    def plot_hazard_ratios(self) -> Figure:
        """Forest plot of every model's outcome hazard ratios per step (``tables/hazard_ratios_<model>``).

        Raises
        ------
        KeyError
            When no model has a hazard-ratio table (e.g. only forests were fitted).
        """
        from riskbench.report.hazard_ratio_plot import hazard_ratio_figure

        tables = {}
        for name in self.models:
            table = self.tables.get(f"hazard_ratios_{name}")
            if table is not None:
                tables[name] = table.set_index("term").dropna(subset=["hazard_ratio"])
        if not tables:
            raise KeyError("no model of this stage has hazard ratios (tables hazard_ratios_<model>)")
        return hazard_ratio_figure(tables, title="Hazard ratios per step (column 'per' of the tables)")

    def _repr_html_(self) -> str:
        parts = []
        for name in self.models:
            table = self.tables.get(f"coefficients_{name}")
            if table is not None:
                parts.append(f"<h4>{html.escape(name)}</h4>{table_html(table)}")
        return _overview_html(self, "".join(parts))


@dataclass(frozen=True)
class ValidationStageResult(StageResult):
    """Stage 3's result: the cross-validated predictions (``row, model, horizon, risk, fold``; horizon in days)
    and the bootstrap-validation table when the plan asked for it.

    ``frames`` holds the stage's data tables by name (as written to ``data/``).
    """

    frames: dict[str, pd.DataFrame] = field(default_factory=dict, repr=False)

    @property
    def cv_predictions(self) -> pd.DataFrame | None:
        """Every landmark-stack row predicted by the models fitted without its patient."""
        return self.frames.get("cv_predictions")

    def risks(self, model: str, horizon: float | str) -> np.ndarray:
        """The cross-validated risk of every landmark-stack row (row order) for ``model`` by ``horizon``
        (days, or a duration such as ``"2 years"``); NaN for a row the model leaves unpredicted."""
        return cv_risks(self.cv_predictions, model, horizon)

    def _repr_html_(self) -> str:
        table = self.tables.get("bootstrap_optimism")
        return _overview_html(self, table_html(table) if table is not None else "")


def cv_risks(cv: pd.DataFrame | None, model: str, horizon: float | str) -> np.ndarray:
    """Risks of ``model`` at ``horizon`` from cross-validated predictions, in landmark-stack row order.

    Raises
    ------
    KeyError
        When the model or the horizon is not among the predictions (the message lists what is).
    """
    if cv is None or model not in set(cv["model"]):
        known = sorted(set(cv["model"])) if cv is not None else []
        raise KeyError(f"no cross-validated predictions of {model!r}; models: {', '.join(known) or 'none'}")
    days = horizon_days(horizon)
    rows = cv[cv["model"] == model]
    at = rows[np.isclose(rows["horizon"].to_numpy(float), days, atol=1e-3)]
    if at.empty:
        raise KeyError(
            f"no predictions at {days:g} days; horizons (days): "
            f"{', '.join(f'{h:g}' for h in sorted(rows['horizon'].unique()))}"
        )
    return at.sort_values("row")["risk"].to_numpy(float)


@dataclass(frozen=True)
class ComparisonStageResult(StageResult):
    """Stage 4's result: the evaluations behind the report's tables.

    Attributes
    ----------
    concordance : ConcordanceView
        Harrell's and Uno's C of the cross-validated predictions at the report horizons.
    calibrations : dict
        ``(model, horizon_days)`` -> :class:`~riskbench.report.notebook_views.CalibrationView`
        (see :meth:`calibration`).
    comparison : ComparisonView
        The paired bootstrap comparison of the candidate against the reference, when configured.
    """

    concordance: ConcordanceView | None = None
    calibrations: dict[tuple[str, float], CalibrationView] = field(default_factory=dict, repr=False)
    comparison: ComparisonView | None = None

    def calibration(self, model: str, horizon: float | str) -> CalibrationView:
        """The calibration of ``model`` at ``horizon`` (days, or a duration such as ``"2 years"``).

        Raises
        ------
        KeyError
            When it was not computed (the message lists what was).
        """
        days = horizon_days(horizon)
        for (name, h), view in self.calibrations.items():
            if name == model and abs(h - days) <= 1e-3:
                return view
        known = ", ".join(f"{m} at {h:g} days" for m, h in self.calibrations) or "none"
        raise KeyError(f"no calibration of {model!r} at {days:g} days; computed: {known}")

    def _repr_html_(self) -> str:
        parts = [v._repr_html_() for v in (self.concordance, self.comparison) if v is not None]
        summary = self.tables.get("calibration_summary")
        if summary is not None:
            parts.append(titled_html("Calibration", {"": summary}))
        return _overview_html(self, "".join(parts))


def _html_table(table: pd.DataFrame) -> str:
    """The table as the report shows it: an HTML ``<table>`` of escaped text, numbers rounded for reading."""
    return table_html(table)


def show(result: StageResult) -> None:
    """Display a stage's notes, tables and figures in a notebook (plain print outside Jupyter).

    Every user string (notes, table names, labels in cells and headers) is shown as escaped HTML text,
    never as Markdown or live markup, so it stays text in the exported notebook page too.
    """
    display: Any = None
    try:
        from IPython.display import HTML, Image
        from IPython.display import display as ipython_display
    except ImportError:  # pragma: no cover - IPython ships with ipykernel
        pass
    else:
        display = ipython_display
    for note in result.notes:
        if display:
            display(HTML(f"<p><em>{html.escape(note)}</em></p>"))
        else:
            print(note)
    for name, table in result.tables.items():
        if display:
            where = f"tables/{safe_file_stem(name)}.csv"
            display(
                HTML(
                    f"<p><strong>{html.escape(name)}</strong> (<code>{html.escape(where)}</code>)</p>"
                    + _html_table(table)
                )
            )
        else:
            print(name, table, sep="\n")
    for name, files in result.figures.items():
        if display:
            where = f"figures/{files.png.name}, {files.svg.name}"
            display(HTML(f"<p><strong>{html.escape(name)}</strong> (<code>{html.escape(where)}</code>)</p>"))
            display(Image(filename=str(files.png)))
        else:
            print(name, files.png)
