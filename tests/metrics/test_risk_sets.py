"""The shared risk-set machinery gives what the separate measures give.

The separate functions are checked against scikit-survival elsewhere (tests/metrics/test_concordance.py); here
the combined pass of :func:`riskbench.metrics.concordance.concordance_at_horizon` must agree with them on any
data: Harrell's C exactly (its sums are integer counts), Uno's C to rounding, and the same errors.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st

from riskbench.metrics import concordance_harrell, concordance_uno
from riskbench.metrics.concordance import concordance_at_horizon
from riskbench.metrics.inputs import MetricInputError
from riskbench.metrics.risk_sets import DistinctValues, OutcomeSet, censoring_curve, dense_rank, horizon_inputs


def _separate(t, status, risk, tau):
    by = np.where(t <= tau, status, 0)
    harrell = concordance_harrell(np.minimum(t, tau), by, risk, with_se=False).estimate
    return harrell, concordance_uno(t, status, risk, tau, with_se=False).estimate


@settings(max_examples=60, deadline=None)
@given(
    seed=st.integers(0, 10_000),
    n=st.integers(3, 300),
    competing=st.booleans(),
    coarse=st.booleans(),
    q=st.floats(0.2, 1.0),
)
def test_combined_pass_equals_the_separate_indices(seed, n, competing, coarse, q):
    rng = np.random.default_rng(seed)
    t = rng.integers(1, 25, n).astype(float) if coarse else rng.exponential(100, n).round(1)
    status = rng.choice([0, 1, 2] if competing else [0, 1], n)
    risk = rng.integers(0, 4, n) / 4 if coarse else rng.random(n)
    tau = float(np.quantile(t, q))
    try:
        expected = _separate(t, status, risk, tau)
    except MetricInputError as exc:
        with pytest.raises(MetricInputError, match=str(exc)[:20]):
            concordance_at_horizon(OutcomeSet.from_arrays(t, status), risk, tau)
        return
    got = concordance_at_horizon(OutcomeSet.from_arrays(t, status), risk, tau)
    assert got.harrell == expected[0]
    assert got.uno == pytest.approx(expected[1], rel=1e-12, abs=1e-15)


@settings(max_examples=30, deadline=None)
@given(seed=st.integers(0, 10_000), n=st.integers(5, 200))
def test_one_outcome_set_serves_every_score_and_horizon(seed, n):
    """Reusing the set's cached sort and censoring curve changes nothing."""
    rng = np.random.default_rng(seed)
    t = rng.exponential(100, n).round(1)
    status = rng.choice([0, 1, 2], n)
    assume((status == 1).sum() >= 2)
    shared = OutcomeSet.from_arrays(t, status)
    for tau in np.quantile(t, [0.5, 0.9]):
        risk = rng.random(n)
        try:
            fresh = concordance_at_horizon(OutcomeSet.from_arrays(t, status), risk, float(tau))
        except MetricInputError:
            continue
        assert concordance_at_horizon(shared, risk, float(tau)) == fresh


def test_dense_rank_ties_within_tolerance():
    assert dense_rank(np.array([0.3, 0.1, 0.2, 0.1])).tolist() == [2, 0, 1, 0]
    assert dense_rank(np.array([0.1 + 0.2, 0.3, 0.5]), tol=1e-8).tolist() == [0, 0, 1]


def test_censoring_curve_needs_both_training_arrays_and_horizon_inputs_check_horizons():
    t, status = np.array([1.0, 2.0, 3.0, 4.0]), np.array([1, 0, 1, 0])
    with pytest.raises(MetricInputError, match="both"):
        censoring_curve(t, status, train_time=t)
    # G after t = 2: one of three at risk censored (common practice: Kaplan–Meier of the censoring times)
    assert float(censoring_curve(t, status)(2.5)) == pytest.approx(2 / 3)
    with pytest.raises(MetricInputError, match="repeat"):
        horizon_inputs(t, status, np.ones((4, 2)) * 0.5, [2.0, 2.0], probability=True)
    _, _, r, h = horizon_inputs(t, status, np.c_[np.full(4, 0.2), np.full(4, 0.1)], [3.0, 1.5], probability=True)
    assert h.tolist() == [1.5, 3.0] and r[0].tolist() == [0.1, 0.2]


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 10_000), n=st.integers(20, 300))
def test_auc_and_brier_read_the_shared_censoring_curve_with_the_same_result(seed, n):
    from riskbench.metrics import auc_cumulative_dynamic, brier_score

    rng = np.random.default_rng(seed)
    t = rng.exponential(100, n).round(1) + 0.1
    status = rng.choice([0, 1, 2], n)
    risk = rng.random(n)
    horizon = float(np.quantile(t, 0.6))
    assume(((status == 1) & (t <= horizon)).any() and (t > horizon).any())
    shared = OutcomeSet.from_arrays(t, status)
    for _ in range(2):  # the second call reads the set's cached curves
        auc = auc_cumulative_dynamic(t, status, risk, [horizon], outcomes=shared)
        assert auc.table.equals(auc_cumulative_dynamic(t, status, risk, [horizon]).table)
        brier = brier_score(t, status, risk, [horizon], check_direction=False, outcomes=shared)
        assert brier.equals(brier_score(t, status, risk, [horizon], check_direction=False))


@settings(max_examples=40, deadline=None)
@given(seed=st.integers(0, 10_000), n=st.integers(1, 200), coarse=st.booleans())
def test_a_selection_ranks_as_if_sorted_on_its_own(seed, n, coarse):
    """Distinct values, positions and dense ranks (with the tolerance joining near neighbours) of any selection
    with repeats, by counting, equal those of sorting the selection."""
    rng = np.random.default_rng(seed)
    values = rng.integers(0, 6, n) / 5 + rng.choice([0.0, 4e-9, 2e-8], n) if coarse else rng.random(n)
    index = rng.integers(0, n, rng.integers(1, 2 * n + 1))
    distinct = DistinctValues.of(values)
    uniq, code = distinct.select(index)
    expected_uniq, expected_code = np.unique(values[index], return_inverse=True)
    np.testing.assert_array_equal(uniq, expected_uniq)
    np.testing.assert_array_equal(code, expected_code.reshape(-1))
    for tol in (0.0, 1e-8):
        np.testing.assert_array_equal(distinct.dense_rank(index, tol), dense_rank(values[index], tol))


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 10_000), n=st.integers(5, 200))
def test_an_outcome_set_given_its_distinct_times_caches_the_same_curves(seed, n):
    rng = np.random.default_rng(seed)
    t = rng.integers(1, 40, n).astype(float)
    status = rng.choice([0, 1, 2], n)
    index = rng.integers(0, n, n)
    given_times = OutcomeSet.from_arrays(t[index], status[index], distinct_times=DistinctValues.of(t).select(index))
    sorted_here = OutcomeSet.from_arrays(t[index], status[index])
    for a, b in zip(given_times.later_key(), sorted_here.later_key()):
        np.testing.assert_array_equal(a, b)
    np.testing.assert_array_equal(given_times.time_rank(), sorted_here.time_rank())
    for field in ("times", "values", "variance"):
        np.testing.assert_array_equal(getattr(given_times.censoring, field), getattr(sorted_here.censoring, field))
    for target, codes in (
        ("cumulative_incidence", status[index]),
        ("cause_specific", np.where(status[index] == 2, 0, status[index])),
    ):
        a, b = given_times.observed_risk(target, codes), sorted_here.observed_risk(target, codes)
        np.testing.assert_array_equal(a.curve.values, b.curve.values)
        assert a.at(20.0) == b.at(20.0)
