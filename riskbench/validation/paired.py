"""Fit several specs on one set of patients and evaluate them on another, with pairwise measures.

This is the unit of work every resampling plan repeats: bootstrap replicates, cross-validation folds,
a temporal split, an external cohort. All specs see the same fitting and evaluation patients, so their
differences are paired.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from riskbench.metrics.risk_sets import OutcomeSet
from riskbench.models.missing_data import predicted_rows
from riskbench.models.prediction_target import fitted_target
from riskbench.validation.errors import ValidationInputError
from riskbench.validation.model_specs import ModelSpec, fit_spec, prediction_columns
from riskbench.validation.performance import (
    RESULT_COLUMNS,
    evaluate_risks,
    evaluation_time,
    predict_distinct_rows,
    predict_horizons,
    stack_outcome,
)
from riskbench.validation.reclassification import integrated_discrimination, net_reclassification
from riskbench.validation.sources import ValidationTables

SPEC_COLUMNS = ["spec", *RESULT_COLUMNS]
PAIR_COLUMNS = ["reference", "candidate", *RESULT_COLUMNS]


def check_specs(specs: ModelSpec | Sequence[ModelSpec]) -> tuple[ModelSpec, ...]:
    """Specs as a tuple with unique names."""
    out = (specs,) if isinstance(specs, ModelSpec) else tuple(specs)
    if not out or not all(isinstance(s, ModelSpec) for s in out):
        raise ValidationInputError("pass one ModelSpec or a sequence of ModelSpec objects.")
    names = [s.name for s in out]
    if len(set(names)) != len(names):
        raise ValidationInputError(f"ModelSpec names must be unique; got {names}.")
    return out


def spec_pairs(n_specs: int, pairs: str | Sequence[tuple[int, int]]) -> list[tuple[int, int]]:
    """Index pairs (reference, candidate): ``"all"`` (i < j) or ``"vs_first"`` (0, j), or explicit pairs."""
    if pairs == "all":
        return [(i, j) for i in range(n_specs) for j in range(i + 1, n_specs)]
    if pairs == "vs_first":
        return [(0, j) for j in range(1, n_specs)]
    if isinstance(pairs, str):
        raise ValidationInputError(f"pairs must be 'all', 'vs_first' or a list of index pairs; got {pairs!r}.")
    out = [(int(i), int(j)) for i, j in pairs]
    if any(not (0 <= i < n_specs and 0 <= j < n_specs and i != j) for i, j in out):
        raise ValidationInputError(f"pairs {out} must index distinct specs in 0..{n_specs - 1}.")
    return out


@dataclass(frozen=True)
class Evaluation:
    """What is measured each time fitted specs meet an evaluation stack.

    Attributes
    ----------
    specs : tuple of ModelSpec
    horizons : tuple of float
        Horizons (days), already checked against the data.
    pairs : tuple of (int, int)
        (reference, candidate) index pairs for paired differences, NRI and IDI.
    thresholds : tuple of float
        Net-benefit thresholds.
    nri_categories : tuple of float or None
        Risk cut points of the categorical NRI.
    """

    specs: tuple[ModelSpec, ...]
    horizons: tuple[float, ...]
    pairs: tuple[tuple[int, int], ...] = ()
    thresholds: tuple[float, ...] = ()
    nri_categories: tuple[float, ...] | None = None

    @classmethod
    def build(
        cls,
        specs: Sequence[ModelSpec],
        horizons: Sequence[float],
        *,
        pairs: str | Sequence[tuple[int, int]] = "all",
        thresholds: Sequence[float] = (),
        nri_categories: Sequence[float] | None = None,
    ) -> Evaluation:
        """Normalise user arguments (pairs by name, numbers as float tuples)."""
        return cls(
            specs=tuple(specs),
            horizons=tuple(float(h) for h in horizons),
            pairs=tuple(spec_pairs(len(specs), pairs)) if len(specs) > 1 else (),
            thresholds=tuple(float(t) for t in thresholds),
            nri_categories=None if nri_categories is None else tuple(float(c) for c in nri_categories),
        )

    def run(
        self, models: Sequence[Any], stack: pd.DataFrame, risks: Sequence[dict[float, np.ndarray]] | None = None
    ) -> tuple[pd.DataFrame, pd.DataFrame]:
        """Per-spec and pairwise measures of ``models`` on ``stack`` (see :func:`evaluate_fitted`)."""
        return evaluate_fitted(
            self.specs,
            models,
            stack,
            self.horizons,
            pairs=self.pairs,
            thresholds=self.thresholds,
            nri_categories=self.nri_categories,
            risks=risks,
        )


def fit_all(specs: Sequence[ModelSpec], tables: ValidationTables, seed: int | None) -> list[Any]:
    """Fit every spec on the same tables (the seed feeds random families)."""
    return [fit_spec(spec, tables, seed=seed) for spec in specs]


def predict_all(
    specs: Sequence[ModelSpec],
    models: Sequence[Any],
    stacks: Sequence[pd.DataFrame],
    horizons: Sequence[float],
) -> list[list[dict[float, np.ndarray]]]:
    """Predictions of every model on every stack, each distinct row predicted once per model.

    Returns ``out[k][m]``: the ``{horizon: risk}`` of model m on stack k.
    """
    per_model = [
        predict_distinct_rows(model, stacks, horizons, prediction_columns(spec, stacks[0].columns))
        for spec, model in zip(specs, models)
    ]
    return [[per_model[m][k] for m in range(len(models))] for k in range(len(stacks))]


def evaluate_fitted(
    specs: Sequence[ModelSpec],
    models: Sequence[Any],
    stack: pd.DataFrame,
    horizons: Sequence[float],
    *,
    pairs: Sequence[tuple[int, int]] = (),
    thresholds: Sequence[float] = (),
    nri_categories: Sequence[float] | None = None,
    risks: Sequence[dict[float, np.ndarray]] | None = None,
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Per-spec measures and pairwise measures of fitted models on one evaluation stack.

    Parameters
    ----------
    specs, models : sequences of equal length
        The specs and their fitted models.
    stack : pandas.DataFrame
        Evaluation landmark stack.
    horizons : sequence of float
        Horizons (days).
    pairs : sequence of (int, int)
        (reference, candidate) index pairs.
    thresholds : sequence of float
        Net-benefit thresholds.
    nri_categories : sequence of float, optional
        Risk cut points for the categorical NRI (the category-free NRI is always given).
    risks : sequence of dict, optional
        Predictions already made (one ``{horizon: risk}`` per model, see :func:`predict_all`).

    Returns
    -------
    (per_spec, per_pair) : pair of pandas.DataFrame
        ``per_spec``: ``spec, metric, horizon_days, threshold, value``.
        ``per_pair``: ``reference, candidate, metric, horizon_days, threshold, value`` where ``value`` is
        candidate minus reference for every per-spec measure, plus ``nri*`` and ``idi*`` rows
        (event and non-event parts separately; see :mod:`riskbench.validation.reclassification`).
    """
    time, status = stack_outcome(stack)
    event = (status == 1).astype(int)
    if risks is None:
        risks = [predict_horizons(model, stack, horizons) for model in models]
    usable = predicted_rows(risks)  # complete-case models give no risk for incomplete rows: all use the rest
    if not usable.all():
        if not usable.any():
            raise ValidationInputError("no evaluation row has a prediction from every model (complete cases).")
        time, status, event = time[usable], status[usable], event[usable]
        risks = [{h: r[usable] for h, r in risk.items()} for risk in risks]
    per_spec = []
    outcomes = OutcomeSet.from_arrays(time, status)  # one sort and censoring curve for every spec and horizon
    for spec, model, risk in zip(specs, models, risks):
        frame = evaluate_risks(
            time, status, risk, thresholds=thresholds, target=fitted_target(model), outcomes=outcomes
        )
        frame.insert(0, "spec", spec.name)
        per_spec.append(frame)
    spec_frame = pd.concat(per_spec, ignore_index=True)
    keyed = spec_frame.set_index(["spec", "metric", "horizon_days", "threshold"])["value"]
    pair_rows = []
    for i, j in pairs:
        ref, cand = specs[i].name, specs[j].name
        diff = (keyed.xs(cand, level="spec") - keyed.xs(ref, level="spec")).reset_index()
        diff.insert(0, "candidate", cand)
        diff.insert(0, "reference", ref)
        pair_rows.append(diff)
        pair_rows.append(_reclassification_rows(ref, cand, time, event, risks[i], risks[j], nri_categories))
    pair_frame = pd.concat(pair_rows, ignore_index=True) if pair_rows else pd.DataFrame(columns=PAIR_COLUMNS)
    return spec_frame[SPEC_COLUMNS], pair_frame[PAIR_COLUMNS]


