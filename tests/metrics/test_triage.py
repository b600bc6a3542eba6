"""Triage bootstrap: counting each subject as often as a replicate drew it gives exactly what resampling the
rows themselves gives (same draws, same thresholds chosen, same intervals)."""

import numpy as np
import pandas as pd
import pytest

from riskbench.metrics.threshold_groups import split_by_thresholds
from riskbench.metrics.triage import QUANTITIES, _accuracy, _choose, triage_operating_point

# _accuracy and _choose are private on purpose: the reference below must turn counts into accuracy and pick the
# threshold by the module's own rules, so that only the counting of resampled subjects is under test.


def _resampled_rows_reference(t, status, risk, horizon, target_npv, target_sensitivity, n_boot, seed):
    """The bootstrap written out: materialize each replicate's rows and split them afresh."""
    candidates = np.unique(risk)
    if candidates.size > 200:
        candidates = np.unique(np.quantile(risk, np.linspace(0, 1, 200)))
    acc = _accuracy(split_by_thresholds(t, status, risk, horizon, candidates))
    chosen = _choose(acc, target_npv, target_sensitivity)
    estimate = {"threshold": candidates[chosen], **{k: v[chosen] for k, v in acc.items()}}
    rng = np.random.default_rng(seed)
    draws = {q: [] for q in QUANTITIES}
    picked = []
    for _ in range(n_boot):
        i = rng.integers(0, t.size, t.size)
        b = _accuracy(split_by_thresholds(t[i], status[i], risk[i], horizon, candidates))
        for k, v in b.items():
            draws[k].append(v[chosen])
        j = _choose(b, target_npv, target_sensitivity)
        picked.append(j)
        draws["threshold"].append(candidates[j] if j >= 0 else np.nan)
    rows = []
    for q in QUANTITIES:
        vals = np.asarray(draws[q], dtype=float)
        vals = vals[np.isfinite(vals)]
        lo, hi = np.quantile(vals, [0.025, 0.975]) if vals.size else (np.nan, np.nan)
        rows.append((q, float(estimate[q]), float(lo), float(hi)))
    return pd.DataFrame(rows, columns=["quantity", "estimate", "lower", "upper"]), picked


@pytest.mark.parametrize(("seed", "many_risks"), [(0, False), (1, False), (2, True)])
def test_bootstrap_equals_resampling_the_rows(seed, many_risks):
    rng = np.random.default_rng(seed)
    n, horizon = 400, 25.0
    t = rng.integers(1, 40, n).astype(float)  # whole days: many tied times, some at the horizon
    status = rng.choice([0, 1, 2], n, p=[0.55, 0.25, 0.2])
    # coarse grid: tied risks and candidates; finer than 200 values: quantile candidates between risks
    risk = np.round(0.05 + 0.25 * rng.random(n) + 0.1 * (status == 1), 4 if many_risks else 2)
    candidates = np.unique(risk) if not many_risks else np.unique(np.quantile(risk, np.linspace(0, 1, 200)))
    acc = _accuracy(split_by_thresholds(t, status, risk, horizon, candidates))
    # targets met exactly (>=) by a middle candidate on the full data, so replicates land on either side
    middle = candidates.size // 2
    for target in ({"target_npv": acc["npv"][middle]}, {"target_sensitivity": acc["sensitivity"][middle]}):
        out = triage_operating_point(t, status, risk, horizon, **target, n_boot=40, seed=seed, check_direction=False)
        ref, picked = _resampled_rows_reference(
            t, status, risk, horizon, target.get("target_npv"), target.get("target_sensitivity"), 40, seed
        )
        assert len(set(picked)) > 2  # replicates disagree on the threshold: the intervals have something to check
        pd.testing.assert_frame_equal(out, ref, check_exact=True)
