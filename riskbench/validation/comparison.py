"""Paired comparison of any number of model specs on the same bootstrap resamples of patients.

Each replicate draws patients with replacement, refits every spec on the drawn patients, and evaluates all
of them on the same patients, so differences between specs are paired. Two evaluation choices:

* ``"out_of_bag"`` (default): evaluate on the patients *not* drawn (about 37 %); the estimate is the mean
  over replicates (the leave-one-out bootstrap of Efron & Tibshirani 1997, JASA 92:548-560), a
  slightly pessimistic out-of-sample value. Overfitting cannot make a useless covariate look useful here,
  which is what the imaging-vs-clinical question needs.
* ``"apparent"``: evaluate on the drawn patients; the estimate is the value on the full data and the
  interval describes its sampling variability (optimistic for larger models; see
  :func:`riskbench.validation.optimism.bootstrap_optimism` for the corrected values).

Intervals are percentile bootstrap intervals (Efron & Tibshirani 1993, ch. 13).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from riskbench.models.fit_warnings import FitWarning, count_warnings, recorded_warnings
from riskbench.validation.errors import ValidationInputError
from riskbench.validation.model_specs import ModelSpec, fit_spec, starting_values
from riskbench.validation.paired import Evaluation, check_specs, fit_all, percentile_summary
from riskbench.validation.parallel import ExecutionConfig, run_replicates, seed_to_int
from riskbench.validation.performance import METRIC_DIRECTION, check_horizons
from riskbench.validation.plans import bootstrap_patient_draw
from riskbench.validation.sources import PrecomputedTables, TableSource, ValidationTables, draw_tables, subset_tables
from riskbench.validation.table_files import ParquetTables

#: Errors a replicate may hit on an unlucky resample (a fit that cannot converge, no events by a horizon);
#: such replicates are dropped and counted, everything else propagates.
REPLICATE_ERRORS: tuple[type[BaseException], ...] = (ValueError, np.linalg.LinAlgError, FloatingPointError)


@dataclass(frozen=True)
class Comparison:
    """Result of :func:`compare_specs`.

    Attributes
    ----------
    performance : pandas.DataFrame
        ``spec, metric, horizon_days, threshold, estimate, ci_low, ci_high, n_boot``.
    differences : pandas.DataFrame
        ``reference, candidate, metric, horizon_days, threshold, estimate, ci_low, ci_high, n_boot,
        better_if`` -- candidate minus reference (NRI/IDI rows: improvement of candidate over reference).
    replicates : pandas.DataFrame
        Raw per-replicate values (``replicate`` column), for further summaries or plots.
    n_failed : int
        Replicates dropped because a fit or measure failed on that resample.
    failures : tuple of (str, str)
        Why each dropped replicate failed: ``(spec whose fit failed, or "" if the measures failed, error)``.
    fit_log : tuple of (str, list of FitWarning)
        Every refit of every replicate: the spec name and the warnings it raised.
    """

    performance: pd.DataFrame
    differences: pd.DataFrame
    replicates: pd.DataFrame
    n_failed: int
    failures: tuple[tuple[str, str], ...] = ()
    fit_log: tuple[tuple[str, list[FitWarning]], ...] = ()

    @property
    def fit_warnings(self) -> pd.DataFrame:
        """Warnings of the refits counted per spec and kind (:func:`~riskbench.models.fit_warnings.count_warnings`)."""
        return count_warnings(self.fit_log)


@dataclass
class ReplicateLog:
    """What one replicate's fits reported: each fit's warnings and the spec whose fit failed (if any)."""

    fits: list[tuple[str, list[FitWarning]]] = field(default_factory=list)
    failed_spec: str | None = None


def fit_all_recorded(
    specs: Sequence[ModelSpec],
    tables: ValidationTables,
    seed: int | None,
    log: ReplicateLog,
    starts: Sequence[Any] | None = None,
) -> list[Any]:
    """:func:`~riskbench.validation.paired.fit_all`, recording each fit's warnings (and a failing spec) in ``log``;
    ``starts`` (one per spec) make the fits resampling refits (:func:`~riskbench.validation.model_specs.fit_spec`)."""
    models = []
    for k, spec in enumerate(specs):
        try:
            with recorded_warnings() as warned:
                models.append(fit_spec(spec, tables, seed=seed, start=None if starts is None else starts[k]))
        except BaseException:
            log.failed_spec = spec.name
            raise
        finally:
            log.fits.append((spec.name, warned))
    return models


@dataclass(frozen=True)
class _ComparisonJob:
    evaluation: Evaluation
    source: TableSource
    out_of_bag: bool
    starts: tuple[Any, ...] | None = None  # whole-cohort estimates the refits start from


def _comparison_replicate(job: _ComparisonJob, index: int, seed: np.random.SeedSequence) -> Any:
    rng = np.random.default_rng(seed)
    drawn = bootstrap_patient_draw(job.source.patient_ids(), rng)
    log = ReplicateLog()
    try:
        fit_tables = draw_tables(job.source, drawn)
        models = fit_all_recorded(job.evaluation.specs, fit_tables, seed_to_int(seed), log, job.starts)
        stack = out_of_bag_stack(job.source, drawn) if job.out_of_bag else fit_tables.landmark_stack
        with recorded_warnings():  # a poor model on an unlucky resample may warn while being measured
            frames = job.evaluation.run(models, stack)
    except REPLICATE_ERRORS as exc:
        return failed_replicate(index, exc, log)
    return tagged_replicate(index, *frames, log=log)


def out_of_bag_stack(source: TableSource, drawn: np.ndarray) -> pd.DataFrame:
    """The landmark-stack rows of the patients a bootstrap draw left out, in the stack's order."""
    return subset_tables(source.full_tables(), not_drawn(source.patient_ids(), drawn)).landmark_stack


