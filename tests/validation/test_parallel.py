"""Serial, joblib and Dask LocalCluster runs give identical numbers from per-replicate seeds, whatever the
grouping of replicates into tasks; tables reach the workers as Parquet files read once per worker process."""

import sys
from pathlib import Path

import cloudpickle
import numpy as np
import pandas as pd
import pytest
from hypothesis import assume, given
from hypothesis import strategies as st

from riskbench.validation import ModelSpec, PrecomputedTables, bootstrap_optimism, compare_specs
from riskbench.validation.comparison import comparison_plan
from riskbench.validation.errors import ValidationInputError
from riskbench.validation.holdout import evaluate_splits
from riskbench.validation.optimism import bootstrap_optimism_result
from riskbench.validation.parallel import (
    ExecutionConfig,
    replicate_chunks,
    replicate_seeds,
    run_replicates,
    task_size,
)
from riskbench.validation.plans import patient_folds
from riskbench.validation.table_files import TableFile, TableFiles, parquet_tables

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


@given(n=st.integers(0, 300), size=st.integers(1, 50))
def test_tasks_cover_every_replicate_once_in_order(n, size):
    """Invariant: the tasks are consecutive, cover 0..n-1 exactly once and none exceeds the size."""
    chunks = replicate_chunks(n, size)
    assert [i for c in chunks for i in c] == list(range(n))
    assert all(1 <= len(c) <= size for c in chunks)


@given(n=st.integers(1, 2000), workers=st.integers(1, 64))
def test_default_task_size_gives_about_four_tasks_per_worker(n, workers):
    """Invariant: a task for every worker while there are replicates to share, at least two each from four
    replicates per worker on, and never more than four each."""
    tasks = len(replicate_chunks(n, task_size(n, workers)))
    assert min(n, workers) <= tasks <= 4 * workers
    assume(n >= 4 * workers)
    assert tasks >= 2 * workers


@pytest.mark.parametrize("per_task", [1, 2, 5, 7])
def test_results_do_not_depend_on_the_grouping(per_task):
    serial = run_replicates(_mean_of_draws, {"n": 20}, 3, 7)
    grouped = run_replicates(_mean_of_draws, {"n": 20}, 3, 7, ExecutionConfig(n_jobs=2, replicates_per_task=per_task))
    assert grouped == serial


def test_bad_replicates_per_task():
    with pytest.raises(ValidationInputError, match="replicates_per_task"):
        ExecutionConfig(replicates_per_task=0)


@pytest.fixture(scope="module")
def local_cluster():
    """A real three-process Dask LocalCluster (one thread each), started and stopped by these tests."""
    distributed = pytest.importorskip("distributed")
    # Dask ships functions by reference and spawned workers copy the parent's sys.path at start:
    # make this test package importable there before the workers start.
    tests_dir = str(Path(__file__).parents[1])
    sys.path.insert(0, tests_dir)
    try:
        with distributed.LocalCluster(
            n_workers=3, threads_per_worker=1, processes=True, dashboard_address=None, silence_logs=40
        ) as cluster:
            yield cluster
    finally:
        sys.path.remove(tests_dir)


def test_dask_local_cluster_equals_serial(local_cluster):
    """Replicates on the three-process LocalCluster equal the serial run."""
    serial = run_replicates(_mean_of_draws, {"n": 30}, 5, 5)
    on_cluster = run_replicates(
        _mean_of_draws, {"n": 30}, 5, 5, ExecutionConfig(scheduler_address=local_cluster.scheduler_address)
    )
    assert on_cluster == serial


def test_bootstrap_optimism_on_local_cluster_equals_serial(local_cluster):
    """The full pipeline (resample patients, refit, all metrics) gives identical numbers on the cluster."""
    stack, cp = simulate_stack(200, seed=8)
    source = PrecomputedTables(stack, cp)
    specs = [
        ModelSpec("clinical", ["clinical"], params={"landmark_effects": "none"}),
        ModelSpec("both", ["clinical", "imaging"], params={"landmark_effects": "none"}),
    ]
    serial = bootstrap_optimism(specs, source, [365.0], n_boot=3, seed=4)
    on_cluster = bootstrap_optimism(
        specs,
        source,
        [365.0],
        n_boot=3,
        seed=4,
        config=ExecutionConfig(scheduler_address=local_cluster.scheduler_address),
    )
    pd.testing.assert_frame_equal(serial, on_cluster, check_exact=True)


@pytest.fixture(scope="module")
def parquet_source(tmp_path_factory):
    """A synthetic cohort's landmark stack and counting-process table written once to Parquet."""
    stack, cp = simulate_stack(240, seed=21)
    folder = tmp_path_factory.mktemp("data")
    stack.to_parquet(folder / "landmark_stack.parquet", index=False)
    cp.to_parquet(folder / "counting_process.parquet", index=False)
    files = TableFiles.of(
        {"landmark_stack": folder / "landmark_stack.parquet", "counting_process": folder / "counting_process.parquet"}
    )
    return parquet_tables(files.files["landmark_stack"], files.files["counting_process"]), PrecomputedTables(stack, cp)


SPECS = [
    ModelSpec("clinical", ["clinical"], params={"landmark_effects": "none"}),
    ModelSpec("both", ["clinical", "imaging"], params={"landmark_effects": "none"}),
]


