"""Performance of fixed predictions at each landmark and pooled over landmarks, with patient-level bootstrap
intervals; the AUC-over-horizon curve with a pointwise band; decision curves with bands.

The predictions are fixed (the cross-validated, out-of-fold risks of the validation stage); what is resampled
is the evaluation. A patient at risk at several landmarks contributes one landmark row per landmark, and those
rows share the patient's history and outcome, so they are not independent. Every bootstrap replicate therefore
draws *patients* with replacement and takes all of each drawn patient's landmark rows (a cluster bootstrap;
Davison & Hinkley 1997, section 3.8), evaluates every measure on them, and the interval is the 2.5th to 97.5th
percentile of the replicates (percentile interval; Efron & Tibshirani 1993, ch. 13).

What the interval covers: the sampling variability of the measure over patients from the same population, for
these fitted predictions. It does not include the variability of refitting the models (that would need the
models refitted in every replicate, as the paired comparison of the model sets does).

Measures at each landmark s and horizon w (:func:`riskbench.validation.performance.horizon_measures`):
Harrell's and Uno's C, the cumulative/dynamic AUC, the Brier score and its scaled version (IPA) and the
calibration-in-the-large (observed/expected ratio against each model's own estimand: the Aalen–Johansen
cumulative incidence, or 1 − Kaplan–Meier for a cause-specific prediction). The pooled rows evaluate all
landmark rows together (van Houwelingen & Putter 2012, ch. 7); a measure at a landmark with fewer outcomes
before the horizon than ``min_outcomes`` is not computed (NaN).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from functools import cached_property
from typing import Any

import numpy as np
import pandas as pd

from riskbench.metrics.auc import auc_values
from riskbench.metrics.concordance import TIED_TOL
from riskbench.metrics.inputs import MetricInputError
from riskbench.metrics.risk_sets import DistinctValues, OutcomeSet
from riskbench.validation.errors import ValidationInputError
from riskbench.validation.parallel import ExecutionConfig, run_replicates
from riskbench.validation.performance import HORIZON_MEASURES, evaluation_time, horizon_measures, stack_outcome

#: Label of the pooled rows in the ``landmark`` column (the per-landmark rows give the landmark in days).
POOLED = np.nan

#: Resamples below which percentile intervals are unstable (common practice).
MIN_STABLE_RESAMPLES = 200

KEY_COLUMNS = ["part", "model", "landmark_days", "horizon_days", "metric", "threshold"]


@dataclass(frozen=True)
class EvaluationRows:
    """The rows to evaluate: outcome, landmark (days) and patient of every landmark-stack row.

    Attributes
    ----------
    time, status
        Days from the landmark to the event or censoring (at most the horizon); 0 censored, 1 outcome,
        2 competing event.
    landmark
        The row's landmark (days since entry).
    patient
        Integer code of the row's patient (rows of one patient share it).
    """

    time: np.ndarray
    status: np.ndarray
    landmark: np.ndarray
    patient: np.ndarray

    @classmethod
    def from_stack(cls, stack: pd.DataFrame) -> EvaluationRows:
        """The rows of a landmark stack (columns ``patient_id, landmark, time, status``)."""
        missing = [c for c in ("patient_id", "landmark") if c not in stack.columns]
        if missing:
            raise ValidationInputError(f"the evaluation stack lacks column(s) {missing} (landmark-stack contract).")
        time, status = stack_outcome(stack)
        landmark = pd.to_numeric(stack["landmark"], errors="coerce").to_numpy(float)
        if not np.isfinite(landmark).all():
            raise ValidationInputError(
                "the evaluation stack's 'landmark' has missing values in rows "
                f"{np.flatnonzero(~np.isfinite(landmark))[:5].tolist()}."
            )
        patient = pd.factorize(stack["patient_id"])[0]
        return cls(time, status, landmark, patient)

    @cached_property
    def distinct_times(self) -> DistinctValues:
        """The distinct times (days) of the rows, sorted once for every resample of them."""
        return DistinctValues.of(self.time)

    @cached_property
    def landmark_blocks(self) -> tuple[dict[float, np.ndarray], np.ndarray]:
        """The rows of each landmark (days), and each row's position among the rows of its landmark."""
        members = {float(lm): np.flatnonzero(self.landmark == lm) for lm in np.unique(self.landmark)}
        position = np.empty(self.landmark.size, np.int64)
        for rows in members.values():
            position[rows] = np.arange(rows.size)
        return members, position


