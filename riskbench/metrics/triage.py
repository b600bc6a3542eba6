"""Triage operating point: the risk threshold below which patients can be spared (e.g. a less intensive
surveillance schedule) while keeping a target negative predictive value — or, alternatively, while still
flagging a target share of those who will have the outcome (sensitivity).

All four accuracy measures are censoring-adjusted: the observed risk by the horizon in each part (below /
at-or-above the threshold) is a Kaplan–Meier (or Aalen–Johansen) estimate, and
sensitivity = P(above | outcome), specificity = P(below | no outcome), PPV = P(outcome | above),
NPV = P(no outcome | below). Intervals are seeded percentile bootstraps over subjects.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from riskbench.metrics.horizon_inputs import single_horizon_inputs
from riskbench.metrics.inputs import ArrayLike, MetricInputError
from riskbench.metrics.threshold_groups import ThresholdGroups


class TargetUnreachable(MetricInputError):
    """No candidate risk threshold meets the triage target on these data (a result, not a broken input).

    ``what`` (e.g. ``"NPV 0.98"``), ``horizon`` (days) and ``best`` (the best value any candidate reaches,
    NaN when no candidate leaves anyone below it) let a caller restate it in its own terms.
    """

    def __init__(self, message: str, *, what: str = "", horizon: float = np.nan, best: float = np.nan) -> None:
        super().__init__(message)
        self.what, self.horizon, self.best = what, horizon, best


QUANTITIES = ("threshold", "sensitivity", "specificity", "ppv", "npv", "fraction_below")
_MAX_CANDIDATES = 200


def _accuracy(split) -> dict[str, np.ndarray]:
    """Censoring-adjusted accuracy of 'flag if risk >= c' for every candidate c."""
    n = split.n_above + split.n_below
    fa, fb = split.n_above / n, split.n_below / n
    pos_a, pos_b = split.risk_above * fa, split.risk_below * fb  # P(outcome and above / below)
    neg_a, neg_b = fa - pos_a, fb - pos_b
    with np.errstate(divide="ignore", invalid="ignore"):
        return {
            "sensitivity": pos_a / (pos_a + pos_b),
            "specificity": neg_b / (neg_a + neg_b),
            "ppv": np.where(split.n_above > 0, split.risk_above, np.nan),
            "npv": np.where(split.n_below > 0, 1.0 - split.risk_below, np.nan),
            "fraction_below": fb,
        }


def _choose(acc: dict[str, np.ndarray], target_npv: float | None, target_sensitivity: float | None) -> int:
    """Index of the highest candidate threshold meeting the target (-1 when none does)."""
    if target_npv is not None:
        ok = (acc["npv"] >= target_npv) & (acc["fraction_below"] > 0)
    else:
        ok = acc["sensitivity"] >= target_sensitivity
    hits = np.flatnonzero(ok)
    return int(hits[-1]) if hits.size else -1


def triage_operating_point(
    time: ArrayLike,
    event: ArrayLike,
    risk: ArrayLike,
    horizon: float,
    *,
    target_npv: float | None = None,
    target_sensitivity: float | None = None,
    n_boot: int = 200,
    seed: int = 0,
    check_direction: bool = True,
) -> pd.DataFrame:
    """Highest risk threshold reaching a target NPV (or sensitivity) at a horizon, with bootstrap intervals.

    Parameters
    ----------
    time
        Follow-up (days).
    event
        0 censored, 1 outcome, 2 competing event.
    risk
        Predicted probability of the outcome by ``horizon``; patients with ``risk < threshold`` are "below".
    horizon
        Days; within [min(time), max(time)).
    target_npv, target_sensitivity
        Exactly one: the NPV the spared group must keep (e.g. 0.99), or the share of outcomes that must
        stay flagged (e.g. 0.95).
    n_boot
        Bootstrap replicates (resampling subjects; seeded).
    seed
        Seed for the bootstrap.
    check_direction
        Refuse a ``risk`` that is clearly anti-concordant (a survival probability passed by mistake).

    Returns
    -------
    DataFrame
        One row per quantity (``threshold, sensitivity, specificity, ppv, npv, fraction_below``) with
        ``estimate``, ``lower``, ``upper`` (2.5th / 97.5th bootstrap percentiles; for the threshold, of the
        threshold re-chosen in each replicate; for the others, at the chosen threshold).

    Notes
    -----
    Candidate thresholds are the distinct predicted risks (at most 200; beyond that, 200 quantiles).
    """
    if (target_npv is None) == (target_sensitivity is None):
        raise MetricInputError("give exactly one of `target_npv` and `target_sensitivity`")
    target = target_npv if target_npv is not None else target_sensitivity
    if target is None or not 0 < float(target) < 1:
        raise MetricInputError(f"the target must be a proportion strictly between 0 and 1; got {target}")
    t, status, r, h = single_horizon_inputs(
        time, event, risk, horizon, metric="triage", check_direction=check_direction
    )

    candidates = np.unique(r)
    if candidates.size > _MAX_CANDIDATES:
        candidates = np.unique(np.quantile(r, np.linspace(0, 1, _MAX_CANDIDATES)))
    groups = ThresholdGroups(t, status, r, h, candidates)  # sorted once; each replicate only recounts
    acc = _accuracy(groups.split())
    chosen = _choose(acc, target_npv, target_sensitivity)
    if chosen < 0:
        what = f"NPV {target_npv}" if target_npv is not None else f"sensitivity {target_sensitivity}"
        reached = np.asarray(acc["npv"] if target_npv is not None else acc["sensitivity"], dtype=float)
        best = float(reached[np.isfinite(reached)].max()) if np.isfinite(reached).any() else np.nan
        reach = f"the best candidate reaches {best:.3f}" if np.isfinite(best) else "no candidate spares anyone"
        raise TargetUnreachable(
            f"no risk threshold reaches {what} at horizon {h:g} days ({reach}); lower the target",
            what=what,
            horizon=h,
            best=best,
        )
    estimate = {"threshold": candidates[chosen], **{k: v[chosen] for k, v in acc.items()}}

    rng = np.random.default_rng(seed)
    draws: dict[str, list[float]] = {q: [] for q in QUANTITIES}
    for _ in range(n_boot):
        i = rng.integers(0, t.size, t.size)
        # a subject drawn k times counts k times: the same whole-number counts as the resampled rows
        b = _accuracy(groups.split(np.bincount(i, minlength=t.size)))
        for k, v in b.items():
            draws[k].append(v[chosen])
        j = _choose(b, target_npv, target_sensitivity)
        draws["threshold"].append(candidates[j] if j >= 0 else np.nan)
    rows = []
    for q in QUANTITIES:
        vals = np.asarray(draws[q], dtype=float)
        vals = vals[np.isfinite(vals)]
        lo, hi = np.quantile(vals, [0.025, 0.975]) if vals.size else (np.nan, np.nan)
        rows.append((q, float(estimate[q]), float(lo), float(hi)))
    return pd.DataFrame(rows, columns=["quantity", "estimate", "lower", "upper"])