def _reclassification_rows(
    ref: str,
    cand: str,
    time: np.ndarray,
    event: np.ndarray,
    risk_ref: dict[float, np.ndarray],
    risk_cand: dict[float, np.ndarray],
    categories: Sequence[float] | None,
) -> pd.DataFrame:
    rows = []
    for h in risk_ref:
        t_eval = evaluation_time(h, time)
        nri = net_reclassification(time, event, risk_ref[h], risk_cand[h], t_eval)
        idi = integrated_discrimination(time, event, risk_ref[h], risk_cand[h], t_eval)
        rows += [
            ("nri_events", h, nri.events),
            ("nri_nonevents", h, nri.nonevents),
            ("nri", h, nri.total),
            ("idi_events", h, idi.events),
            ("idi_nonevents", h, idi.nonevents),
            ("idi", h, idi.total),
        ]
        if categories is not None:
            cat = net_reclassification(time, event, risk_ref[h], risk_cand[h], t_eval, categories=categories)
            rows += [
                ("nri_cat_events", h, cat.events),
                ("nri_cat_nonevents", h, cat.nonevents),
                ("nri_cat", h, cat.total),
            ]
    frame = pd.DataFrame(rows, columns=["metric", "horizon_days", "value"])
    frame["threshold"] = np.nan
    frame.insert(0, "candidate", cand)
    frame.insert(0, "reference", ref)
    return frame[PAIR_COLUMNS]


