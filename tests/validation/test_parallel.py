"""Serial, joblib and Dask LocalCluster runs give identical numbers from per-replicate seeds."""

import numpy as np
import pytest

from riskbench.validation.errors import ValidationInputError
from riskbench.validation.parallel import ExecutionConfig, replicate_seeds, run_replicates


def _mean_of_draws(shared, index, seed_seq):
    rng = np.random.default_rng(seed_seq)
    return index, float(rng.normal(size=shared["n"]).mean())


def test_seeds_are_spawned_from_one_seed():
    a = replicate_seeds(3, 4)
    b = replicate_seeds(3, 4)
    assert [s.generate_state(2).tolist() for s in a] == [s.generate_state(2).tolist() for s in b]
    assert len({tuple(s.generate_state(2)) for s in a}) == 4


def test_joblib_two_processes_equal_serial():
    serial = run_replicates(_mean_of_draws, {"n": 50}, 11, 6)
    parallel = run_replicates(_mean_of_draws, {"n": 50}, 11, 6, ExecutionConfig(n_jobs=2))
    assert serial == parallel
    assert [i for i, _ in serial] == list(range(6))


def test_bad_n_jobs():
    with pytest.raises(ValidationInputError):
        ExecutionConfig(n_jobs=0)
