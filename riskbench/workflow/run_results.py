"""A finished run read back from its folder, for looking closer in a notebook.

:func:`open_run` returns a :class:`FinishedRun`: the cohort summary and tables, the saved models, the
cross-validated predictions, every report table (numbers), and two things to do by hand — refit a model
with its covariates changed, and calibrate any risks (a stage model's cross-validated ones or a refit's)::

    from riskbench.workflow.run_results import open_run

    run = open_run("results/demo")                       # the run folder
    run.cohort                                           # flow, rows used, landmarks, baseline
    refit = run.refit("imaging_clinical", drop=["serum_marker"])
    run.calibration("imaging_clinical", "2 years").plot()    # cross-validated, as in the report
    run.calibration(refit, "2 years").plot()                 # the refit, apparent (on its fitting rows)

The run folder is only read. Tables are read from ``tables/*.csv`` (small counts already hidden) and the
pseudonymised data from ``data/*.parquet``; nothing here shows a source identifier or a date.
"""

from __future__ import annotations

import dataclasses
import html
import json
from collections.abc import Sequence
from functools import cached_property
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from riskbench.errors import RiskbenchError
from riskbench.metrics.calibration import calibration_at_horizon
from riskbench.models.prediction_target import fitted_target
from riskbench.models.risk_contract import risk_curve
from riskbench.report.notebook_views import CalibrationView, CohortSummary, ConcordanceView
from riskbench.report.outputs import DATA, FIGURES, TABLES, load_data, output_path, restore_csv_cell
from riskbench.validation.performance import evaluation_time, stack_outcome
from riskbench.workflow.config import AnalysisConfig, load_config
from riskbench.workflow.manifest import MANIFEST
from riskbench.workflow.model_factory import fit_model
from riskbench.workflow.stage_calibration import model_target, summary_row
from riskbench.workflow.stage_result import cv_risks, horizon_days

#: The report tables that describe the cohort (what :attr:`FinishedRun.cohort` shows).
COHORT_TABLES: tuple[str, ...] = (
    "cohort_flow",
    "ledger_summary",
    "landmark_summary",
    "baseline_characteristics",
    "missing_data",
    "complete_cases",
)


class RunFolderError(RiskbenchError):
    """A folder that is not a finished run, or a part of the run that is missing."""


def open_run(run_dir: str | Path, config: str | Path | AnalysisConfig | None = None) -> FinishedRun:
    """Read a finished run folder (``report.html``, ``tables/``, ``data/``, ``manifest.json``).

    Parameters
    ----------
    run_dir
        The run folder.
    config
        The analysis configuration (path or object) for :meth:`FinishedRun.refit` and the calibration's seed
        and threshold; by default the configuration file the manifest names, when it is still there.

    Raises
    ------
    RunFolderError
        When ``run_dir`` has no ``manifest.json`` (not a finished run).
    """
    run_dir = Path(run_dir)
    manifest_path = run_dir / MANIFEST
    if not manifest_path.is_file():
        raise RunFolderError(
            f"{run_dir} has no {MANIFEST}: give the folder of a finished run (riskbench run writes it last)"
        )
    manifest = json.loads(manifest_path.read_text(encoding="utf-8"))
    if config is None and manifest.get("configuration_path") and Path(manifest["configuration_path"]).is_file():
        config = manifest["configuration_path"]
    if config is not None and not isinstance(config, AnalysisConfig):
        config = load_config(config)
    return FinishedRun(run_dir=run_dir, manifest=manifest, config=config)


def read_table(run_dir: str | Path, name: str) -> pd.DataFrame:
    """``tables/<name>.csv`` of a run as written (numbers as numbers, text cells as the stage made them).

    Raises
    ------
    RunFolderError
        When the table is not in the run (the message lists the tables that are).
    """
    path = output_path(run_dir, TABLES, name, ".csv")
    if not path.is_file():
        known = sorted(p.stem for p in (Path(run_dir) / TABLES).glob("*.csv"))
        raise RunFolderError(f"{path} is missing; tables of this run: {', '.join(known) or 'none'}")
    table = pd.read_csv(path)
    table.columns = [restore_csv_cell(str(c)) for c in table.columns]
    for column in table.columns:
        if table[column].dtype == object:
            table[column] = table[column].map(restore_csv_cell)
    return table