def percentile_summary(
    replicates: pd.DataFrame,
    keys: Sequence[str],
    *,
    level: float,
    point: pd.DataFrame | None = None,
) -> pd.DataFrame:
    """Percentile bootstrap interval of ``value`` per key.

    Parameters
    ----------
    replicates : pandas.DataFrame
        One row per (replicate, key) with column ``value``.
    keys : sequence of str
        Grouping columns.
    level : float
        Interval coverage, e.g. 0.95.
    point : pandas.DataFrame, optional
        Point estimates (``keys`` + ``value``); without it the replicate mean is the estimate.

    Returns
    -------
    pandas.DataFrame
        ``keys`` + ``estimate, ci_low, ci_high, n_boot``.
    """
    if not 0.0 < level < 1.0:
        raise ValidationInputError(f"interval level must lie in (0, 1); got {level!r}.")
    keys = list(keys)
    alpha = (1.0 - level) / 2.0
    # NaN keys (threshold of non-net-benefit rows) must group too.
    grouped = replicates.groupby(keys, dropna=False, sort=False)["value"]
    out = grouped.agg(
        estimate="mean",
        ci_low=lambda v: float(np.nanquantile(v, alpha)) if v.notna().any() else np.nan,
        ci_high=lambda v: float(np.nanquantile(v, 1.0 - alpha)) if v.notna().any() else np.nan,
        n_boot="count",
    ).reset_index()
    if point is not None:
        merged = out.merge(point[keys + ["value"]], on=keys, how="left")
        merged["estimate"] = merged.pop("value")
        out = merged
    return out
