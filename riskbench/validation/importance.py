"""Which inputs matter: leave-one-variable-group-out refits and permutation importance.

* Leave-one-group-out: the full spec and the spec without each group are refitted on the same bootstrap
  resamples and evaluated out of bag; the drop (full minus reduced; for Brier and ICI reduced minus full,
  so that a positive drop always means the group helps) comes with a percentile interval.
* Permutation importance (Breiman 2001, Mach Learn 45:5-32; Fisher, Rudin & Dominici 2019, JMLR 20:1-81):
  in each replicate the full spec is refitted on the drawn patients; on the out-of-bag rows the group's
  columns are shuffled together across rows (keeping the relation between a group's variables) and the
  measure is recomputed; the drop is the importance, with a percentile interval over replicates that
  covers both refitting and shuffling variability.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from riskbench.validation.comparison import (
    REPLICATE_ERRORS,
    collect_replicates,
    compare_specs,
    failed_replicate,
    tagged_replicate,
)
from riskbench.validation.errors import ValidationInputError
from riskbench.validation.model_specs import ModelSpec, fit_spec
from riskbench.validation.paired import percentile_summary
from riskbench.validation.parallel import ExecutionConfig, run_replicates, seed_to_int
from riskbench.validation.performance import check_horizons, evaluate_model
from riskbench.validation.plans import bootstrap_patient_draw
from riskbench.validation.sources import TableSource, draw_tables, subset_tables

_LOWER_IS_BETTER = frozenset({"brier", "ici"})
_IMPORTANCE_METRICS = ("harrell_c", "uno_c", "auc", "brier", "scaled_brier")


def _check_groups(spec: ModelSpec, groups: Mapping[str, Sequence[str]]) -> dict[str, tuple[str, ...]]:
    if not groups:
        raise ValidationInputError("give at least one variable group, e.g. {'imaging': ['log_nodule_volume']}.")
    out = {}
    for name, members in groups.items():
        members = (members,) if isinstance(members, str) else tuple(members)
        absent = [c for c in members if c not in spec.covariates]
        if not members or absent:
            raise ValidationInputError(
                f"group '{name}' names covariates {absent or members} not in spec '{spec.name}'."
            )
        out[str(name)] = members
    return out


def _signed_drop(frame: pd.DataFrame, column: str) -> pd.Series:
    sign = np.where(frame["metric"].isin(_LOWER_IS_BETTER), -1.0, 1.0)
    return frame[column] * sign


def leave_group_out(
    spec: ModelSpec,
    groups: Mapping[str, Sequence[str]],
    source: TableSource,
    horizons: Sequence[float],
    *,
    n_boot: int = 200,
    seed: int = 0,
    level: float = 0.95,
    config: ExecutionConfig | None = None,
) -> pd.DataFrame:
    """Drop in out-of-bag performance when each variable group is left out and the model refitted.

    Parameters
    ----------
    spec : ModelSpec
        The full model.
    groups : mapping str -> sequence of str
        Group name -> its covariates (e.g. ``{"imaging": [...], "lab": ["serum_marker"]}``).
    source : TableSource
    horizons : sequence of float
        Horizons (days).
    n_boot, seed, level, config
        As in :func:`~riskbench.validation.comparison.compare_specs`.

    Returns
    -------
    pandas.DataFrame
        ``group, metric, horizon_days, drop, ci_low, ci_high, n_boot``; a positive drop means the group
        improves the measure (for Brier and ICI, lower values count as better).
    """
    groups = _check_groups(spec, groups)
    reduced = [spec.without(members, name=f"without {name}") for name, members in groups.items()]
    comparison = compare_specs(
        [spec, *reduced], source, horizons, n_boot=n_boot, seed=seed, pairs="vs_first", level=level, config=config
    )
    diff = comparison.differences
    diff = diff.loc[diff["metric"].isin(_IMPORTANCE_METRICS + ("ici",))].copy()
    # Differences are reduced minus full; the drop is full minus reduced (sign-flipped for lower-is-better).
    low = -_signed_drop(diff, "ci_high")
    high = -_signed_drop(diff, "ci_low")
    out = pd.DataFrame(
        {
            "group": diff["candidate"].str.removeprefix("without "),
            "metric": diff["metric"],
            "horizon_days": diff["horizon_days"],
            "drop": -_signed_drop(diff, "estimate"),
            "ci_low": np.minimum(low, high),
            "ci_high": np.maximum(low, high),
            "n_boot": diff["n_boot"],
        }
    )
    return out.reset_index(drop=True)


@dataclass(frozen=True)
class _PermutationJob:
    spec: ModelSpec
    groups: tuple[tuple[str, tuple[str, ...]], ...]
    source: TableSource
    horizons: tuple[float, ...]


def _permutation_replicate(job: _PermutationJob, index: int, seed: np.random.SeedSequence) -> Any:
    rng = np.random.default_rng(seed)
    ids = job.source.patient_ids()
    drawn = bootstrap_patient_draw(ids, rng)
    try:
        model = fit_spec(job.spec, draw_tables(job.source, drawn), seed=seed_to_int(seed))
        stack = subset_tables(job.source.full_tables(), np.setdiff1d(ids, drawn)).landmark_stack
        base = evaluate_model(model, stack, job.horizons)
        base = base.loc[base["metric"].isin(_IMPORTANCE_METRICS)].reset_index(drop=True)
        frames = []
        for name, members in job.groups:
            shuffled = stack.copy()
            order = rng.permutation(len(stack))
            shuffled[list(members)] = stack[list(members)].to_numpy()[order]
            perm = evaluate_model(model, shuffled, job.horizons)
            perm = perm.loc[perm["metric"].isin(_IMPORTANCE_METRICS)].reset_index(drop=True)
            frame = base[["metric", "horizon_days"]].copy()
            frame["value"] = (base["value"] - perm["value"]).to_numpy()
            frame["value"] = _signed_drop(frame, "value")
            frame.insert(0, "group", name)
            frames.append(frame)
    except REPLICATE_ERRORS as exc:
        return failed_replicate(index, exc)
    return tagged_replicate(index, pd.concat(frames, ignore_index=True))


def permutation_importance(
    spec: ModelSpec,
    groups: Mapping[str, Sequence[str]],
    source: TableSource,
    horizons: Sequence[float],
    *,
    n_boot: int = 50,
    seed: int = 0,
    level: float = 0.95,
    config: ExecutionConfig | None = None,
) -> pd.DataFrame:
    """Out-of-bag permutation importance of variable groups with percentile intervals.

    Parameters
    ----------
    spec : ModelSpec
    groups : mapping str -> sequence of str
        Group name -> covariates shuffled together.
    source : TableSource
    horizons : sequence of float
        Horizons (days).
    n_boot : int, default 50
        Replicates (each: one refit, one shuffle per group).
    seed, level, config
        As in :func:`~riskbench.validation.comparison.compare_specs`.

    Returns
    -------
    pandas.DataFrame
        ``group, metric, horizon_days, drop, ci_low, ci_high, n_boot`` for Harrell's and Uno's C, AUC,
        Brier and scaled Brier; a positive drop means shuffling the group hurts the model.
    """
    groups = _check_groups(spec, groups)
    hs = check_horizons(horizons, source.full_tables().landmark_stack)
    job = _PermutationJob(spec=spec, groups=tuple(groups.items()), source=source, horizons=hs)
    results = run_replicates(_permutation_replicate, job, seed, n_boot, config, description="permutation importance")
    reps, _, _ = collect_replicates(results)
    reps = reps.assign(threshold=np.nan)
    summary = percentile_summary(reps, ["group", "metric", "horizon_days"], level=level)
    return summary.rename(columns={"estimate": "drop"})[
        ["group", "metric", "horizon_days", "drop", "ci_low", "ci_high", "n_boot"]
    ]
