"""Bootstrap optimism correction of apparent performance (Harrell, Lee & Mark 1996; Steyerberg et al. 2001).

1. Fit each spec on all patients and evaluate it on them: the *apparent* performance.
2. For b = 1..B: draw patients with replacement (all rows of a drawn patient come along, each copy a
   distinct patient), rebuild the tables for the drawn patients through the table source (the cohort
   stage's derivation when the source is :class:`~riskbench.validation.sources.CohortDerivation`), refit,
   and evaluate the refit on the drawn patients (bootstrap performance) and on the original patients
   (test performance). The optimism of replicate b is bootstrap minus test.
3. Corrected = apparent − mean optimism.

References: Harrell FE, Lee KL, Mark DB (1996) Stat Med 15:361-387; Steyerberg EW, Harrell FE et al.
(2001) J Clin Epidemiol 54:774-781.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from riskbench.models.fit_warnings import FitWarning, count_warnings, recorded_warnings
from riskbench.validation.comparison import (
    REPLICATE_ERRORS,
    ReplicateLog,
    collect_replicates,
    failed_replicate,
    fit_all_recorded,
    replicate_problems,
    tagged_replicate,
)
from riskbench.validation.errors import ValidationInputError
from riskbench.validation.model_specs import ModelSpec
from riskbench.validation.paired import Evaluation, check_specs, fit_all, percentile_summary, predict_all
from riskbench.validation.parallel import ExecutionConfig, run_replicates, seed_to_int
from riskbench.validation.performance import check_horizons
from riskbench.validation.plans import bootstrap_patient_draw
from riskbench.validation.sources import TableSource, draw_tables

OPTIMISM_KEYS = ["spec", "metric", "horizon_days", "threshold"]


@dataclass(frozen=True)
class _OptimismJob:
    evaluation: Evaluation
    source: TableSource


def _optimism_replicate(job: _OptimismJob, index: int, seed: np.random.SeedSequence) -> Any:
    rng = np.random.default_rng(seed)
    drawn = bootstrap_patient_draw(job.source.patient_ids(), rng)
    log = ReplicateLog()
    try:
        boot_tables = draw_tables(job.source, drawn)
        plan = job.evaluation
        models = fit_all_recorded(plan.specs, boot_tables, seed_to_int(seed), log)
        boot_stack, orig_stack = boot_tables.landmark_stack, job.source.full_tables().landmark_stack
        with recorded_warnings():  # a poor refit may warn while being measured; the result says enough
            # The drawn rows repeat original rows: predict each distinct row once for both evaluations.
            risk_boot, risk_orig = predict_all(plan.specs, models, [boot_stack, orig_stack], plan.horizons)
            on_boot, _ = plan.run(models, boot_stack, risk_boot)
            on_orig, _ = plan.run(models, orig_stack, risk_orig)
    except REPLICATE_ERRORS as exc:
        return failed_replicate(index, exc, log)
    frame = on_boot.rename(columns={"value": "bootstrap"})
    frame["test"] = on_orig["value"].to_numpy()
    frame["value"] = frame["bootstrap"] - frame["test"]
    return tagged_replicate(index, frame, log=log)


@dataclass(frozen=True)
class OptimismResult:
    """Result of :func:`bootstrap_optimism_result`.

    Attributes
    ----------
    table : pandas.DataFrame
        The optimism table (what :func:`bootstrap_optimism` returns).
    n_failed : int
        Replicates dropped because a refit or measure failed on that resample.
    failures : tuple of (str, str)
        Why each dropped replicate failed: ``(spec whose refit failed, or "", error)``.
    fit_log : tuple of (str, list of FitWarning)
        Every refit of every replicate: the spec name and the warnings it raised.
    """

    table: pd.DataFrame
    n_failed: int = 0
    failures: tuple[tuple[str, str], ...] = ()
    fit_log: tuple[tuple[str, list[FitWarning]], ...] = ()

    @property
    def fit_warnings(self) -> pd.DataFrame:
        """Warnings of the refits counted per spec and kind (:func:`~riskbench.models.fit_warnings.count_warnings`)."""
        return count_warnings(self.fit_log)


def bootstrap_optimism_result(
    specs: ModelSpec | Sequence[ModelSpec],
    source: TableSource,
    horizons: Sequence[float],
    *,
    n_boot: int = 200,
    seed: int = 0,
    thresholds: Sequence[float] = (),
    level: float = 0.95,
    config: ExecutionConfig | None = None,
) -> OptimismResult:
    """Apparent, optimism and optimism-corrected performance of each spec, with the failed replicates (and
    why) and the refits' warnings.

    Parameters
    ----------
    specs : ModelSpec or sequence of ModelSpec
    source : TableSource
        Gives the tables of any set of patients (module notes).
    horizons : sequence of float
        Horizons (days).
    n_boot : int, default 200
        Bootstrap replicates (Steyerberg et al. 2001 found 100-200 adequate; **common practice** 200).
    seed : int, default 0
    thresholds : sequence of float
        Net-benefit thresholds (optional).
    level : float, default 0.95
        Coverage of the percentile interval of the per-replicate optimism.
    config : ExecutionConfig, optional

    Returns
    -------
    OptimismResult
        ``table``: ``spec, metric, horizon_days, threshold, apparent, optimism, corrected, optimism_low,
        optimism_high, n_boot`` for Harrell's C, Uno's C, AUC, Brier, scaled Brier, calibration slope and
        ICI at each horizon (and net benefit per threshold); ``n_boot`` counts replicates that succeeded.

    Raises
    ------
    ValidationInputError
        If every replicate failed (the message gives the first reasons).
    """
    specs = check_specs(specs)
    if n_boot < 1:
        raise ValidationInputError(f"n_boot must be at least 1; got {n_boot}.")
    full = source.full_tables()
    hs = check_horizons(horizons, full.landmark_stack)
    plan = Evaluation.build(specs, hs, pairs=(), thresholds=thresholds)
    apparent, _ = plan.run(fit_all(specs, full, seed), full.landmark_stack)
    job = _OptimismJob(evaluation=plan, source=source)
    results = run_replicates(_optimism_replicate, job, seed, n_boot, config, description="bootstrap optimism")
    reps, _, n_failed = collect_replicates(results)
    summary = percentile_summary(reps, OPTIMISM_KEYS, level=level).rename(
        columns={"estimate": "optimism", "ci_low": "optimism_low", "ci_high": "optimism_high"}
    )
    out = apparent.rename(columns={"value": "apparent"}).merge(summary, on=OPTIMISM_KEYS, how="left")
    out["corrected"] = out["apparent"] - out["optimism"]
    table = out[OPTIMISM_KEYS + ["apparent", "optimism", "corrected", "optimism_low", "optimism_high", "n_boot"]]
    failures, fit_log = replicate_problems(results)
    return OptimismResult(table, n_failed, failures, fit_log)


def bootstrap_optimism(specs: ModelSpec | Sequence[ModelSpec], source: TableSource, horizons: Sequence[float],
                       **options: Any) -> pd.DataFrame:
    """The table of :func:`bootstrap_optimism_result` (same parameters, given by keyword)."""
    return bootstrap_optimism_result(specs, source, horizons, **options).table
