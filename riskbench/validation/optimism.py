"""Bootstrap optimism correction of apparent performance (Harrell, Lee & Mark 1996; Steyerberg et al. 2001).

1. Fit each spec on all patients and evaluate it on them: the *apparent* performance.
2. For b = 1..B: draw patients with replacement (all rows of a drawn patient come along, each copy a
   distinct patient), rebuild the tables for the drawn patients through the table source (the cohort
   stage's derivation when the source is :class:`~riskbench.validation.sources.CohortDerivation`), refit,
   and evaluate the refit on the drawn patients (bootstrap performance) and on the original patients
   (test performance). The optimism of replicate b is bootstrap minus test.
3. Corrected = apparent − mean optimism.

The same replicates also score each refit on the patients the resample did not draw (about 36.8% of them):
the mean over replicates is the *out-of-bag* (leave-one-out bootstrap) performance Err⁽¹⁾ of Efron &
Tibshirani (1997). For the concordance indices and the AUC, whose no-information value is 0.5, the table also
gives the **.632+ estimate** (Efron & Tibshirani 1997, eq. 32), written for a loss err = 1 − C:

    Err1' = min(Err1, γ), γ = 0.5;  R = (Err1' − err) / (γ − err) if Err1' > err and γ > err, else 0;
    w = 0.632 / (1 − 0.368 R);  Err.632+ = (1 − w) err + w Err1';  C.632+ = 1 − Err.632+.

Apparent-minus-optimism fails for a model that fits its training patients almost perfectly (a survival forest):
the optimism measured on a bootstrap resample understates the real one, so the corrected value stays far above
the cross-validated one. :func:`validated_performance` chooses, per family, which estimate the report calls
"validated" and says how it was obtained: for a forest the out-of-bag value. Measured on the demo generator
(tests/validation/test_optimism_forest.py; 200 trees, 1500 and 3000 development patients, fresh cohorts of
3000 and 4000): out-of-bag C 0.799 and 0.775, cross-validated 0.789 and 0.779, fresh cohort 0.832 and 0.780,
.632+ 0.844 and 0.824, apparent − optimism 0.899 and 0.896. The .632+ value keeps about a quarter of its weight on the
near-perfect apparent C (R is only about 0.35 when the out-of-bag C is 0.8), so it sat 0.01 and 0.04 above the
fresh C; the out-of-bag value agreed with cross-validation both times, and the fresh C lay between the two.

References: Harrell FE, Lee KL, Mark DB (1996) Stat Med 15:361-387; Steyerberg EW, Harrell FE et al.
(2001) J Clin Epidemiol 54:774-781; Efron B, Tibshirani R (1997) J Am Stat Assoc 92:548-560.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from riskbench.models.fit_warnings import FitWarning, count_warnings, recorded_warnings
from riskbench.validation.comparison import (
    REPLICATE_ERRORS,
    ReplicateLog,
    collect_replicates,
    failed_replicate,
    fit_all_recorded,
    out_of_bag_stack,
    replicate_problems,
    resampling_source,
    tagged_replicate,
)
from riskbench.validation.errors import ValidationInputError
from riskbench.validation.model_specs import ModelSpec, starting_values
from riskbench.validation.paired import Evaluation, check_specs, fit_all, percentile_summary, predict_all
from riskbench.validation.parallel import ExecutionConfig, run_replicates, seed_to_int
from riskbench.validation.performance import check_horizons
from riskbench.validation.plans import bootstrap_patient_draw
from riskbench.validation.sources import TableSource, draw_tables

OPTIMISM_KEYS = ["spec", "metric", "horizon_days", "threshold"]

#: Measures with a no-information value (a random ranking), for which the .632+ estimate is defined.
NO_INFORMATION: dict[str, float] = {"harrell_c": 0.5, "uno_c": 0.5, "auc": 0.5}

#: Families whose apparent performance is near perfect by construction: validated out-of-bag.
OVERFITTING_FAMILIES = ("forest",)


@dataclass(frozen=True)
class _OptimismJob:
    evaluation: Evaluation
    source: TableSource
    paired: Evaluation | None = None
    starts: tuple[Any, ...] | None = None  # whole-cohort estimates the refits start from


def _optimism_replicate(job: _OptimismJob, index: int, seed: np.random.SeedSequence) -> tuple[Any, Any]:
    """The optimism replicate's result, and the paired comparison's replicate from the same refits (None when
    no paired plan was given or it cannot be decided here)."""
    rng = np.random.default_rng(seed)
    drawn = bootstrap_patient_draw(job.source.patient_ids(), rng)
    log = ReplicateLog()
    paired = None
    try:
        boot_tables = draw_tables(job.source, drawn)
        plan = job.evaluation
        models = fit_all_recorded(plan.specs, boot_tables, seed_to_int(seed), log, job.starts)
        if job.paired is not None:
            paired = _paired_replicate(job, index, models, drawn, log)
        boot_stack, orig_stack = boot_tables.landmark_stack, job.source.full_tables().landmark_stack
        with recorded_warnings():  # a poor refit may warn while being measured; the result says enough
            # The drawn rows repeat original rows: predict each distinct row once for both evaluations.
            risk_boot, risk_orig = predict_all(plan.specs, models, [boot_stack, orig_stack], plan.horizons)
            on_boot, _ = plan.run(models, boot_stack, risk_boot)
            on_orig, _ = plan.run(models, orig_stack, risk_orig)
    except REPLICATE_ERRORS as exc:
        return failed_replicate(index, exc, log), paired
    frame = on_boot.rename(columns={"value": "bootstrap"})
    frame["test"] = on_orig["value"].to_numpy()
    frame["value"] = frame["bootstrap"] - frame["test"]
    if paired is not None and paired[1] is not None and _same_measures(plan, job.paired):
        oob: pd.DataFrame | None = _out_of_bag_columns(paired[1])  # the paired replicate measured the same
    else:
        oob = _out_of_bag(plan, models, orig_stack, risk_orig, drawn)
    frame = frame.merge(oob, on=OPTIMISM_KEYS, how="left") if oob is not None else frame.assign(out_of_bag=np.nan)
    return tagged_replicate(index, frame, log=log), paired


def _paired_replicate(job: _OptimismJob, index: int, models: list[Any], drawn: np.ndarray, log: ReplicateLog) -> Any:
    """The paired comparison's replicate ``index`` (as :mod:`riskbench.validation.comparison` computes it: its
    specs' refits measured on the patients the draw left out), from this replicate's refits."""
    assert job.paired is not None
    names = [s.name for s in job.evaluation.specs]
    chosen = [models[names.index(s.name)] for s in job.paired.specs]
    wanted = {s.name for s in job.paired.specs}
    own_log = ReplicateLog(fits=[fit for fit in log.fits if fit[0] in wanted])
    try:
        with recorded_warnings():
            frames = job.paired.run(chosen, out_of_bag_stack(job.source, drawn))
    except REPLICATE_ERRORS as exc:
        return failed_replicate(index, exc, own_log)
    return tagged_replicate(index, *frames, log=own_log)


def _same_measures(plan: Evaluation, paired: Evaluation | None) -> bool:
    """True when the paired plan measures exactly what the optimism's out-of-bag step would."""
    return (
        paired is not None
        and [s.name for s in plan.specs] == [s.name for s in paired.specs]
        and plan.horizons == paired.horizons
        and plan.thresholds == paired.thresholds
    )