def not_drawn(ids: np.ndarray, drawn: np.ndarray) -> np.ndarray:
    """The ``ids`` (unique) that a bootstrap draw left out, in their order (a hash look-up: ``np.setdiff1d``
    on text ids took seconds at 30 k patients)."""
    return ids[~pd.Index(ids).isin(drawn)]


class StackOnlyTables:
    """A :class:`~riskbench.validation.sources.PrecomputedTables` seen without its counting-process table, for
    resampling specs that all fit on the landmark stack: a bootstrap draw then repeats only the stack's rows,
    and a replicate sent to a worker process carries only the stack (the counting-process table of 30 k patients
    has about four times as many rows). Patients, their status and the stack's rows are those of the source, so
    every draw and every refit are unchanged."""

    def __init__(self, source: PrecomputedTables) -> None:
        self._ids = source.patient_ids()
        self._status = source.outcome_status()
        self._full = ValidationTables(source.full_tables().landmark_stack, None)
        # a file-backed source travels to workers as its file references (each worker reads them once)
        self._files = source if isinstance(source, ParquetTables) else None

    def __reduce_ex__(self, protocol: Any) -> Any:
        if self._files is not None:
            return (stack_only_tables, (self._files,))
        return super().__reduce_ex__(protocol)

    def patient_ids(self) -> np.ndarray:
        """The source's patient ids."""
        return self._ids

    def outcome_status(self) -> pd.Series:
        """The source's status per patient."""
        return self._status

    def full_tables(self) -> ValidationTables:
        """The landmark stack of every patient (no counting-process table)."""
        return self._full

    def tables(self, patient_ids: np.ndarray) -> ValidationTables:
        """The landmark-stack rows of the given unique patients."""
        return subset_tables(self._full, patient_ids)


_stack_only: dict[int, tuple[ParquetTables, StackOnlyTables]] = {}


def stack_only_tables(source: ParquetTables) -> StackOnlyTables:
    """The :class:`StackOnlyTables` of a file-backed ``source``, built once per process (unpickling one calls
    this; :func:`~riskbench.validation.table_files.parquet_tables` gives the same source object each time)."""
    cached = _stack_only.get(id(source))
    if cached is None or cached[0] is not source:
        _stack_only.clear()  # one run's source at a time, as for the file-backed sources themselves
        cached = _stack_only[id(source)] = (source, StackOnlyTables(source))
    return cached[1]