@dataclass(frozen=True)
class EvaluationPlan:
    """What to evaluate on the rows (in days and probabilities); see :func:`landmark_performance`."""

    horizons: np.ndarray
    risks: Mapping[str, np.ndarray]
    report_days: tuple[float, ...]
    curve_days: tuple[float, ...] = ()
    decision_days: float | None = None
    thresholds: tuple[float, ...] = ()
    cells: tuple[tuple[float, float], ...] = field(default=())  # (landmark or NaN, horizon) with enough outcomes
    targets: Mapping[str, str] = field(default_factory=dict)  # model -> estimand (default cumulative incidence)
    # (model, column, landmark or None for all rows) -> the distinct risks there; filled on first use, not pickled
    _distinct: dict[tuple[str, int, float | None], DistinctValues] = field(
        default_factory=dict, init=False, repr=False, compare=False
    )

    def __getstate__(self) -> dict[str, Any]:
        # a worker sorts the risk columns again rather than receive them with every task
        return {**self.__dict__, "_distinct": {}}

    def risk_rank(self, model: str, column: int, index: np.ndarray, rows: EvaluationRows | None = None) -> np.ndarray:
        """``dense_rank(risks[model][index, column], TIED_TOL)``: the ranks every measure of that score uses,
        from one sort of the column (``index`` may repeat rows). Given ``rows`` and an ``index`` within one
        landmark, the sort is of that landmark's rows only, a few times fewer values to count through."""
        if rows is None:
            key: tuple[str, int, float | None] = (model, column, None)
            if key not in self._distinct:
                self._distinct[key] = DistinctValues.of(self.risks[model][:, column])
            return self._distinct[key].dense_rank(index, TIED_TOL)
        members, position = rows.landmark_blocks
        landmark = float(rows.landmark[index[0]]) if index.size else np.nan
        if np.isnan(landmark) or not (rows.landmark[index] == landmark).all():
            return self.risk_rank(model, column, index)
        key = (model, column, landmark)
        if key not in self._distinct:
            self._distinct[key] = DistinctValues.of(self.risks[model][members[landmark], column])
        return self._distinct[key].dense_rank(position[index], TIED_TOL)

    def column(self, days: float) -> int:
        """Column of ``days`` in the risk matrices."""
        i = int(np.argmin(np.abs(self.horizons - days)))
        if abs(self.horizons[i] - days) > 1e-3:
            raise ValidationInputError(f"no predictions at horizon {days:g} days; predict at the report horizons.")
        return i


@dataclass(frozen=True)
class LandmarkPerformance:
    """Estimates with patient-level bootstrap percentile intervals.

    Attributes
    ----------
    measures
        ``model, landmark_days`` (NaN: pooled over landmarks), ``horizon_days, metric, estimate, ci_low,
        ci_high, resamples`` (replicates in which the measure could be computed).
    auc_curve
        Pooled AUC by horizon: ``model, horizon, auc, auc_lower, auc_upper, resamples`` (pointwise band).
    decision_curve
        ``model_name, threshold, model, model_lower, model_upper, treat_all, treat_all_lower,
        treat_all_upper, treat_none, fraction_treated`` at ``decision_days`` (pooled rows).
    n_boot
        Bootstrap replicates drawn.
    decision_days
        Horizon (days) of the decision curves (None when there are none).
    """

    measures: pd.DataFrame
    auc_curve: pd.DataFrame
    decision_curve: pd.DataFrame
    n_boot: int
    decision_days: float | None = None


def landmark_cells(
    rows: EvaluationRows, report_days: Sequence[float], min_outcomes: int
) -> tuple[tuple[float, float], ...]:
    """``(landmark, horizon)`` pairs (landmark NaN = pooled) with at least ``min_outcomes`` outcomes before the
    horizon among their rows."""
    cells = []
    for landmark in [*np.unique(rows.landmark), POOLED]:
        at = _at_landmark(rows, landmark)
        for h in report_days:
            before = rows.time[at] <= evaluation_time(float(h), rows.time[at])
            if int((before & (rows.status[at] == 1)).sum()) >= max(min_outcomes, 1):
                cells.append((float(landmark), float(h)))
    return tuple(cells)


def _at_landmark(rows: EvaluationRows, landmark: float) -> np.ndarray:
    return np.ones(rows.time.size, bool) if np.isnan(landmark) else rows.landmark == landmark


