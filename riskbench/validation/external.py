"""External validation of a fitted model on a new cohort, and the updates that cohort warrants.

Given a fitted model (any model answering ``predict_risk``) and the new cohort's landmark stack,
:func:`validate_externally`

1. predicts with the original model at each horizon;
2. fits every updating method of :mod:`riskbench.validation.updating` at each horizon and chooses among them by
   the closed test;
3. evaluates the original and every updated model on the new cohort with
   :func:`riskbench.validation.landmark_performance.landmark_performance` (Harrell's and Uno's C, AUC, Brier,
   scaled Brier and observed/expected at each landmark and pooled, the AUC curve and decision curves, with
   percentile intervals from a seeded bootstrap that resamples patients with all their landmark rows);
4. estimates by the bootstrap how much of each update's calibration on this cohort is optimism
   (:mod:`riskbench.validation.update_optimism`);
5. computes the calibration of each model at each horizon against its own estimand
   (:func:`riskbench.metrics.calibration_at_horizon`, a patient's rows one cluster) and, if asked, the triage
   operating point of the original and the chosen model.

This module starts from a model already fitted elsewhere (a saved model); to fit model specifications on one
cohort and compare them on another, see :func:`riskbench.validation.holdout.external_validation`.

What the intervals cover: the original model's performance is a genuine external validation. An updated model
was estimated on the same cohort it is scored on, so its performance is apparent (optimistic by about as much
as the parameters it re-estimates allow; least for recalibration in the large); the bootstrap holds the fitted
updates fixed and resamples patients for the evaluation only.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from riskbench.metrics.calibration import Calibration, calibration_at_horizon, target_status
from riskbench.metrics.inputs import MetricInputError
from riskbench.metrics.triage import triage_operating_point
from riskbench.models.prediction_target import fitted_target
from riskbench.validation.errors import ValidationInputError
from riskbench.validation.landmark_performance import EvaluationRows, LandmarkPerformance, landmark_performance
from riskbench.validation.parallel import ExecutionConfig
from riskbench.validation.performance import evaluation_time, stack_outcome
from riskbench.validation.update_optimism import optimism_for
from riskbench.validation.updating import (
    METHODS,
    ClosedTest,
    UpdateFit,
    closed_test,
    fit_update,
    updating_rows,
)

__all__ = ["ExternalValidation", "validate_externally"]


@dataclass(frozen=True)
class ExternalValidation:
    """Everything :func:`validate_externally` found.

    Attributes
    ----------
    horizons
        Horizons (days after the landmark).
    target
        What the model's risk estimates (``"cumulative_incidence"`` or ``"cause_specific"``).
    fits
        Horizon -> method -> :class:`~riskbench.validation.updating.UpdateFit` (methods that could be fitted).
    tests
        Horizon -> closed test.
    risks
        Model (``"original"`` or a method) -> ``(n_rows, len(horizons))`` risks on the new cohort's rows.
    performance
        Per-landmark and pooled measures of every model, AUC curve and decision curves, with intervals.
    calibration
        ``(model, horizon)`` -> calibration on the new cohort.
    triage
        ``model, horizon_days`` and the triage table's columns (empty when not asked or not reachable).
    skipped
        ``(part, reason)`` for every method or measure that could not be computed.
    update_optimism
        Bootstrap optimism of each update's O/E and calibration slope
        (:func:`riskbench.validation.update_optimism.update_optimism`).
    n_rows, n_patients, n_outcomes
        Landmark rows, patients and outcomes within the longest horizon of the new cohort.
    """

    horizons: tuple[float, ...]
    target: str
    fits: dict[float, dict[str, UpdateFit]]
    tests: dict[float, ClosedTest]
    risks: dict[str, np.ndarray]
    performance: LandmarkPerformance
    calibration: dict[tuple[str, float], Calibration]
    triage: pd.DataFrame
    skipped: list[tuple[str, str]] = field(default_factory=list)
    update_optimism: pd.DataFrame = field(default_factory=pd.DataFrame)
    n_rows: int = 0
    n_patients: int = 0
    n_outcomes: int = 0

    def chosen(self, horizon: float) -> str:
        """The method the closed test chose at ``horizon`` (``"original"``: no update warranted)."""
        return self.tests[float(horizon)].chosen

    def comparison(self) -> pd.DataFrame:
        """Original and updated models side by side: pooled measures at each horizon with intervals, the
        calibration slope and intercept, and which model the closed test chose.

        Columns ``horizon_days, model, chosen, metric, estimate, ci_low, ci_high``.
        """
        pooled = self.performance.measures[self.performance.measures["landmark_days"].isna()]
        frame = pooled[["horizon_days", "model", "metric", "estimate", "ci_low", "ci_high"]].copy()
        extra = []
        for (model, h), cal in self.calibration.items():
            extra.append(
                (
                    h,
                    model,
                    "calibration_slope",
                    cal.slope,
                    cal.slope - 1.96 * cal.slope_se,
                    cal.slope + 1.96 * cal.slope_se,
                )
            )
            extra.append(
                (
                    h,
                    model,
                    "calibration_intercept",
                    cal.intercept,
                    cal.intercept - 1.96 * cal.intercept_se,
                    cal.intercept + 1.96 * cal.intercept_se,
                )
            )
        if extra:
            frame = pd.concat([frame, pd.DataFrame(extra, columns=frame.columns)], ignore_index=True)
        frame.insert(
            2, "chosen", [self.tests[float(h)].chosen == m for h, m in zip(frame["horizon_days"], frame["model"])]
        )
        order = {m: i for i, m in enumerate(METHODS)}
        frame["_order"] = frame["model"].map(order)
        return frame.sort_values(["horizon_days", "metric", "_order"]).drop(columns="_order").reset_index(drop=True)

    def updates(self) -> pd.DataFrame:
        """Estimated parameters of every update at every horizon (``method, horizon_days, term, estimate, se,
        original_value``)."""
        tables = [fit.table() for by_method in self.fits.values() for fit in by_method.values() if fit.terms]
        return pd.concat(tables, ignore_index=True) if tables else pd.DataFrame()

    def closed_tests(self) -> pd.DataFrame:
        """The closed tests of every horizon, with the method chosen."""
        frames = [t.tests.assign(horizon_days=h, chosen=t.chosen) for h, t in self.tests.items()]
        return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame()


def _attempt(skipped: list[tuple[str, str]], part: str, compute: Callable[..., Any], *args: Any, **kwargs: Any) -> Any:
    try:
        return compute(*args, **kwargs)
    except (ValidationInputError, MetricInputError, np.linalg.LinAlgError) as exc:
        skipped.append((part, str(exc)))
        return None


def validate_externally(
    model: object,
    stack: pd.DataFrame,
    horizons: Sequence[float],
    *,
    methods: Sequence[str] = METHODS[1:],
    shrink_revision: bool = False,
    alpha: float = 0.05,
    target: str | None = None,
    thresholds: Sequence[float] = (),
    triage_target_npv: float | None = None,
    min_outcomes: int = 1,
    n_boot: int = 200,
    seed: int = 0,
    config: ExecutionConfig | None = None,
) -> ExternalValidation:
    """Validate a fitted model on a new cohort's landmark stack and fit and choose its updates.

    Parameters
    ----------
    model
        Fitted model answering ``predict_risk(table, horizon)``.
    stack
        The new cohort's landmark stack (``patient_id, landmark, time, status`` and the model's covariates),
        built with the horizon at least as long as the longest of ``horizons``.
    horizons
        Horizons (days) to validate and update at; the decision curves use the longest.
    methods
        Updating methods to fit (default all of :data:`~riskbench.validation.updating.METHODS` but the original).
    shrink_revision
        Shrink the revision towards the original model.
    alpha
        Significance level of the closed test.
    target
        What the model's risk estimates (default read from the model).
    thresholds
        Risk thresholds of the decision curves (none: no curves).
    triage_target_npv
        NPV of the triage operating point (None: no triage).
    min_outcomes
        Outcomes a landmark needs before a horizon to be measured (the small-count threshold, typically).
    n_boot, seed
        Bootstrap replicates (patients resampled) and their seed.
    config
        Where the bootstrap replicates run (serial by default).

    Returns
    -------
    ExternalValidation
    """
    hs = tuple(sorted({float(h) for h in horizons}))
    if not hs:
        raise ValidationInputError("give at least one horizon (days) to validate at")
    unknown = [m for m in methods if m not in METHODS[1:]]
    if unknown:
        raise ValidationInputError(f"unknown updating method(s) {unknown}; choose from {', '.join(METHODS[1:])}")
    target = target or fitted_target(model)
    skipped: list[tuple[str, str]] = []
    fits: dict[float, dict[str, UpdateFit]] = {}
    tests: dict[float, ClosedTest] = {}
    risks: dict[str, np.ndarray] = {"original": np.full((len(stack), len(hs)), np.nan)}
    time, raw_status = stack_outcome(stack)
    status = target_status(raw_status, target)
    rows_at: dict[float, tuple[Any, np.ndarray, np.ndarray]] = {}
    for j, h in enumerate(hs):
        rows = updating_rows(model, stack, h, target=target)
        rows_at[h] = (rows, time, status)
        risks["original"][:, j] = rows.risk
        fits[h] = {}
        for method in methods:
            fit = _attempt(
                skipped,
                f"{method} at {h:g} days",
                fit_update,
                rows,
                method,
                shrink=shrink_revision and method == "revision",
            )
            if fit is None:
                continue
            fits[h][method] = fit
            risks.setdefault(method, np.full((len(stack), len(hs)), np.nan))[:, j] = fit.risk(
                rows.risk, rows.landmark, rows.x
            )
        # the closed test compares unshrunk fits
        unshrunk = dict(fits[h])
        if shrink_revision and "revision" in unshrunk:
            unshrunk["revision"] = fit_update(rows, "revision")
        tests[h] = closed_test(unshrunk, alpha=alpha)
    complete = {m: r for m, r in risks.items() if np.isfinite(r).all()}
    for m in set(risks) - set(complete):
        skipped.append((m, "could not be fitted at every horizon; left out of the performance tables"))

    eval_rows = EvaluationRows.from_stack(stack)
    longest = hs[-1]
    performance = landmark_performance(
        eval_rows,
        hs,
        complete,
        report_days=hs,
        curve_days=(),
        decision_days=longest if len(thresholds) else None,
        thresholds=thresholds,
        targets={m: target for m in complete},
        min_outcomes=min_outcomes,
        n_boot=n_boot,
        seed=seed,
        config=config,
    )
    calibration: dict[tuple[str, float], Calibration] = {}
    for j, h in enumerate(hs):
        t_eval = evaluation_time(h, eval_rows.time)
        for m, r in complete.items():
            cal = _attempt(
                skipped,
                f"calibration of {m} at {h:g} days",
                calibration_at_horizon,
                eval_rows.time,
                eval_rows.status,
                r[:, j],
                t_eval,
                target=target,
                cluster=eval_rows.patient,
                n_boot=min(n_boot, 100),
                seed=seed,
            )
            if cal is not None:
                calibration[(m, h)] = cal
    triage = _triage(eval_rows, complete, hs, tests, triage_target_npv, n_boot, seed, skipped)
    optimism = optimism_for(
        rows_at,
        fits,
        n_boot=n_boot,
        seed=seed,
        shrink_revision=shrink_revision,
        methods=[m for m in complete if m != "original"],
    )
    outcomes = int(((eval_rows.status == 1) & (eval_rows.time <= longest)).sum())
    return ExternalValidation(
        hs,
        target,
        fits,
        tests,
        complete,
        performance,
        calibration,
        triage,
        skipped,
        update_optimism=optimism,
        n_rows=len(stack),
        n_patients=int(np.unique(eval_rows.patient).size),
        n_outcomes=outcomes,
    )


def _triage(
    rows: EvaluationRows,
    risks: dict[str, np.ndarray],
    horizons: tuple[float, ...],
    tests: dict[float, ClosedTest],
    target_npv: float | None,
    n_boot: int,
    seed: int,
    skipped: list[tuple[str, str]],
) -> pd.DataFrame:
    """Triage operating point of the original and the chosen model at each horizon."""
    if target_npv is None:
        return pd.DataFrame()
    tables = []
    for j, h in enumerate(horizons):
        t_eval = evaluation_time(h, rows.time)
        for m in dict.fromkeys(("original", tests[h].chosen)):
            if m not in risks:
                continue
            table = _attempt(
                skipped,
                f"triage of {m} at {h:g} days",
                triage_operating_point,
                rows.time,
                rows.status,
                risks[m][:, j],
                t_eval,
                target_npv=target_npv,
                n_boot=n_boot,
                seed=seed,
            )
            if table is not None:
                tables.append(table.assign(model=m, horizon_days=h))
    return pd.concat(tables, ignore_index=True) if tables else pd.DataFrame()
