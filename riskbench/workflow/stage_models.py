"""Stage 2, models: fit every configured model on the whole cohort.

Writes ``tables/coefficients_<model>.csv`` (terms with coefficients, and hazard ratios with 95% intervals for
the main terms, for models that have coefficients), ``tables/hazard_ratios_<model>.csv`` (hazard ratios per a
step of each covariate, stated in ``per``: :mod:`riskbench.report.effects`), ``figures/hazard_ratios`` (forest
plot of those), ``figures/landmark_effects`` (β(s) of landmark-varying effects with pointwise 95% bands),
``tables/landmark_effect_forms.csv`` (likelihood-ratio test of the richer landmark form), and
``data/apparent_predictions.parquet`` (``row, model, horizon, risk``: each landmark-stack row's predicted
risk at every evaluation horizon, horizons in days), and every fitted model under ``models/`` (model file,
``<model>.bundle.json`` and the model sheet ``<model>.md``: :mod:`riskbench.workflow.model_bundle`).

A model that cannot be fitted on the whole cohort (too few outcomes for its coefficients, separation,
collinear covariates) does not stop the run: it is left out of this and the later stages, and
``notes/models.json`` says why in the user's terms (:mod:`riskbench.workflow.fit_diagnosis`); the other
models carry on. Warnings raised while fitting are recorded and counted per model (not printed).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from matplotlib.figure import Figure

from riskbench.models.fit_warnings import FitWarning, count_warnings, recorded_warnings
from riskbench.models.missing_data import rows_without_prediction
from riskbench.models.risk_contract import risk_curve
from riskbench.report.notes import Note, save_notes
from riskbench.report.outputs import load_data, save_data, save_figure, save_table
from riskbench.validation.model_specs import COUNTING_PROCESS_FAMILIES
from riskbench.workflow.config import AnalysisConfig, ConfigError
from riskbench.workflow.fit_diagnosis import describe_fit_failure, describe_warnings
from riskbench.workflow.joint_outputs import joint_model_outputs
from riskbench.workflow.model_bundle import save_run_model
from riskbench.workflow.model_effects import PART_ERRORS, coefficient_table, effect_bands, form_tests, model_effects
from riskbench.workflow.model_factory import fit_model
from riskbench.workflow.stage_cohort import covariate_labels
from riskbench.workflow.stage_result import ModelsStageResult, StageResult
from riskbench.workflow.term_labels import term_label

#: Errors that make one model's fit (or prediction) fail without stopping the run. A ConfigError is not
#: among them: a configuration mistake stops the run with its own message.
FIT_ERRORS: tuple[type[BaseException], ...] = (ValueError, ArithmeticError)


def evaluation_horizons(config: AnalysisConfig, n_grid: int = 8) -> np.ndarray:
    """Horizons (days) at which risks are predicted: a grid up to the horizon plus the report horizons."""
    w = config.landmarks.horizon_days
    grid = np.linspace(w / n_grid, w, n_grid)
    return np.unique(np.round(np.r_[grid, config.report.horizons_days], 6))


def predictions_long(
    model: Any, stack: pd.DataFrame, name: str, horizons: np.ndarray, rows: np.ndarray | None = None
) -> pd.DataFrame:
    """Risks of ``model`` for the stack rows at each horizon, as ``row, model, horizon, risk``.

    Raises
    ------
    FloatingPointError
        When a predicted risk is not a finite number (a fit whose coefficients ran off to infinity).
    """
    curve = np.asarray(risk_curve(model, stack, horizons), dtype=float)
    bad = ~np.isfinite(curve) & ~rows_without_prediction(model, stack)[:, None]  # complete cases: NaN by design
    if bad.any():
        raise FloatingPointError(
            f"{int(bad.any(axis=1).sum())} of {len(stack)} predicted risks are not finite numbers "
            "(overflow: some coefficients are extreme)"
        )
    rows = np.arange(len(stack)) if rows is None else rows
    return pd.DataFrame(
        {
            "row": np.repeat(rows, len(horizons)),
            "model": name,
            "horizon": np.tile(horizons, len(stack)),
            "risk": curve.reshape(-1),
        }
    )


@dataclass
class RecordedFit:
    """One model's fit (and predictions) with its warnings, or the reason it failed in the user's terms."""

    model: Any = None
    predictions: pd.DataFrame | None = None
    warnings: list[FitWarning] = field(default_factory=list)
    failure: str | None = None


def fit_recorded(
    spec: Any,
    fit_stack: pd.DataFrame,
    fit_cp: pd.DataFrame | None,
    *,
    seed: int,
    threshold: int,
    horizons: np.ndarray,
    predict_stack: pd.DataFrame,
    predict_rows: np.ndarray | None = None,
    where: str = "on the whole cohort",
    missing_data: Any = None,
) -> RecordedFit:
    """Fit one configured model and predict ``predict_stack``, recording warnings and catching failures.

    A fit or prediction that fails with a numerical or data error gives ``failure`` (a sentence naming the
    likely cause with the counts, see :func:`riskbench.workflow.fit_diagnosis.describe_fit_failure`);
    a :class:`~riskbench.workflow.config.ConfigError` propagates.
    """
    out = RecordedFit()
    with recorded_warnings() as log:
        try:
            out.model = fit_model(spec, fit_stack, fit_cp, seed=seed, missing_data=missing_data)
            out.predictions = predictions_long(out.model, predict_stack, spec.name, horizons, predict_rows)
        except ConfigError:
            raise
        except FIT_ERRORS as exc:
            out.model, out.predictions = None, None
            out.failure = describe_fit_failure(spec, exc, fit_stack, fit_cp, threshold=threshold, where=where)
    out.warnings = log
    return out


def outcome_hazard_ratios(summary: pd.DataFrame) -> pd.DataFrame:
    """The outcome terms of a model summary (the competing-event model is not reported; see ``summary()``)."""
    if "cause" in summary.columns:
        summary = summary[summary["cause"] == "outcome"]
    if "term" not in summary.columns:  # a Cox model's summary names its terms in the index
        summary = summary.rename_axis("term").reset_index()
    return summary.reset_index(drop=True)


def hazard_ratio_figure(
    tables: dict[str, pd.DataFrame], covariates: dict[str, tuple[str, ...]], labels: Mapping[str, str] | None = None
) -> Figure:
    """Forest plot of each model's outcome hazard ratios for its covariates (main terms), per the step of
    each covariate (``tables``: :func:`riskbench.report.effects.scaled_hazard_ratios`).

    For a landmark super-model with landmark-varying effects the main term of a covariate is its effect at
    landmark 0 (entry); the β(s) figure shows how it changes. ``labels`` gives readable covariate names.
    """
    from riskbench.report.hazard_ratio_plot import hazard_ratio_figure as forest

    main = {}
    for name, table in tables.items():
        rows = table.set_index("term") if "term" in table.columns else table
        main[name] = rows.loc[[c for c in covariates[name] if c in rows.index]]
    return forest(main, labels=labels, title="Outcome hazard ratios per step (landmark-varying effects: at entry)")


def _finite_ratios(table: pd.DataFrame) -> bool:
    columns = [c for c in ("hazard_ratio", "hr_lower_95", "hr_upper_95") if c in table.columns]
    values = table[columns].to_numpy(float)
    return bool(np.isfinite(values).all() and (values > 0).all())


def run_models_stage(config: AnalysisConfig, run_dir: str | Path) -> ModelsStageResult:
    """Run stage 2 (see the module docstring); return what it wrote."""
    run_dir = Path(run_dir)
    tables = {
        "counting_process": load_data(run_dir, "counting_process"),
        "landmark_stack": load_data(run_dir, "landmark_stack"),
    }
    stack, cp = tables["landmark_stack"], tables["counting_process"]
    threshold = config.report.small_count_threshold
    horizons = evaluation_horizons(config)
    predictions: list[pd.DataFrame] = []
    result = ModelsStageResult(
        stage="models", run_dir=run_dir, landmark_stack=stack, counting_process=cp, prediction_frames=predictions
    )
    notes: list[Note] = []
    per_fit: list[tuple[str, list[FitWarning]]] = []
    hazard_ratios: dict[str, pd.DataFrame] = {}
    effects = EffectParts()
    label_of = covariate_labels(config)
    if not (stack["status"] == 2).any():
        notes.append(
            Note(
                "models",
                "competing-event model",
                "not fitted: the cohort has no competing events, so "
                "each model's risk is one minus its outcome-free survival and no competing-event "
                "column or measure is shown.",
                kind="not computed",
            )
        )
    with recorded_warnings() as stray:
        for spec in config.models:
            fit = fit_recorded(
                spec,
                stack,
                cp,
                seed=config.seed,
                missing_data=config.missing_data,
                threshold=threshold,
                horizons=horizons,
                predict_stack=stack,
            )
            if fit.failure is not None:
                notes.append(
                    Note(
                        "models",
                        "fit",
                        fit.failure + " The model is left out of the rest of the report.",
                        model=spec.name,
                        kind="fit failed",
                    )
                )
                per_fit.append((spec.name, fit.warnings))
                continue
            predictions.append(fit.predictions)
            result.models[spec.name] = fit.model
            notes += _save_model(config, spec, fit.model, stack, cp, horizons, label_of, run_dir)
            if hasattr(fit.model, "summary"):
                with recorded_warnings() as summary_log:
                    coefficients = outcome_hazard_ratios(fit.model.summary())
                fit.warnings.extend(summary_log)
                notes += _effects(
                    config, spec, fit.model, coefficients, stack, label_of, result, hazard_ratios, effects
                )
                if "term" in coefficients.columns:  # readable names beside the column names
                    coefficients.insert(
                        coefficients.columns.get_loc("term") + 1,
                        "label",
                        [term_label(t, label_of) for t in coefficients["term"]],
                    )
                result.tables[f"coefficients_{spec.name}"] = coefficient_table(coefficients)
            else:
                result.notes.append(f"Model {spec.name!r} ({spec.family}) has no coefficients to show.")
            joint_tables, joint_figures, joint_notes = joint_model_outputs(
                config, spec.name, fit.model, cp, run_dir, label_of
            )
            result.tables.update(joint_tables)
            result.figures.update(joint_figures)
            notes += joint_notes
            said = describe_warnings(spec, fit.warnings, stack, cp, threshold=threshold)
            if said:
                notes.append(Note("models", "fit on the whole cohort", said, model=spec.name, kind="fitting warnings"))
            per_fit.append((spec.name, fit.warnings))
        columns = ["row", "model", "horizon", "risk"]
        save_data(
            pd.concat(predictions, ignore_index=True) if predictions else pd.DataFrame(columns=columns),
            run_dir,
            "apparent_predictions",
        )
        if hazard_ratios:
            covariates = {m.name: m.covariates for m in config.models}
            labels = {
                c: f"{term_label(c, label_of)}, per {effects.per.get(c, '1')}" for cs in covariates.values() for c in cs
            }
            result.figures["hazard_ratios"] = save_figure(
                hazard_ratio_figure(hazard_ratios, covariates, labels), run_dir, "hazard_ratios"
            )
        notes += _landmark_effect_outputs(effects, label_of, result, run_dir)
        from riskbench.workflow.review_items import cox_checks  # PH tests and the nested LR test

        checks, check_notes = cox_checks(
            config, stack, cp, label_of, frozenset(n.model for n in notes if n.kind == "fit failed")
        )
        result.tables.update(checks)
        notes += check_notes
    if stray:
        per_fit.append(("(outside the fits)", list(stray)))
    save_notes(run_dir, "models", notes, count_warnings(per_fit))
    result.notes.extend(n.sentence() for n in notes)
    for name, table in result.tables.items():
        save_table(table, run_dir, name)
    return result


def _save_model(
    config: AnalysisConfig,
    spec: Any,
    model: Any,
    stack: pd.DataFrame,
    cp: pd.DataFrame | None,
    horizons: np.ndarray,
    label_of: Callable[[str], str],
    run_dir: Path,
) -> list[Note]:
    """Save one fitted model under ``models/`` with its bundle and model sheet
    (:func:`riskbench.workflow.model_bundle.save_run_model`; every family, the joint model included); a model
    whose files cannot be written becomes a note."""
    development = cp if spec.family in ("cox", *COUNTING_PROCESS_FAMILIES) and cp is not None else stack
    try:
        with recorded_warnings():
            save_run_model(
                run_dir,
                spec.name,
                spec.family,
                model,
                cohort_rules=config.cohort,
                development=development,
                landmarks_days=config.landmarks.landmarks_days,
                prediction_window_days=config.landmarks.horizon_days,
                horizons_days=horizons,
                labels={c: label_of(c) for c in spec.covariates},
                seed=config.seed,
            )
    except FIT_ERRORS + (OSError,) as exc:
        return [Note("models", "saved model", f"not saved: {exc}", model=spec.name, kind="not computed")]
    return []


@dataclass
class EffectParts:
    """What the models stage gathers for the effect outputs: the β(s) bands per model, the landmark-form
    tests, and the steps (``per`` texts and sizes) of the covariates."""

    bands: dict[str, pd.DataFrame] = field(default_factory=dict)
    form_tests: list[dict[str, Any]] = field(default_factory=list)
    per: dict[str, str] = field(default_factory=dict)
    steps: dict[str, float] = field(default_factory=dict)


def _effects(
    config: AnalysisConfig,
    spec: Any,
    model: Any,
    coefficients: pd.DataFrame,
    stack: pd.DataFrame,
    label_of: Callable[[str], str],
    result: StageResult,
    hazard_ratios: dict[str, pd.DataFrame],
    effects: EffectParts,
) -> list[Note]:
    """Hazard ratios per step (table and figure entry), β(s) bands and landmark-form tests of one model."""
    notes: list[Note] = []
    try:
        table, steps = model_effects(
            model, coefficients, stack, list(spec.covariates), getattr(config.report, "effect_units", {}), label_of
        )
    except PART_ERRORS as exc:
        return [Note("models", "hazard ratios per step", f"not computed: {exc}", model=spec.name)]
    result.tables[f"hazard_ratios_{spec.name}"] = table
    effects.per.update(dict(zip(table["term"], table["per"])))
    effects.steps.update({c: s.size for c, s in steps.items()})
    if _finite_ratios(table):
        hazard_ratios[spec.name] = table
    else:
        notes.append(
            Note(
                "models",
                "hazard-ratio figure",
                "left out of the figure: some hazard ratios or intervals are not finite (see its hazard-ratio table).",
                model=spec.name,
            )
        )
    for part, compute in (
        ("β(s) figure", lambda: effect_bands(model)),
        ("landmark-effect likelihood-ratio test", lambda: form_tests(model, spec, stack)),
    ):
        try:
            with recorded_warnings():
                value = compute()
        except PART_ERRORS as exc:
            notes.append(Note("models", part, f"not computed: {exc}", model=spec.name))
            continue
        if isinstance(value, pd.DataFrame):
            effects.bands[spec.name] = value
        elif value:
            effects.form_tests.extend(value)
    return notes


def _landmark_effect_outputs(
    effects: EffectParts, label_of: Callable[[str], str], result: StageResult, run_dir: Path
) -> list[Note]:
    """The β(s) figure and the landmark-form test table."""
    from riskbench.report.landmark_effect_plot import landmark_effect_figure

    if effects.form_tests:
        result.tables["landmark_effect_forms"] = pd.DataFrame(effects.form_tests)
    if not effects.bands:
        return []
    labels = {c: label_of(c) for table in effects.bands.values() for c in table["covariate"].unique()}
    try:
        figure = landmark_effect_figure(effects.bands, effects.steps, labels, effects.per)
    except PART_ERRORS as exc:
        return [Note("models", "β(s) figure", f"not drawn: {exc}")]
    result.figures["landmark_effects"] = save_figure(figure, run_dir, "landmark_effects")
    return []
