"""``riskbench validate-model``: validate a saved model on another cohort, fit its updates and choose one.

The new cohort is described by an analysis configuration (the same form as for ``run-analysis``): its
``[sources]`` say where the raw tables are and how they are read, ``seed``, ``[validation]
bootstrap_resamples`` and ``[report]`` (small-count threshold, decision curves, triage target) are used; its
``[cohort]`` modelling rules and ``[[models]]`` are not -- the rows are built with the saved model's own cohort
rules, at the model's landmarks and prediction window, so the model sees its covariates exactly as defined in
development. The output folder gets ``tables/``, ``figures/``, ``report.html`` and ``manifest.json``; no
patient identifier and no date leaves the cohort stage.
"""

from __future__ import annotations

import argparse
import hashlib
import json
import tempfile
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from riskbench.errors import RiskbenchError
from riskbench.time_units import DAYS_PER_YEAR

__all__ = ["ExternalRunError", "register", "validate_saved_model"]


class ExternalRunError(RiskbenchError):
    """The saved model and the new cohort cannot be brought together (the message says why and what to do)."""


def _sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


@dataclass(frozen=True)
class NewCohort:
    """Where the new cohort's tables are, how they are read, and the settings of its validation."""

    sources: tuple[Any, Any, Any]
    reading: dict[str, Any]
    seed: int = 0
    threshold: int = 10
    resamples: int = 200
    report: Any = None
    config_file: Path | None = None

    @classmethod
    def from_arguments(cls, config_path: str | Path | None, data: str | Path | None) -> NewCohort:
        """From an analysis configuration, a folder of the three tables, or both (the folder's tables then
        replace the configuration's sources)."""
        from riskbench.workflow.config import ReportOptions, ValidationPlan, load_config

        if config_path is None and data is None:
            raise ExternalRunError(
                "give the new cohort: --config (an analysis configuration) and/or --data (a "
                "folder with patients, measurements and outcomes as .parquet or .csv)"
            )
        sources: tuple[Any, Any, Any] | None = None
        if data is not None:
            sources = _folder_tables(Path(data))
        if config_path is None:
            assert sources is not None
            return cls(
                sources=sources,
                reading={},
                seed=0,
                threshold=ReportOptions().small_count_threshold,
                resamples=ValidationPlan().bootstrap_resamples,
                report=ReportOptions(),
            )
        config = load_config(config_path, check_data=sources is None)
        cohort = config.cohort
        src = config.sources
        reading = {
            "columns": dict(cohort.columns),
            "date_format": cohort.date_format,
            "measurement_layout": cohort.measurement_layout,
            "kind_map": dict(cohort.kind_map),
        }
        return cls(
            sources=sources or (src.patients, src.measurements, src.outcomes),
            reading={} if sources is not None else reading,
            seed=int(config.seed),
            threshold=int(config.report.small_count_threshold),
            resamples=int(config.validation.bootstrap_resamples),
            report=config.report,
            config_file=Path(config_path),
        )


def _folder_tables(folder: Path) -> tuple[Path, Path, Path]:
    found = []
    for name in ("patients", "measurements", "outcomes"):
        candidates = [folder / f"{name}.{ext}" for ext in ("parquet", "csv")]
        path = next((c for c in candidates if c.is_file()), None)
        if path is None:
            raise ExternalRunError(
                f"--data {folder}: no {name}.parquet or {name}.csv there; the folder must hold "
                "the three tables of the input contract (as `riskbench simulate-cohort` writes)"
            )
        found.append(path)
    return found[0], found[1], found[2]


def _rows(saved: Any, cohort_in: NewCohort, temp: Path) -> tuple[pd.DataFrame, int, Any]:
    """The new cohort's landmark stack built with the model's rules, the number of rows the model cannot predict
    (left out: a model without a missing-data method needs every covariate, a joint model all but its marker)
    and the model to validate (a joint model reading the new patients' marker measurements)."""
    cohort = saved.build_cohort(*cohort_in.sources, temp_folder=temp, **cohort_in.reading)
    stack = cohort.landmark_stack(list(saved.landmarks_days), saved.prediction_window_days)
    absent = [c for c in saved.covariates if c not in stack.columns]
    if absent:
        raise ExternalRunError(
            f"the new cohort's rows lack the model's covariate(s) {absent}; check that the "
            "sources hold the model's variables (see the model sheet's cohort rules)"
        )
    dropped = 0
    if saved.missing_data is None:
        complete = stack[list(saved.required_covariates)].notna().all(axis=1)
        dropped = int((~complete).sum())
        stack = stack[complete]
    # pseudonymous row labels: the source ids are not needed past this point (nor in a joint model's history)
    codes, labels = pd.factorize(stack["patient_id"])
    history = saved.marker_history(cohort)
    if history is not None:
        history = history.assign(patient_id=pd.Index(labels).get_indexer(history["patient_id"]))
        history = history[history["patient_id"] >= 0]
    stack = stack.assign(patient_id=codes).reset_index(drop=True)
    return stack, dropped, saved.model_with_history(history)