def evaluate_plan(rows: EvaluationRows, plan: EvaluationPlan, index: np.ndarray | None = None) -> pd.DataFrame:
    """Every value of the plan on ``rows`` (or the rows at ``index``, repeats allowed); one row per value,
    columns :data:`KEY_COLUMNS` + ``value``, in a fixed order (NaN where a measure is undefined)."""
    idx = np.arange(rows.time.size) if index is None else np.asarray(index)
    time, status, landmark = rows.time[idx], rows.status[idx], rows.landmark[idx]
    out: list[tuple] = []
    # the rows of each landmark (all rows, without a copy, for the pooled cells), each one evaluation set shared
    # by every model and horizon; their distinct times come from one sort of all rows' times, by counting
    where = {lm: slice(None) if np.isnan(lm) else np.flatnonzero(landmark == lm) for lm, _ in plan.cells}
    picked = {lm: idx[at] for lm, at in where.items()}
    sets = {lm: _outcome_set(time[at], status[at], rows, picked[lm]) for lm, at in where.items()}
    pooled = next((sets[lm] for lm in sets if np.isnan(lm)), None) or _outcome_set(time, status, rows, idx)
    for model, matrix in plan.risks.items():
        risk = matrix[idx]
        ranks: dict[tuple[str, int], np.ndarray] = {}  # the pooled ranks serve the pooled cells and the curve
        for lm, h in plan.cells:
            c = plan.column(h)
            values = _measures_or_nan(
                sets[lm],
                np.ascontiguousarray(risk[where[lm], c]),
                h,
                plan.targets.get(model, "cumulative_incidence"),
                _ranks_of(plan, rows, model, c, lm, picked[lm], ranks),
            )
            out += [("measure", model, lm, h, name, np.nan, values[name]) for name in HORIZON_MEASURES]
        curve_ranks = [_ranks_of(plan, rows, model, plan.column(h), POOLED, idx, ranks) for h in plan.curve_days]
        out += [
            ("auc_curve", model, np.nan, h, "auc", np.nan, v)
            for h, v in zip(plan.curve_days, _auc_curve(time, status, risk, plan, pooled, curve_ranks))
        ]
        if plan.decision_days is not None and plan.thresholds:
            decision_risk = risk[:, plan.column(plan.decision_days)]
            model_nb, all_nb, fraction = _net_benefit(time, status, decision_risk, plan, pooled)
            out += [
                ("net_benefit", model, np.nan, plan.decision_days, "model", p, v)
                for p, v in zip(plan.thresholds, model_nb)
            ]
            out += [
                ("net_benefit", model, np.nan, plan.decision_days, "fraction_treated", p, v)
                for p, v in zip(plan.thresholds, fraction)
            ]
            out += [
                ("net_benefit", model, np.nan, plan.decision_days, "treat_all", p, v)
                for p, v in zip(plan.thresholds, all_nb)
            ]
    return pd.DataFrame(out, columns=[*KEY_COLUMNS, "value"])


def _outcome_set(time: np.ndarray, status: np.ndarray, rows: EvaluationRows, index: np.ndarray) -> OutcomeSet | None:
    """The evaluation set of ``rows`` at ``index`` (``time`` and ``status`` of those rows), or None when it cannot
    be measured (no rows in a resample)."""
    try:
        return OutcomeSet.from_arrays(time, status, distinct_times=rows.distinct_times.select(index))
    except MetricInputError:
        return None


def _ranks_of(
    plan: EvaluationPlan,
    rows: EvaluationRows,
    model: str,
    column: int,
    landmark: float,
    index: np.ndarray,
    memo: dict[tuple[str, int], np.ndarray],
) -> np.ndarray:
    """Ranks of ``model``'s risks in ``column`` at the rows ``index`` of ``landmark`` (NaN: pooled), once each."""
    key = ("pooled" if np.isnan(landmark) else repr(landmark), column)
    if key not in memo:
        memo[key] = plan.risk_rank(model, column, index, None if np.isnan(landmark) else rows)
    return memo[key]


def _measures_or_nan(
    outcomes: OutcomeSet | None, risk: np.ndarray, h: float, target: str, rank: np.ndarray | None = None
) -> dict[str, float]:
    try:
        if outcomes is None:
            raise MetricInputError("no rows to measure")
        return horizon_measures(outcomes.time, outcomes.status, risk, h, target=target, outcomes=outcomes, rank=rank)
    except MetricInputError:  # no outcome before the horizon or no control after it in these rows
        return dict.fromkeys(HORIZON_MEASURES, np.nan)