def _out_of_bag_columns(per_spec: pd.DataFrame) -> pd.DataFrame:
    return per_spec.rename(columns={"value": "out_of_bag"})[OPTIMISM_KEYS + ["out_of_bag"]]


def _out_of_bag(
    plan: Evaluation, models: list[Any], stack: pd.DataFrame, risks: list[dict[float, np.ndarray]], drawn: np.ndarray
) -> pd.DataFrame | None:
    """Measures of the refits on the rows of the patients the resample did not draw (None if they cannot be
    measured there, e.g. no outcome among them: the replicate then counts for the other estimates only)."""
    held = ~stack["patient_id"].isin(pd.unique(drawn)).to_numpy()
    if not held.any():
        return None
    rows = stack.loc[held]
    held_risks = [{h: np.asarray(r)[held] for h, r in per_model.items()} for per_model in risks]
    try:
        with recorded_warnings():
            measured, _ = plan.run(models, rows, held_risks)
    except REPLICATE_ERRORS:
        return None
    return _out_of_bag_columns(measured)


def dot632_plus(apparent: ArrayLike, out_of_bag: ArrayLike, no_information: ArrayLike = 0.5) -> np.ndarray:
    """The .632+ estimate of a higher-is-better measure from its apparent and out-of-bag values, given its
    no-information value (module notes; Efron & Tibshirani 1997, eqs. 27-32, for the loss ``1 - C``)."""
    err = 1.0 - np.asarray(apparent, dtype=float)
    gamma = 1.0 - np.asarray(no_information, dtype=float)
    err1 = np.minimum(1.0 - np.asarray(out_of_bag, dtype=float), gamma)
    with np.errstate(divide="ignore", invalid="ignore"):
        rate = np.where((err1 > err) & (gamma > err), (err1 - err) / (gamma - err), 0.0)
    weight = 0.632 / (1.0 - 0.368 * rate)
    out = 1.0 - ((1.0 - weight) * err + weight * err1)
    return np.where(np.isfinite(err) & np.isfinite(err1), out, np.nan)


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
    paired : mapping of int to replicate result
        With a paired plan: the paired comparison's out-of-bag replicates computed from the same refits, by
        replicate index (those that could not be decided here are absent), for
        :func:`riskbench.validation.comparison.compare_specs` ``known``.
    """

    table: pd.DataFrame
    n_failed: int = 0
    failures: tuple[tuple[str, str], ...] = ()
    fit_log: tuple[tuple[str, list[FitWarning]], ...] = ()
    paired: Mapping[int, tuple] = field(default_factory=dict)

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
    paired: Evaluation | None = None,
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
    paired : Evaluation, optional
        A paired comparison to measure from the same refits
        (:func:`riskbench.validation.comparison.comparison_plan`): the replicates that
        :func:`riskbench.validation.comparison.compare_specs` would compute with the same seed, number of
        resamples and source, out-of-bag, for these specs (a subset of ``specs``) and horizons. A comparison
        then refits nothing twice; each replicate equals the comparison's own (a test checks this).

    Returns
    -------
    OptimismResult
        ``table``: ``spec, metric, horizon_days, threshold, apparent, optimism, corrected, optimism_low,
        optimism_high, out_of_bag, dot632_plus, n_boot`` (``dot632_plus`` for the measures of
        :data:`NO_INFORMATION` only) for Harrell's C, Uno's C, AUC, Brier, scaled Brier, calibration slope and
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
    if paired is not None:
        _check_paired(specs, paired, full.landmark_stack)
    whole = fit_all(specs, full, seed)
    apparent, _ = plan.run(whole, full.landmark_stack)
    job = _OptimismJob(
        evaluation=plan,
        source=resampling_source(source, specs),
        paired=paired,
        starts=tuple(starting_values(m) for m in whole),
    )
    both = run_replicates(_optimism_replicate, job, seed, n_boot, config, description="bootstrap optimism")
    results = [r[0] for r in both]
    known = {r[1][0]: r[1] for r in both if r[1] is not None}
    reps, _, n_failed = collect_replicates(results)
    summary = percentile_summary(reps, OPTIMISM_KEYS, level=level).rename(
        columns={"estimate": "optimism", "ci_low": "optimism_low", "ci_high": "optimism_high"}
    )
    out = apparent.rename(columns={"value": "apparent"}).merge(summary, on=OPTIMISM_KEYS, how="left")
    out["corrected"] = out["apparent"] - out["optimism"]
    oob = reps.groupby(OPTIMISM_KEYS, dropna=False)["out_of_bag"].mean().rename("out_of_bag").reset_index()
    out = out.merge(oob, on=OPTIMISM_KEYS, how="left")
    gamma = out["metric"].map(NO_INFORMATION)
    out["dot632_plus"] = np.where(
        gamma.notna(), dot632_plus(out["apparent"], out["out_of_bag"], gamma.fillna(0.5).to_numpy()), np.nan
    )
    table = out[
        OPTIMISM_KEYS
        + ["apparent", "optimism", "corrected", "optimism_low", "optimism_high", "out_of_bag", "dot632_plus", "n_boot"]
    ]
    failures, fit_log = replicate_problems(results)
    return OptimismResult(table, n_failed, failures, fit_log, known)


def _check_paired(specs: Sequence[ModelSpec], paired: Evaluation, stack: pd.DataFrame) -> None:
    own = {s.name: s for s in specs}
    foreign = [s.name for s in paired.specs if own.get(s.name) != s]
    if foreign:
        raise ValidationInputError(
            f"the paired plan's specs {foreign} are not among the specs refitted for the optimism (same name and "
            "settings); compare only models the optimism refits."
        )
    check_horizons(paired.horizons, stack)


def bootstrap_optimism(
    specs: ModelSpec | Sequence[ModelSpec], source: TableSource, horizons: Sequence[float], **options: Any
) -> pd.DataFrame:
    """The table of :func:`bootstrap_optimism_result` (same parameters, given by keyword)."""
    return bootstrap_optimism_result(specs, source, horizons, **options).table


def validated_performance(table: pd.DataFrame, families: Mapping[str, str]) -> pd.DataFrame:
    """The optimism table with the estimate the report calls validated: ``validated`` and ``obtained_by``.

    A spec of a family in :data:`OVERFITTING_FAMILIES` (``families``: spec name -> family) gets the out-of-bag
    estimate (module notes: why not .632+); every other spec gets the optimism-corrected value (Harrell, Lee &
    Mark 1996).
    """
    out = table.copy()
    overfit = out["spec"].map(lambda name: families.get(name) in OVERFITTING_FAMILIES).to_numpy(bool)
    out["validated"] = np.where(overfit, out["out_of_bag"], out["corrected"])
    out["obtained_by"] = np.where(overfit, "out-of-bag bootstrap", "optimism-corrected bootstrap")
    return out