def _horizons(given: Sequence[float] | None, new: NewCohort, window: float) -> list[float]:
    """The horizons to validate at (days): as given, else the report horizons within the window and the window."""
    if given is not None:
        beyond = [h for h in given if not 0 < h <= window + 1e-9]
        if beyond or not given:
            raise ExternalRunError(
                f"--horizons must lie in (0, {window / DAYS_PER_YEAR:g} years], the model's "
                f"prediction window; got {[round(h / DAYS_PER_YEAR, 4) for h in beyond]} years"
            )
        return sorted({float(h) for h in given})
    report = tuple(new.report.horizons_days) if new.config_file is not None else ()
    return sorted({float(h) for h in report if 0 < h <= window + 1e-9} | {float(window)})


def validate_saved_model(
    model_path: str | Path,
    out: str | Path,
    *,
    config_path: str | Path | None = None,
    data: str | Path | None = None,
    overwrite: bool = False,
    resamples: int | None = None,
    alpha: float = 0.05,
    shrink_revision: bool = False,
    horizons_days: Sequence[float] | None = None,
) -> tuple[Path, Any]:
    """Validate a saved model on a new cohort, fit and choose its updates, write the report.

    Parameters
    ----------
    model_path
        The model's ``.bundle.json`` (or the model file beside it) in a run folder's ``models/``.
    out
        Output folder (created; replaced only with ``overwrite`` and when a riskbench run made it).
    config_path
        Analysis configuration of the new cohort (sources, seed, ``[validation]``, ``[report]``).
    data
        A folder with the new cohort's ``patients``, ``measurements`` and ``outcomes`` (``.parquet`` or
        ``.csv``, our column names); replaces the configuration's sources. Without a configuration the
        defaults apply (seed 0, small-count threshold 10, the default resamples, decision curves and triage).
    resamples
        Bootstrap resamples of patients (default ``[validation] bootstrap_resamples``).
    alpha
        Significance level of the closed test.
    shrink_revision
        Shrink the model revision towards the original model.
    horizons_days
        Horizons (days) to validate and update at, none beyond the model's prediction window. Default: the
        configuration's report horizons within the window, and the window itself.

    Returns
    -------
    (Path, ExternalValidation)
        The report page and the result.
    """
    from riskbench.report.external_report import write_external_report
    from riskbench.validation.external import validate_externally
    from riskbench.workflow.manifest import package_versions, utc_now
    from riskbench.workflow.model_bundle import load_model
    from riskbench.workflow.run_folder import fresh_output_folder, write_marker

    started = utc_now()
    if not 0 < alpha < 1:
        raise ExternalRunError(f"--alpha must be between 0 and 1; got {alpha!r}")
    if resamples is not None and resamples < 0:
        raise ExternalRunError(f"--resamples must be 0 or more; got {resamples}")
    new = NewCohort.from_arguments(config_path, data)
    saved = load_model(model_path)
    out = Path(out)
    horizons = _horizons(horizons_days, new, saved.prediction_window_days)
    threshold = new.threshold
    n_boot = int(new.resamples if resamples is None else resamples)
    report = new.report
    thresholds = (
        tuple(float(t) for t in np.linspace(report.decision_threshold_min, report.decision_threshold_max, 21))
        if report.decision_curves
        else ()
    )
    with tempfile.TemporaryDirectory(prefix="riskbench-external-") as temp:
        stack, dropped, model = _rows(saved, new, Path(temp))
    fresh_output_folder(out, overwrite, "the output of validate-model")
    ev = validate_externally(
        model,
        stack,
        horizons,
        shrink_revision=shrink_revision,
        alpha=alpha,
        thresholds=thresholds,
        triage_target_npv=report.triage_target_npv if report.triage else None,
        min_outcomes=threshold,
        n_boot=n_boot,
        seed=new.seed,
    )
    if dropped:
        ev.skipped.append(
            (
                "landmark rows without every covariate",
                f"{dropped if dropped >= threshold else f'<{threshold}'} row(s) left out: the model has "
                "no missing-data method",
            )
        )
    facts = [
        ("model", saved.name),
        ("family", saved.family),
        ("landmarks", ", ".join(f"{s / DAYS_PER_YEAR:g}" for s in saved.landmarks_days) + " years"),
        ("horizons", ", ".join(f"{h / DAYS_PER_YEAR:g}" for h in ev.horizons) + " years"),
        ("bootstrap resamples", str(n_boot)),
        ("seed", str(new.seed)),
        ("closed-test level", f"{alpha:g}"),
    ]
    page = write_external_report(
        ev, out, title=f"External validation of {saved.name}", threshold=threshold, facts=facts
    )
    bundle = Path(saved.bundle_path) if saved.bundle_path is not None else Path(model_path)
    manifest = {
        "riskbench_external_validation": 1,
        "started_utc": started,
        "finished_utc": utc_now(),
        "model": {"name": saved.name, "family": saved.family, "bundle": bundle.name, "sha256": _sha256(bundle)},
        "configuration": None
        if new.config_file is None
        else {"file": new.config_file.name, "sha256": _sha256(new.config_file)},
        "inputs": {
            Path(str(p)).name: _sha256(Path(str(p)))
            for p in (getattr(s, "path", s) for s in new.sources)
            if Path(str(p)).is_file()
        },
        "seed": new.seed,
        "bootstrap_resamples": n_boot,
        "alpha": alpha,
        "shrink_revision": shrink_revision,
        "chosen_update": {f"{h:g}": ev.chosen(h) for h in ev.horizons},
        "versions": package_versions(),
    }
    (out / "manifest.json").write_text(json.dumps(manifest, indent=2) + "\n", encoding="utf-8")
    write_marker(out, "complete")
    return page, ev