def _auc_curve(
    time: np.ndarray,
    status: np.ndarray,
    risk: np.ndarray,
    plan: EvaluationPlan,
    outcomes: OutcomeSet | None = None,
    ranks: Sequence[np.ndarray] | None = None,
) -> np.ndarray:
    """The pooled AUC at each curve horizon; ``outcomes`` and ``ranks`` (of each curve column) when at hand."""
    if not plan.curve_days:
        return np.empty(0)
    columns = [plan.column(h) for h in plan.curve_days]
    at = [evaluation_time(float(h), time) for h in plan.curve_days]
    # every column in order (the usual case) needs no copy of the risks
    curve_risk = risk if columns == list(range(risk.shape[1])) else risk[:, columns]
    try:
        return np.asarray(auc_values(time, status, curve_risk, at, outcomes=outcomes, ranks=ranks).auc, float)
    except MetricInputError:
        return np.array(
            [
                _auc_one(time, status, risk[:, c], t, outcomes, None if ranks is None else ranks[k])
                for k, (c, t) in enumerate(zip(columns, at))
            ]
        )


def _auc_one(
    time: np.ndarray,
    status: np.ndarray,
    risk: np.ndarray,
    at: float,
    outcomes: OutcomeSet | None = None,
    rank: np.ndarray | None = None,
) -> float:
    try:
        return float(auc_values(time, status, risk, [at], outcomes=outcomes, ranks=rank).auc[0])
    except MetricInputError:
        return np.nan


