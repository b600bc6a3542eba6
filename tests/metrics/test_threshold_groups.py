"""All-thresholds split against one Aalen–Johansen / Kaplan–Meier fit per subgroup (the definition)."""

import numpy as np
import pytest

from riskbench.metrics.censoring import observed_risk
from riskbench.metrics.threshold_groups import ThresholdGroups, split_by_thresholds


@pytest.mark.parametrize("competing", [False, True])
def test_matches_one_fit_per_subgroup(competing):
    rng = np.random.default_rng(2)
    n = 400
    t = np.r_[rng.integers(1, 30, n // 2), rng.uniform(0.5, 30, n - n // 2)]
    status = rng.choice([0, 1, 2] if competing else [0, 1], n)
    risk = rng.random(n)
    cuts = np.quantile(risk, np.linspace(0.05, 0.95, 19))
    split = split_by_thresholds(t, status, risk, 15.0, cuts)
    for j, c in enumerate(cuts):
        above, below = risk >= c, risk < c
        assert split.risk_above[j] == pytest.approx(observed_risk(t[above], status[above], 15.0)[0], abs=1e-12)
        assert split.risk_below[j] == pytest.approx(observed_risk(t[below], status[below], 15.0)[0], abs=1e-12)
        assert (split.n_above[j], split.n_below[j]) == (above.sum(), below.sum())


def _product_limit_split(t, status, risk, horizon, cuts):
    """Reference: one Aalen–Johansen fit per subgroup and threshold, step by step over that subgroup's own
    ending times (incidence += S(t−)·d₁/n, S ×= 1 − d/n)."""

    def incidence(tt, ss):
        ci, surv = 0.0, 1.0
        for u in np.unique(tt[(ss != 0) & (tt <= horizon)]):
            at_risk = float(np.sum(tt >= u))
            ci += surv * (float(np.sum((tt == u) & (ss == 1))) / at_risk)
            surv *= 1.0 - float(np.sum((tt == u) & (ss != 0))) / at_risk
        return ci

    above = [risk >= c for c in cuts]
    return (
        np.array([incidence(t[a], status[a]) for a in above]),
        np.array([incidence(t[~a], status[~a]) for a in above]),
        np.array([a.sum() for a in above], dtype=float),
    )


def _tied_cohort(rng, n):
    """Whole-day times (many ties, some at the horizon), competing events, risks on a coarse grid (ties, some
    exactly at a threshold)."""
    t = rng.integers(1, 40, n).astype(float)
    status = rng.choice([0, 1, 2], n, p=[0.5, 0.3, 0.2])
    risk = np.round(rng.random(n) * 0.3 + 0.02 * status, 2)
    return t, status, risk


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_resample_counts_equal_the_repeated_rows(seed):
    """Counting each subject as often as a bootstrap resample drew it gives, to the last bit, one product-limit
    fit per subgroup of the resampled rows; and the same split as the materialized rows."""
    rng = np.random.default_rng(seed)
    n, horizon = 300, 20.0
    t, status, risk = _tied_cohort(rng, n)
    cuts = np.unique(risk)[1::3]
    groups = ThresholdGroups(t, status, risk, horizon, cuts)
    for _ in range(5):
        i = rng.integers(0, n, n)
        split = groups.split(np.bincount(i, minlength=n))
        above, below, n_above = _product_limit_split(t[i], status[i], risk[i], horizon, cuts)
        np.testing.assert_array_equal(split.risk_above, above)
        np.testing.assert_array_equal(split.risk_below, below)
        np.testing.assert_array_equal(split.n_above, n_above)
        np.testing.assert_array_equal(split.n_below, n - n_above)
        rows = split_by_thresholds(t[i], status[i], risk[i], horizon, cuts)
        for name in ("n_above", "n_below", "risk_above", "risk_below"):
            np.testing.assert_array_equal(getattr(split, name), getattr(rows, name))


def test_counts_with_nobody_ending_and_thresholds_beyond_every_risk():
    t = np.array([1.0, 2.0, 2.0, 5.0, 6.0])
    status = np.array([1, 2, 1, 0, 1])
    risk = np.array([0.1, 0.5, 0.5, 0.9, 0.2])
    groups = ThresholdGroups(t, status, risk, 4.0, np.array([0.0, 0.5, 2.0]))
    split = groups.split(np.array([0, 0, 0, 4, 1]))  # only subjects without an ending by the horizon
    np.testing.assert_array_equal(split.risk_above, 0.0)
    np.testing.assert_array_equal(split.risk_below, 0.0)
    np.testing.assert_array_equal(split.n_above, [5.0, 4.0, 0.0])
    whole = groups.split()
    assert whole.risk_below[1] == pytest.approx(1 / 2)  # risk < 0.5: one outcome at day 1 among two subjects
    assert whole.risk_above[1] == pytest.approx(1 / 3)  # risk >= 0.5: an outcome and a competing event at day 2
    assert (whole.n_above[2], whole.risk_above[2]) == (0.0, 0.0)


@pytest.mark.parametrize("bad", [np.ones(4, dtype=int), np.ones(5), np.array([1, 1, -1, 2, 2])])
def test_counts_must_be_whole_numbers_per_subject(bad):
    groups = ThresholdGroups(np.arange(1.0, 6.0), np.array([1, 0, 1, 2, 0]), np.linspace(0, 1, 5), 4.0, [0.5])
    with pytest.raises(ValueError, match="whole numbers"):
        groups.split(bad)
