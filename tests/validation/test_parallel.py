"""Serial, joblib and Dask LocalCluster runs give identical numbers from per-replicate seeds."""

import sys
from pathlib import Path

import cloudpickle
import numpy as np
import pytest

from riskbench.validation.errors import ValidationInputError
from riskbench.validation.parallel import ExecutionConfig, replicate_seeds, run_replicates


# Worker processes cannot import this test module by name; ship its functions by value.
cloudpickle.register_pickle_by_value(sys.modules[__name__])


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


def test_dask_local_cluster_equals_serial(monkeypatch):
    """Replicates on a two-process Dask LocalCluster (started and stopped here) equal the serial run."""
    distributed = pytest.importorskip("distributed")
    # Dask ships functions by reference: let worker processes import this test package.
    # (spawned workers copy the parent's sys.path).
    monkeypatch.syspath_prepend(str(Path(__file__).parents[1]))
    serial = run_replicates(_mean_of_draws, {"n": 30}, 5, 5)
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=None, silence_logs=40) as cluster:
        on_cluster = run_replicates(_mean_of_draws, {"n": 30}, 5, 5, ExecutionConfig(scheduler_address=cluster.scheduler_address))
    assert on_cluster == serial