def _net_benefit(
    time: np.ndarray, status: np.ndarray, risk: np.ndarray, plan: EvaluationPlan, outcomes: OutcomeSet | None = None
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    from riskbench.metrics import net_benefit

    days = float(plan.decision_days) if plan.decision_days is not None else np.nan  # called only with decision days
    try:
        nb = net_benefit(
            time,
            status,
            risk,
            evaluation_time(days, time),
            list(plan.thresholds),
            check_direction=False,
            outcomes=outcomes,
        )
    except MetricInputError:
        empty = np.full(len(plan.thresholds), np.nan)
        return empty, empty, empty
    order = np.argsort(np.argsort(plan.thresholds))  # net_benefit sorts the thresholds; back to plan order
    return (nb["model"].to_numpy()[order], nb["treat_all"].to_numpy()[order], nb["fraction_treated"].to_numpy()[order])


def patient_resample(patient: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Row indices of one cluster-bootstrap sample: patients drawn with replacement, each drawn patient
    bringing all their rows (a patient drawn twice brings them twice)."""
    order = np.argsort(patient, kind="stable")
    counts = np.bincount(patient)
    starts = np.r_[0, np.cumsum(counts)[:-1]]
    drawn = rng.integers(0, counts.size, counts.size)
    sizes = counts[drawn]
    offsets = np.arange(sizes.sum()) - np.repeat(np.cumsum(sizes) - sizes, sizes)
    return order[np.repeat(starts[drawn], sizes) + offsets]


def _replicate(shared: dict, _i: int, seed: np.random.SeedSequence) -> np.ndarray:
    rows: EvaluationRows = shared["rows"]
    index = patient_resample(rows.patient, np.random.default_rng(seed))
    return evaluate_plan(rows, shared["plan"], index)["value"].to_numpy(float)


def landmark_performance(
    rows: EvaluationRows,
    horizons: Sequence[float] | np.ndarray,
    risks: Mapping[str, np.ndarray],
    *,
    report_days: Sequence[float],
    curve_days: Sequence[float] = (),
    decision_days: float | None = None,
    thresholds: Sequence[float] | np.ndarray = (),
    targets: Mapping[str, str] | None = None,
    min_outcomes: int = 1,
    n_boot: int = 200,
    seed: int = 0,
    config: ExecutionConfig | None = None,
) -> LandmarkPerformance:
    """Measures at each landmark and pooled, the AUC curve and decision curves, with patient-level intervals.

    Parameters
    ----------
    rows
        The evaluation rows (:meth:`EvaluationRows.from_stack`).
    horizons
        Days after the landmark of the columns of every risk matrix.
    risks
        Model name -> ``(n_rows, len(horizons))`` fixed predicted risks (e.g. cross-validated).
    report_days
        Horizons (days) of the per-landmark and pooled measures.
    curve_days
        Horizons (days) of the pooled AUC curve.
    decision_days
        Horizon (days) of the decision curves (None: none).
    thresholds
        Risk thresholds in [0, 1) of the decision curves.
    targets
        Model -> what its risks estimate, ``"cumulative_incidence"`` (default) or ``"cause_specific"``; the
        observed/expected ratio compares each model with its own estimand.
    min_outcomes
        A landmark (or the pooled rows) needs this many outcomes before a horizon to be measured there.
    n_boot
        Bootstrap replicates (0: estimates without intervals). Fewer than :data:`MIN_STABLE_RESAMPLES`
        give unstable percentile intervals (common practice).
    seed
        Seed of the replicates (replicate i uses the i-th spawned stream).
    config
        Where the replicates run (serial by default); results are identical whatever runs them.

    Returns
    -------
    LandmarkPerformance
    """
    if n_boot < 0:
        raise ValidationInputError(f"the number of bootstrap resamples must be 0 or more; got {n_boot}.")
    for model, matrix in risks.items():
        if np.shape(matrix) != (rows.time.size, len(horizons)):
            raise ValidationInputError(
                f"model {model!r}: risk matrix of shape {np.shape(matrix)}; expected "
                f"({rows.time.size}, {len(horizons)}) (rows × horizons)."
            )
    plan = EvaluationPlan(
        np.asarray(horizons, float),
        dict(risks),
        tuple(float(h) for h in report_days),
        tuple(float(h) for h in curve_days),
        None if decision_days is None else float(decision_days),
        tuple(float(p) for p in thresholds),
        landmark_cells(rows, report_days, min_outcomes),
        dict(targets or {}),
    )
    point = evaluate_plan(rows, plan)
    replicates = run_replicates(
        _replicate, {"rows": rows, "plan": plan}, seed, n_boot, config, description="bootstrap of the evaluation"
    )
    table = _with_intervals(point, np.array(replicates, float).reshape(n_boot, len(point)))
    return LandmarkPerformance(_measures(table), _curve(table), _decisions(table), n_boot, plan.decision_days)


def _with_intervals(point: pd.DataFrame, draws: np.ndarray) -> pd.DataFrame:
    """``point`` with ``ci_low, ci_high`` (2.5th and 97.5th percentiles of the defined draws) and ``resamples``."""
    out = point.rename(columns={"value": "estimate"})
    defined = np.isfinite(draws)
    out["resamples"] = defined.sum(axis=0)
    low = np.full(len(out), np.nan)
    high = np.full(len(out), np.nan)
    estimate = pd.to_numeric(out["estimate"], errors="coerce").to_numpy(float)  # an empty plan has no dtype
    some = (out["resamples"].to_numpy() >= 2) & np.isfinite(estimate)
    if some.any():
        low[some], high[some] = np.nanpercentile(draws[:, some], [2.5, 97.5], axis=0)
    out["ci_low"], out["ci_high"] = low, high
    return out


def _measures(table: pd.DataFrame) -> pd.DataFrame:
    rows = table[table["part"] == "measure"]
    return rows[
        ["model", "landmark_days", "horizon_days", "metric", "estimate", "ci_low", "ci_high", "resamples"]
    ].reset_index(drop=True)


def _curve(table: pd.DataFrame) -> pd.DataFrame:
    rows = table[table["part"] == "auc_curve"]
    return pd.DataFrame(
        {
            "model": rows["model"].to_numpy(),
            "horizon": rows["horizon_days"].to_numpy(float),
            "auc": rows["estimate"].to_numpy(float),
            "auc_lower": rows["ci_low"].to_numpy(float),
            "auc_upper": rows["ci_high"].to_numpy(float),
            "resamples": rows["resamples"].to_numpy(),
        }
    )


def _decisions(table: pd.DataFrame) -> pd.DataFrame:
    rows = table[table["part"] == "net_benefit"]
    if rows.empty:
        return pd.DataFrame(
            columns=[
                "model_name",
                "threshold",
                "model",
                "model_lower",
                "model_upper",
                "treat_all",
                "treat_all_lower",
                "treat_all_upper",
                "treat_none",
                "fraction_treated",
            ]
        )
    wide = rows.pivot_table(
        index=["model", "threshold"],
        columns="metric",
        values=["estimate", "ci_low", "ci_high"],
        sort=False,
        dropna=False,
    )
    out = pd.DataFrame(
        {
            "model_name": wide.index.get_level_values("model"),
            "threshold": wide.index.get_level_values("threshold").astype(float),
            "model": wide[("estimate", "model")].to_numpy(),
            "model_lower": wide[("ci_low", "model")].to_numpy(),
            "model_upper": wide[("ci_high", "model")].to_numpy(),
            "treat_all": wide[("estimate", "treat_all")].to_numpy(),
            "treat_all_lower": wide[("ci_low", "treat_all")].to_numpy(),
            "treat_all_upper": wide[("ci_high", "treat_all")].to_numpy(),
            "treat_none": 0.0,
            "fraction_treated": wide[("estimate", "fraction_treated")].to_numpy(),
        }
    )
    return out.reset_index(drop=True)
