"""The O(n log n) dominance sums against a direct double loop (the definition)."""

import numpy as np
import pytest

from riskbench.metrics.dominance import dominance_sums


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