def _cached_tables():
    from riskbench.validation import table_files

    return sorted(t.path for t in table_files._cache)  # private on purpose: what this worker process has read


def test_bootstrap_from_parquet_identical_serial_joblib_and_cluster(local_cluster, parquet_source):
    """Bootstrap optimism (resample patients, refit, every metric) from Parquet tables: the same numbers
    serially from in-memory frames, serially from the files, on 2 joblib processes and on the 3-process
    cluster (replicates grouped two per task), and every cluster worker that ran a task read the files itself."""
    files, frames = parquet_source
    run = dict(n_boot=6, seed=4)
    serial = bootstrap_optimism(SPECS, frames, [365.0], **run)
    from_files = bootstrap_optimism(SPECS, files, [365.0], **run)
    on_joblib = bootstrap_optimism(SPECS, files, [365.0], config=ExecutionConfig(n_jobs=2), **run)
    cluster = ExecutionConfig(scheduler_address=local_cluster.scheduler_address, replicates_per_task=2)
    on_cluster = bootstrap_optimism(SPECS, files, [365.0], config=cluster, **run)
    for other in (from_files, on_joblib, on_cluster):
        pd.testing.assert_frame_equal(serial, other, check_exact=True)
    from distributed import Client

    with Client(local_cluster.scheduler_address, set_as_default=False) as client:
        read = client.run(_cached_tables)
    assert sum(bool(paths) for paths in read.values()) >= 2  # three tasks spread over the workers
    assert all(p in {f.path for f in files.files if f} for paths in read.values() for p in paths)


def test_comparison_from_the_optimism_refits_identical_on_the_cluster(local_cluster, parquet_source):
    """The optimism measures the paired comparison's replicates from its refits on the cluster, and the comparison
    runs the one it is not given on the cluster too: the numbers of the comparison run serially on its own."""
    files, frames = parquet_source
    cluster = ExecutionConfig(scheduler_address=local_cluster.scheduler_address)
    plan = comparison_plan(SPECS, [365.0], frames.full_tables().landmark_stack, pairs=[(0, 1)])
    optimism = bootstrap_optimism_result(SPECS, files, [365.0], n_boot=4, seed=6, paired=plan, config=cluster)
    some = {i: r for i, r in optimism.paired.items() if i != 2}
    assert sorted(some) == [0, 1, 3]
    mixed = compare_specs(SPECS, files, [365.0], n_boot=4, seed=6, pairs=[(0, 1)], known=some, config=cluster)
    serial = compare_specs(SPECS, frames, [365.0], n_boot=4, seed=6, pairs=[(0, 1)])
    for got, expected in ((mixed.performance, serial.performance), (mixed.differences, serial.differences)):
        pd.testing.assert_frame_equal(got, expected, check_exact=True)


def test_folds_from_parquet_identical_serial_joblib_and_cluster(local_cluster, parquet_source):
    """Patient-grouped 5-fold cross-validation from Parquet tables: identical on every executor."""
    files, frames = parquet_source
    stack = frames.full_tables().landmark_stack
    splits = patient_folds(stack["patient_id"].to_numpy(), stack["status"].to_numpy(), 5, 9)
    serial = evaluate_splits(SPECS, frames, splits, [365.0], seed=2)
    on_joblib = evaluate_splits(SPECS, files, splits, [365.0], seed=2, config=ExecutionConfig(n_jobs=2))
    on_cluster = evaluate_splits(
        SPECS, files, splits, [365.0], seed=2, config=ExecutionConfig(scheduler_address=local_cluster.scheduler_address)
    )
    for other in (on_joblib, on_cluster):
        for expected, got in zip(serial, other):
            pd.testing.assert_frame_equal(expected, got, check_exact=True)


def _rows_of(shared, index, _seed):
    return index, len(shared["landmark_stack"])


def test_workers_that_cannot_read_the_files_stop_the_run_before_any_task(local_cluster, tmp_path):
    """A table file the workers cannot see (as on a cluster without shared storage) is named, with the fix."""
    gone = TableFiles({"landmark_stack": TableFile(str(tmp_path / "absent.parquet"), 10, "0" * 64)})
    config = ExecutionConfig(scheduler_address=local_cluster.scheduler_address)
    with pytest.raises(ValidationInputError, match=r"absent\.parquet cannot be read here.*same path"):
        run_replicates(_rows_of, gone, 1, 3, config)


def test_progress_bar_only_when_asked_or_interactive(capsys):
    run_replicates(_mean_of_draws, {"n": 5}, 1, 3, ExecutionConfig(progress=True), description="resampling")
    assert "resampling" in capsys.readouterr().err
    run_replicates(_mean_of_draws, {"n": 5}, 1, 3, description="resampling")  # stderr is not a terminal here
    assert "resampling" not in capsys.readouterr().err


def test_unreachable_scheduler_gives_a_clear_error():
    with pytest.raises(ValidationInputError, match="cannot reach the Dask scheduler"):
        run_replicates(
            _mean_of_draws,
            {"n": 3},
            1,
            2,
            ExecutionConfig(scheduler_address="tcp://127.0.0.1:9", connect_timeout_s=1.0),
        )
