"""The O(n log n) dominance sums against a direct double loop (the definition)."""

import numpy as np
import pytest

from riskbench.metrics.dominance import dominance_counts, dominance_sums


@pytest.mark.parametrize("n", [1, 2, 7, 31, 33, 150, 700])
def test_matches_pairwise_definition(n):
    rng = np.random.default_rng(n)
    key = rng.integers(0, max(2, n // 5), n)
    rank = rng.integers(0, max(2, n // 4), n)
    weight = rng.random(n) * (rng.random(n) < 0.8)
    got = dominance_sums(key, rank, weight)
    earlier = key[None, :] < key[:, None]  # [i, j]: j before i
    w = weight[None, :]
    np.testing.assert_allclose(got.below, (w * (earlier & (rank[None, :] < rank[:, None]))).sum(1), atol=1e-9)
    np.testing.assert_allclose(got.tied, (w * (earlier & (rank[None, :] == rank[:, None]))).sum(1), atol=1e-9)
    np.testing.assert_allclose(got.total, (w * earlier).sum(1), atol=1e-9)


@pytest.mark.parametrize("n", [1, 2, 7, 31, 150, 700])
def test_counts_equal_the_sums_with_unit_weights(n):
    """The counting walk equals the definition, and dominance_sums with 0/1 weights bit for bit; items that do
    not ask get 0."""
    rng = np.random.default_rng(n + 1)
    key = rng.integers(0, max(2, n // 5), n)
    rank = rng.integers(0, max(2, n // 4), n)
    counted = rng.random(n) < 0.7
    asking = rng.random(n) < 0.5
    got = dominance_counts(key, rank, counted, asking)
    sums = dominance_sums(key, rank, counted.astype(float))
    for name in ("below", "tied", "total"):
        np.testing.assert_array_equal(getattr(got, name), np.where(asking, getattr(sums, name), 0.0))
    earlier = (key[None, :] < key[:, None]) & counted[None, :]
    np.testing.assert_array_equal(got.below, asking * (earlier & (rank[None, :] < rank[:, None])).sum(1))
    np.testing.assert_array_equal(got.tied, asking * (earlier & (rank[None, :] == rank[:, None])).sum(1))
    everyone = dominance_counts(key, rank)
    np.testing.assert_array_equal(everyone.total, (key[None, :] < key[:, None]).sum(1))
