"""Evaluation on held-out patients: cross-validation folds, a temporal split, an external cohort."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from riskbench.validation.comparison import (
    REPLICATE_ERRORS,
    Comparison,
    failed_replicate,
    summarise_comparison,
    tagged_replicate,
)
from riskbench.validation.errors import ValidationInputError
from riskbench.validation.model_specs import ModelSpec
from riskbench.validation.paired import Evaluation, check_specs, fit_all
from riskbench.validation.parallel import ExecutionConfig, run_replicates, seed_to_int
from riskbench.validation.performance import check_horizons
from riskbench.validation.plans import Split, bootstrap_patient_draw
from riskbench.validation.sources import TableSource, draw_tables, subset_tables


@dataclass(frozen=True)
class _SplitJob:
    evaluation: Evaluation
    source: TableSource
    splits: tuple[Split, ...]


def _split_replicate(job: _SplitJob, index: int, seed: np.random.SeedSequence) -> Any:
    split = job.splits[index]
    overlap = np.intersect1d(split.fit_ids, split.eval_ids)
    if len(overlap):
        raise ValidationInputError(
            f"split '{split.label}' has {len(overlap)} patients on both sides (e.g. {overlap[:3].tolist()}); "
            "build splits with riskbench.validation.plans."
        )
    models = fit_all(job.evaluation.specs, job.source.tables(split.fit_ids), seed_to_int(seed))
    stack = subset_tables(job.source.full_tables(), split.eval_ids).landmark_stack
    per_spec, per_pair = job.evaluation.run(models, stack)
    for frame in (per_spec, per_pair):
        frame.insert(0, "split", split.label)
    return per_spec, per_pair


def evaluate_splits(
    specs: Sequence[ModelSpec],
    source: TableSource,
    splits: Sequence[Split],
    horizons: Sequence[float],
    *,
    pairs: str | Sequence[tuple[int, int]] = "all",
    thresholds: Sequence[float] = (),
    nri_categories: Sequence[float] | None = None,
    seed: int = 0,
    config: ExecutionConfig | None = None,
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Fit on each split's fitting patients, evaluate on its evaluation patients.

    Parameters
    ----------
    specs : sequence of ModelSpec
    source : TableSource
    splits : sequence of Split
        From :func:`~riskbench.validation.plans.patient_folds` or
        :func:`~riskbench.validation.plans.temporal_split`.
    horizons : sequence of float
        Horizons (days).
    pairs, thresholds, nri_categories
        As in :func:`~riskbench.validation.comparison.compare_specs`.
    seed : int
        Seeds random model families (one spawned seed per split).
    config : ExecutionConfig, optional

    Returns
    -------
    (per_spec, per_pair) : pair of pandas.DataFrame
        One block of rows per split (column ``split``); average the folds of a cross-validation with
        ``per_spec.groupby(["spec", "metric", "horizon_days", "threshold"], dropna=False)["value"].mean()``.
    """
    specs = check_specs(specs)
    if not splits:
        raise ValidationInputError("evaluate_splits needs at least one split.")
    hs = check_horizons(horizons, source.full_tables().landmark_stack)
    plan = Evaluation.build(specs, hs, pairs=pairs, thresholds=thresholds, nri_categories=nri_categories)
    job = _SplitJob(evaluation=plan, source=source, splits=tuple(splits))
    results = run_replicates(_split_replicate, job, seed, len(job.splits), config, description="splits")
    return (
        pd.concat([r[0] for r in results], ignore_index=True),
        pd.concat([r[1] for r in results], ignore_index=True),
    )


@dataclass(frozen=True)
class _ExternalJob:
    evaluation: Evaluation
    models: tuple[Any, ...]
    eval_source: TableSource


def _external_replicate(job: _ExternalJob, index: int, seed: np.random.SeedSequence) -> Any:
    drawn = bootstrap_patient_draw(job.eval_source.patient_ids(), np.random.default_rng(seed))
    try:
        stack = draw_tables(job.eval_source, drawn).landmark_stack
        frames = job.evaluation.run(job.models, stack)
    except REPLICATE_ERRORS as exc:
        return failed_replicate(index, exc)
    return tagged_replicate(index, *frames)


def external_validation(
    specs: Sequence[ModelSpec],
    fit_source: TableSource,
    eval_source: TableSource,
    horizons: Sequence[float],
    *,
    n_boot: int = 200,
    seed: int = 0,
    pairs: str | Sequence[tuple[int, int]] = "all",
    thresholds: Sequence[float] = (),
    nri_categories: Sequence[float] | None = None,
    level: float = 0.95,
    config: ExecutionConfig | None = None,
) -> Comparison:
    """Fit every spec once on cohort A and evaluate it on cohort B, with bootstrap intervals over B.

    The models stay fixed; each replicate redraws B's patients with replacement, which gives the
    percentile intervals of each measure and of each paired difference (Efron & Tibshirani 1993).

    Parameters
    ----------
    specs : sequence of ModelSpec
    fit_source, eval_source : TableSource
        The development cohort (A) and the validation cohort (B).
    horizons : sequence of float
        Horizons (days).
    n_boot, seed, pairs, thresholds, nri_categories, level, config
        As in :func:`~riskbench.validation.comparison.compare_specs`.

    Returns
    -------
    Comparison
        Estimates are the values on all of B.
    """
    specs = check_specs(specs)
    eval_full = eval_source.full_tables()
    hs = check_horizons(horizons, eval_full.landmark_stack)
    shared_a = set(fit_source.patient_ids().tolist()) & set(eval_source.patient_ids().tolist())
    if shared_a:
        raise ValidationInputError(
            f"{len(shared_a)} patient ids occur in both cohorts (e.g. {sorted(shared_a)[:3]}); external "
            "validation needs separate patients. Rename ids if they are different people."
        )
    models = tuple(fit_all(specs, fit_source.full_tables(), seed))
    plan = Evaluation.build(specs, hs, pairs=pairs, thresholds=thresholds, nri_categories=nri_categories)
    job = _ExternalJob(evaluation=plan, models=models, eval_source=eval_source)
    point_spec, point_pair = plan.run(models, eval_full.landmark_stack)
    results = run_replicates(_external_replicate, job, seed, n_boot, config, description="external bootstrap")
    return summarise_comparison(results, level=level, spec_point=point_spec, pair_point=point_pair)