def resampling_source(source: TableSource, specs: Sequence[ModelSpec]) -> TableSource:
    """``source`` as the replicates should cut it: without the counting-process table when it is precomputed
    and no spec fits on it (:class:`StackOnlyTables`)."""
    if isinstance(source, PrecomputedTables) and all(s.family != "time_varying_cox" for s in specs):
        return stack_only_tables(source) if isinstance(source, ParquetTables) else StackOnlyTables(source)
    return source


def failed_replicate(index: int, exc: BaseException, log: ReplicateLog | None = None) -> tuple:
    """The result of a replicate whose resample could not be fitted or evaluated."""
    spec = f"{log.failed_spec}: " if log is not None and log.failed_spec else ""
    return index, None, None, f"{spec}{type(exc).__name__}: {exc}", log


def tagged_replicate(
    index: int, per_spec: pd.DataFrame, per_pair: pd.DataFrame | None = None, *, log: ReplicateLog | None = None
) -> tuple:
    """The result of a successful replicate, its frames tagged with the replicate index."""
    for frame in (per_spec, per_pair):
        if frame is not None:
            frame.insert(0, "replicate", index)
    return index, per_spec, per_pair, None, log


def replicate_problems(results: list) -> tuple[tuple[tuple[str, str], ...], tuple]:
    """Why replicates failed (``(spec or "", error)``) and every refit's ``(spec, warnings)``."""
    failures = []
    for r in results:
        if r[1] is None and r[3]:
            spec = (r[4].failed_spec or "") if len(r) > 4 and r[4] is not None else ""
            failures.append((spec, r[3][len(spec) + 2 :] if spec else r[3]))
    fits = tuple(fit for r in results if len(r) > 4 and r[4] is not None for fit in r[4].fits)
    return tuple(failures), fits


def summarise_comparison(
    results: list,
    *,
    level: float,
    spec_point: pd.DataFrame | None = None,
    pair_point: pd.DataFrame | None = None,
) -> Comparison:
    """Percentile summaries of per-spec and pairwise replicate values (estimates: the points if given)."""
    spec_reps, pair_reps, n_failed = collect_replicates(results)
    spec_keys = ["spec", "metric", "horizon_days", "threshold"]
    pair_keys = ["reference", "candidate", *spec_keys[1:]]
    performance = percentile_summary(spec_reps, spec_keys, level=level, point=spec_point)
    if pair_reps is not None and len(pair_reps):
        differences = percentile_summary(pair_reps, pair_keys, level=level, point=pair_point)
        differences["better_if"] = differences["metric"].map(METRIC_DIRECTION).fillna("higher")
    else:
        differences = pd.DataFrame(columns=[*pair_keys, "estimate", "ci_low", "ci_high", "n_boot", "better_if"])
        pair_reps = pd.DataFrame()
    replicates = pd.concat([spec_reps, pair_reps], ignore_index=True)
    failures, fit_log = replicate_problems(results)
    return Comparison(
        performance=performance,
        differences=differences,
        replicates=replicates,
        n_failed=n_failed,
        failures=failures,
        fit_log=fit_log,
    )


def collect_replicates(results: list) -> tuple[pd.DataFrame, pd.DataFrame, int]:
    """Stack per-replicate frames (dropping failed replicates) and count failures."""
    specs = [r[1] for r in results if r[1] is not None]
    pairs = [r[2] for r in results if r[2] is not None]
    n_failed = sum(r[1] is None for r in results)
    if not specs:
        reasons = sorted({r[3] for r in results if r[3]})[:3]
        raise ValidationInputError(f"every replicate failed; first reasons: {reasons}")
    return pd.concat(specs, ignore_index=True), (pd.concat(pairs, ignore_index=True) if pairs else None), n_failed


def comparison_plan(
    specs: Sequence[ModelSpec],
    horizons: Sequence[float],
    stack: pd.DataFrame,
    *,
    pairs: str | Sequence[tuple[int, int]] = "all",
    thresholds: Sequence[float] = (),
    nri_categories: Sequence[float] | None = None,
) -> Evaluation:
    """What :func:`compare_specs` measures in each replicate, given the same arguments (``stack``: the source's
    full landmark stack); also the ``paired`` plan of :func:`riskbench.validation.optimism.bootstrap_optimism_result`.
    """
    specs = check_specs(specs)
    if len(specs) < 2:
        raise ValidationInputError("compare_specs needs at least two specs.")
    hs = check_horizons(horizons, stack)
    return Evaluation.build(specs, hs, pairs=pairs, thresholds=thresholds, nri_categories=nri_categories)