def summary_lines(ev: Any) -> list[str]:
    """One line per horizon: O/E of the original model, the chosen update and its O/E (pooled rows)."""
    from riskbench.validation.updating import METHOD_WORDS

    table = ev.comparison()
    lines = []
    for h in ev.horizons:
        oe = table[(table["horizon_days"] == h) & (table["metric"] == "oe_ratio")].set_index("model")
        chosen = ev.chosen(h)

        def text(model: str, frame: pd.DataFrame = oe) -> str:
            r = frame.loc[model]
            return f"{r['estimate']:.2f} ({r['ci_low']:.2f} to {r['ci_high']:.2f})"

        line = (
            f"at {h / DAYS_PER_YEAR:g} years: O/E of the original model {text('original')}; chosen: "
            f"{METHOD_WORDS[chosen]}"
        )
        if chosen != "original" and chosen in oe.index:
            line += f", O/E after updating {text(chosen)}"
        lines.append(line)
    return lines


def _validate(args: argparse.Namespace) -> int:
    from riskbench.time_units import parse_duration

    horizons = None
    if args.horizons:
        try:
            horizons = [parse_duration(part) for part in args.horizons.split(",") if part.strip()]
        except ValueError as exc:
            raise ExternalRunError(f"--horizons {args.horizons!r}: {exc}") from None
    page, ev = validate_saved_model(
        args.model,
        args.out,
        config_path=args.config,
        data=args.data,
        overwrite=args.overwrite,
        resamples=args.resamples,
        alpha=args.alpha,
        shrink_revision=args.shrink_revision,
        horizons_days=horizons,
    )
    for line in summary_lines(ev):
        print(line)
    print(page)
    return 0


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add ``validate-model`` to the ``riskbench`` command line."""
    cmd = subparsers.add_parser(
        "validate-model",
        help="validate a saved model on another cohort, fit its updates and choose one",
        description="Build the new cohort's rows with the saved model's own cohort rules, measure the model's "
        "performance and calibration there, fit recalibration in the large, of intercept and slope, per-landmark "
        "baselines and a revision, choose among them by a closed test, and write tables, figures and report.html "
        "into OUT. Research software, not a medical device.",
    )
    cmd.add_argument("model", help="the saved model: models/<name>.bundle.json of a run folder")
    cmd.add_argument(
        "--config",
        help="analysis configuration of the new cohort (TOML): sources, seed, "
        "[validation] bootstrap_resamples, [report] settings",
    )
    cmd.add_argument(
        "--data",
        help="folder with the new cohort's patients, measurements and outcomes "
        "(.parquet or .csv); replaces the configuration's sources",
    )
    cmd.add_argument("--out", required=True, help="output folder to create")
    cmd.add_argument("--overwrite", action="store_true", help="replace an output folder an earlier run made")
    cmd.add_argument(
        "--resamples",
        type=int,
        default=None,
        help="bootstrap resamples of patients (default: [validation] bootstrap_resamples)",
    )
    cmd.add_argument("--alpha", type=float, default=0.05, help="significance level of the closed test (0.05)")
    cmd.add_argument(
        "--horizons",
        help='horizons to validate at, e.g. "1 year, 2 years" (default: the report '
        "horizons of --config within the model's prediction window, and the window)",
    )
    cmd.add_argument(
        "--shrink-revision", action="store_true", help="shrink the revised coefficients towards the original model"
    )
    cmd.set_defaults(handler=_validate)
