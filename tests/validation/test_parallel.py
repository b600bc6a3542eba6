"""Serial, joblib and Dask LocalCluster runs give identical numbers from per-replicate seeds."""

import sys
from pathlib import Path

import cloudpickle
import numpy as np
import pandas as pd
import pytest

from riskbench.validation import ModelSpec, PrecomputedTables, bootstrap_optimism
from riskbench.validation.errors import ValidationInputError
from riskbench.validation.parallel import ExecutionConfig, replicate_seeds, run_replicates

from .conftest import simulate_stack


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


@pytest.fixture(scope="module")
def local_cluster():
    """A real two-process Dask LocalCluster, started and stopped by these tests."""
    distributed = pytest.importorskip("distributed")
    # Dask ships functions by reference and spawned workers copy the parent's sys.path at start:
    # make this test package importable there before the workers start.
    tests_dir = str(Path(__file__).parents[1])
    sys.path.insert(0, tests_dir)
    try:
        with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                      dashboard_address=None, silence_logs=40) as cluster:
            yield cluster
    finally:
        sys.path.remove(tests_dir)


def test_dask_local_cluster_equals_serial(local_cluster):
    """Replicates on the two-process LocalCluster equal the serial run."""
    serial = run_replicates(_mean_of_draws, {"n": 30}, 5, 5)
    on_cluster = run_replicates(_mean_of_draws, {"n": 30}, 5, 5, ExecutionConfig(scheduler_address=local_cluster.scheduler_address))
    assert on_cluster == serial


def test_bootstrap_optimism_on_local_cluster_equals_serial(local_cluster):
    """The full pipeline (resample patients, refit, all metrics) gives identical numbers on the cluster."""
    stack, cp = simulate_stack(200, seed=8)
    source = PrecomputedTables(stack, cp)
    specs = [ModelSpec("clinical", ["clinical"], params={"landmark_effects": "none"}),
             ModelSpec("both", ["clinical", "imaging"], params={"landmark_effects": "none"})]
    serial = bootstrap_optimism(specs, source, [365.0], n_boot=3, seed=4)
    on_cluster = bootstrap_optimism(specs, source, [365.0], n_boot=3, seed=4,
                                    config=ExecutionConfig(scheduler_address=local_cluster.scheduler_address))
    pd.testing.assert_frame_equal(serial, on_cluster, check_exact=True)


def test_progress_bar_only_when_asked_or_interactive(capsys):
    run_replicates(_mean_of_draws, {"n": 5}, 1, 3, ExecutionConfig(progress=True), description="resampling")
    assert "resampling" in capsys.readouterr().err
    run_replicates(_mean_of_draws, {"n": 5}, 1, 3, description="resampling")  # stderr is not a terminal here
    assert "resampling" not in capsys.readouterr().err


def test_unreachable_scheduler_gives_a_clear_error():
    with pytest.raises(ValidationInputError, match="cannot reach the Dask scheduler"):
        run_replicates(_mean_of_draws, {"n": 3}, 1, 2, ExecutionConfig(scheduler_address="tcp://127.0.0.1:9", connect_timeout_s=1.0))
