"""Cumulative/dynamic AUC and the ROC curve at a horizon.

Outside checks: scikit-survival's ``cumulative_dynamic_auc`` (AUC per horizon and its mean AUC) on the same
inputs to 1e-6 (a peer library run live in the test); McLernon et al. (2023), GBSG2: AUC at 5 years 0.68
(2 decimals as printed).
"""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from sksurv.metrics import cumulative_dynamic_auc
from sksurv.util import Surv

from riskbench.metrics import MetricInputError, auc_cumulative_dynamic, roc_at_horizon


def test_agrees_with_scikit_survival(shipped):
    y = Surv.from_arrays(shipped.event, shipped.time)
    ours = auc_cumulative_dynamic(shipped.time, shipped.event, shipped.risk, shipped.horizons)
    ref, ref_mean = cumulative_dynamic_auc(y, y, shipped.risk, shipped.horizons)
    np.testing.assert_allclose(ours.table["auc"], ref, atol=1e-6)
    assert ours.integrated == pytest.approx(ref_mean, abs=1e-6)


def test_per_horizon_risk_columns_agree_with_scikit_survival(shipped):
    y = Surv.from_arrays(shipped.event, shipped.time)
    cols = np.column_stack([shipped.risk * (k + 1) + np.sin(shipped.risk * k) for k in range(len(shipped.horizons))])
    ours = auc_cumulative_dynamic(shipped.time, shipped.event, cols, shipped.horizons)
    np.testing.assert_allclose(ours.table["auc"], cumulative_dynamic_auc(y, y, cols, shipped.horizons)[0], atol=1e-6)


def test_mclernon_gbsg2_auc_at_five_years(gbsg2_five_years):
    """McLernon et al. (2023): cumulative/dynamic AUC at 5 years 0.68 (evaluated just inside, 4.99 y)."""
    t, e, risk = gbsg2_five_years
    assert round(float(auc_cumulative_dynamic(t, e, risk, 4.99).table["auc"].iloc[0]), 2) == 0.68


@settings(max_examples=20, deadline=None)
@given(seed=st.integers(0, 10_000))
def test_random_half_perfect_one_and_transform_invariance(seed):
    """Common practice: AUC ≈ 0.5 for an unrelated score, 1.0 when every case outranks every control."""
    rng = np.random.default_rng(seed)
    t = rng.exponential(1.0, 2000)
    e = rng.random(2000) < 0.8
    t[np.argmax(t)] += 1.0
    h = np.quantile(t, [0.3, 0.6])
    noise = auc_cumulative_dynamic(t, e, rng.random(2000), h).table["auc"]
    assert np.all(np.abs(noise - 0.5) < 0.08)  # ~5 SE at this size
    assert np.allclose(auc_cumulative_dynamic(t, e, -t, h).table["auc"], 1.0)
    s = rng.normal(size=2000) - t
    a = auc_cumulative_dynamic(t, e, s, h).table["auc"]
    # a transform that does not squeeze differences under the 1e-8 tie tolerance
    b = auc_cumulative_dynamic(t, e, s**3 + s, h).table["auc"]
    np.testing.assert_array_equal(a, b)


def test_roc_area_equals_auc(shipped):
    h = float(shipped.horizons[1])
    roc = roc_at_horizon(shipped.time, shipped.event, shipped.risk, h)
    area = np.trapezoid(roc["sensitivity"], 1 - roc["specificity"])
    auc = auc_cumulative_dynamic(shipped.time, shipped.event, shipped.risk, h).table["auc"].iloc[0]
    assert area == pytest.approx(auc, abs=1e-9)
    assert roc["sensitivity"].is_monotonic_increasing and roc["specificity"].is_monotonic_decreasing


def test_bad_horizons_and_risk_shape():
    t = np.array([1.0, 2.0, 3.0, 4.0])
    e = np.array([1, 0, 1, 1])
    r = np.array([0.4, 0.3, 0.2, 0.1])
    with pytest.raises(MetricInputError, match=r"allowed range is \[1, 4\)"):
        auc_cumulative_dynamic(t, e, r, [4.0])
    with pytest.raises(MetricInputError, match="no outcome"):
        auc_cumulative_dynamic(t, np.array([0, 0, 1, 1]), r, [1.5])
    with pytest.raises(MetricInputError, match="columns"):
        auc_cumulative_dynamic(t, e, np.ones((4, 3)), [1.5, 2.5])