@dataclasses.dataclass(frozen=True)
class FinishedRun:
    """A finished run folder opened by :func:`open_run` (read only; large tables read on first use).

    Attributes
    ----------
    run_dir : Path
    manifest : dict
        ``manifest.json`` (configuration, input SHA-256, versions, seeds).
    config : AnalysisConfig or None
        The analysis configuration, needed by :meth:`refit` and :meth:`calibration`.
    """

    run_dir: Path
    manifest: dict[str, Any]
    config: AnalysisConfig | None = None

    # --- what the stages wrote -------------------------------------------------------------------------

    def table(self, name: str) -> pd.DataFrame:
        """One report table, ``tables/<name>.csv`` (see :func:`read_table`)."""
        return read_table(self.run_dir, name)

    @property
    def table_names(self) -> list[str]:
        """The report tables of the run."""
        return sorted(p.stem for p in (self.run_dir / TABLES).glob("*.csv"))

    @cached_property
    def counting_process(self) -> pd.DataFrame:
        """``data/counting_process.parquet`` (run pseudonyms, days since entry)."""
        return load_data(self.run_dir, "counting_process")

    @cached_property
    def landmark_stack(self) -> pd.DataFrame:
        """``data/landmark_stack.parquet`` (run pseudonyms, days)."""
        return load_data(self.run_dir, "landmark_stack")

    @cached_property
    def cv_predictions(self) -> pd.DataFrame:
        """``data/cv_predictions.parquet``: ``row, model, horizon, risk, fold`` (horizon in days)."""
        return load_data(self.run_dir, "cv_predictions")

    @cached_property
    def apparent_predictions(self) -> pd.DataFrame:
        """``data/apparent_predictions.parquet``: ``row, model, horizon, risk`` (horizon in days)."""
        return load_data(self.run_dir, "apparent_predictions")

    @property
    def cohort(self) -> CohortSummary:
        """The cohort as the report describes it (tables with small counts hidden; ``plot_flow()``)."""
        tables = {n: self.table(n) for n in COHORT_TABLES if n in self.table_names}
        patients = (
            load_data(self.run_dir, "patients")
            if output_path(self.run_dir, DATA, "patients", ".parquet").is_file()
            else None
        )
        return CohortSummary(
            tables=tables,
            flow=None,
            n_patients=len(patients) if patients is not None else 0,
            n_intervals=len(self.counting_process),
            n_landmark_rows=len(self.landmark_stack),
            threshold=self.threshold,
            flow_png=self.run_dir / FIGURES / "cohort_flow.png",
        )

    @property
    def concordance(self) -> ConcordanceView:
        """Harrell's and Uno's C of the cross-validated predictions (``tables/discrimination.csv``)."""
        table = self.table("discrimination")
        obtained = str(table["obtained_by"].iloc[0]) if "obtained_by" in table.columns and len(table) else ""
        return ConcordanceView.from_discrimination(table, obtained)

    @property
    def threshold(self) -> int:
        """The small-count threshold of the run."""
        if self.config is not None:
            return int(self.config.report.small_count_threshold)
        return int(self.manifest.get("configuration", {}).get("report", {}).get("small_count_threshold", 10))

    # --- models ----------------------------------------------------------------------------------------

    def saved_models(self) -> dict[str, Any]:
        """The models the run saved under ``models/`` (name -> loaded model bundle with ``.model``)."""
        from riskbench.workflow.model_bundle import load_model

        bundles = sorted((self.run_dir / "models").glob("*.bundle.json"))
        loaded = [load_model(b) for b in bundles]
        return {m.name: m for m in loaded}

    def refit(
        self,
        model: str,
        *,
        covariates: Sequence[str] | None = None,
        add: Sequence[str] = (),
        drop: Sequence[str] = (),
        params: dict[str, Any] | None = None,
    ) -> Any:
        """Fit a configured model again on the run's tables with its covariates (or parameters) changed.

        Parameters
        ----------
        model
            The ``[[models]]`` name whose family, parameters and missing-data method are used.
        covariates
            The covariates to use instead of the configured ones.
        add, drop
            Covariates added to / removed from the configured (or given) list.
        params
            Family parameters to change (merged into the configured ones).

        Returns
        -------
        object
            The fitted model (``predict_risk(table, horizon_days)``, ``summary()`` for regression models).

        Raises
        ------
        RunFolderError
            Without a configuration; ConfigError for an unknown model, covariate or parameter.
        """
        config = self._config("refit a model")
        spec = config.model(model)
        chosen = [c for c in (covariates if covariates is not None else spec.covariates) if c not in set(drop)]
        chosen += [c for c in add if c not in chosen]
        spec = dataclasses.replace(spec, covariates=tuple(chosen), params={**spec.params, **(params or {})})
        return fit_model(
            spec, self.landmark_stack, self.counting_process, seed=config.seed, missing_data=config.missing_data
        )

    # --- evaluation ------------------------------------------------------------------------------------

    def risks(self, model: str, horizon: float | str) -> np.ndarray:
        """Cross-validated risks of a run's model by ``horizon`` (days or ``"2 years"``), in stack row order."""
        return cv_risks(self.cv_predictions, model, horizon)

    def calibration(self, model: str | Any, horizon: float | str, *, name: str | None = None) -> CalibrationView:
        """Calibration at ``horizon`` (days or ``"2 years"``), as the report computes it.

        Parameters
        ----------
        model
            A model name of the run (its cross-validated risks on the rows every model predicts, as in the
            report) or a fitted model such as :meth:`refit` returns (its risks on the run's landmark stack:
            apparent, so optimistic).
        horizon
            Time from the landmark.
        name
            The label of a fitted model in the table and figure (default ``"refit"``).
        """
        config = self._config("compute a calibration")
        days = horizon_days(horizon)
        stack = self.landmark_stack
        if isinstance(model, str):
            risk, label, target = self.risks(model, days), model, model_target(config, model)
            # as in the report: the rows every model predicts (a complete-case model leaves some out)
            keep = np.logical_and.reduce(
                [np.isfinite(self.risks(str(m), days)) for m in self.cv_predictions["model"].unique()]
            )
        else:
            risk = np.asarray(risk_curve(model, stack, [days]), dtype=float)[:, 0]
            label, target = name or "refit", fitted_target(model)
            keep = np.isfinite(risk)
        time, status = stack_outcome(stack)
        patient = stack["patient_id"].to_numpy()[keep]
        cal = calibration_at_horizon(
            time[keep],
            status[keep],
            risk[keep],
            evaluation_time(days, time[keep]),
            target=target,
            cluster=patient,
            seed=config.validation.seed,
        )
        row = summary_row(label, days, cal, int(keep.sum()), int(pd.unique(patient).size), self.threshold)
        return CalibrationView(cal, risk[keep], label, days, row, self.threshold)

    def _config(self, what: str) -> AnalysisConfig:
        if self.config is None:
            raise RunFolderError(
                f"to {what}, open the run with its configuration: open_run({str(self.run_dir)!r}, "
                "config='path/to/analysis.toml') (the file the manifest names is gone)"
            )
        return self.config

    def _repr_html_(self) -> str:
        tables = ", ".join(html.escape(n) for n in self.table_names)
        models = ", ".join(html.escape(m["name"]) for m in self.manifest.get("configuration", {}).get("models", []))
        return (
            f"<div><h3>Finished run <code>{html.escape(self.run_dir.name)}</code></h3>"
            f"<p>Models: {models or '(see the configuration)'}</p><p>Tables: {tables}</p>"
            "<p>Look closer with <code>.cohort</code>, <code>.concordance</code>, <code>.table(name)</code>, "
            "<code>.refit(model, drop=[...])</code> and <code>.calibration(model, horizon).plot()</code>.</p>"
            "</div>"
        )