def compare_specs(
    specs: Sequence[ModelSpec],
    source: TableSource,
    horizons: Sequence[float],
    *,
    n_boot: int = 200,
    seed: int = 0,
    evaluation: str = "out_of_bag",
    pairs: str | Sequence[tuple[int, int]] = "all",
    thresholds: Sequence[float] = (),
    nri_categories: Sequence[float] | None = None,
    level: float = 0.95,
    config: ExecutionConfig | None = None,
    known: Mapping[int, tuple] | None = None,
) -> Comparison:
    """Evaluate specs on the same bootstrap resamples of patients and compare them pairwise.

    Parameters
    ----------
    specs : sequence of ModelSpec
        Two or more specs; differences are candidate minus reference for each pair.
    source : TableSource
        Where tables for a set of patients come from (see :mod:`riskbench.validation.sources`).
    horizons : sequence of float
        Prediction horizons (days), at most the landmark stack's horizon.
    n_boot : int, default 200
        Bootstrap replicates.
    seed : int, default 0
        Seed of the run; replicate i always uses the i-th spawned seed.
    evaluation : {"out_of_bag", "apparent"}
        Where each replicate is evaluated (module notes).
    pairs : "all", "vs_first" or sequence of (int, int)
        Which specs to compare (reference index, candidate index).
    thresholds : sequence of float
        Risk thresholds for net benefit and its difference.
    nri_categories : sequence of float, optional
        Risk cut points for the categorical NRI.
    level : float, default 0.95
        Coverage of the percentile intervals.
    config : ExecutionConfig, optional
        Serial, joblib processes or a Dask scheduler.
    known : mapping of int to replicate result, optional
        Out-of-bag replicates already computed for these specs, evaluation plan, source and seed (the bootstrap
        optimism computes them from its own refits when given the plan, see ``paired`` of
        :func:`riskbench.validation.optimism.bootstrap_optimism_result`); only
        the other replicates are run here. Replicate i is the same whichever computed it.

    Returns
    -------
    Comparison
    """
    specs = check_specs(specs)
    if len(specs) < 2:
        raise ValidationInputError("compare_specs needs at least two specs.")
    if evaluation not in ("out_of_bag", "apparent"):
        raise ValidationInputError(f"evaluation must be 'out_of_bag' or 'apparent'; got {evaluation!r}.")
    if n_boot < 2:
        raise ValidationInputError(f"n_boot must be at least 2 for an interval; got {n_boot}.")
    full = source.full_tables()
    plan = comparison_plan(
        specs, horizons, full.landmark_stack, pairs=pairs, thresholds=thresholds, nri_categories=nri_categories
    )
    known = {i: r for i, r in (known or {}).items() if 0 <= i < n_boot}
    if known and evaluation != "out_of_bag":
        raise ValidationInputError(
            "replicates computed elsewhere are out-of-bag ones; evaluation must be 'out_of_bag'."
        )
    missing = [i for i in range(n_boot) if i not in known]
    whole = fit_all(specs, full, seed) if missing or evaluation == "apparent" else []
    job = _ComparisonJob(
        evaluation=plan,
        source=resampling_source(source, specs),
        out_of_bag=evaluation == "out_of_bag",
        starts=tuple(starting_values(m) for m in whole) if whole else None,
    )
    run = run_replicates(
        _comparison_replicate, job, seed, n_boot, config, description="paired bootstrap", indices=missing
    )
    done = dict(zip(missing, run)) | known
    results = [done[i] for i in range(n_boot)]
    spec_point = pair_point = None
    if evaluation == "apparent":
        spec_point, pair_point = plan.run(whole, full.landmark_stack)
    return summarise_comparison(results, level=level, spec_point=spec_point, pair_point=pair_point)
