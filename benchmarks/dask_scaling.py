"""Scaling out resampling replicates on Dask: per-task cost, identical results, memory per worker.

Workload: a cohort from the demo generator (seeded; ``--patients``, default 3,000), built by the cohort stage
(landmark stack at 0, 0.5, 1, 1.5, 2 and 3 years, 2-year horizon) and written once to Parquet, as a run
does. Each replicate is one bootstrap-optimism resample of two landmark Cox specs ("clinical" and
"imaging + clinical", as in ``benchmarks/validation.py``): draw patients, refit both, evaluate both on the
drawn and on the original patients with every measure at 1 and 2 years.

The same ``--reps`` replicates (one per task) run serially in this process, on 2 joblib processes and on a
Dask ``LocalCluster`` with 1 and with 2 worker processes (one thread each); every run must give identical
tables. Per-task cost = wall time x workers / tasks, so it includes dispatch and the first read of the Parquet
files by each worker. The worker's resident memory after the run and the tables' in-memory size are printed
for the memory arithmetic of the README. ``--cost-patients`` adds the serial cost of ``--cost-reps``
replicates at a larger cohort (no cluster), for the growth per replicate.

Last line: ``dask replicates 3k patients: ours <x> s per task, peer joblib <y> s, ratio <y/x>`` (ours: Dask
with 2 workers; peer: joblib with 2 processes on the same replicates; a ratio near 1 means Dask adds no cost
over local processes).

Usage: ``python benchmarks/dask_scaling.py [--patients 3000] [--reps 8] [--cost-patients 30000] [--cost-reps 2]``.
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import time
from pathlib import Path

import pandas as pd

from riskbench.cohort import build_cohort
from riskbench.demo import DEFAULT_HORIZON_DAYS, DEFAULT_LANDMARKS_DAYS, generate_cohort
from riskbench.demo.cohort_spec import demo_cohort_spec
from riskbench.validation import ExecutionConfig, ModelSpec, bootstrap_optimism
from riskbench.validation.sources import PrecomputedTables
from riskbench.validation.table_files import TableFiles, table_source

HORIZONS_DAYS = (365.25, 730.5)
IMAGING = ["log_nodule_volume", "log_nodule_volume_change", "suspicion_score"]
CLINICAL = ["serum_marker", "age_at_entry", "pack_years"]
CONSTANT = {"landmark_effects": "none"}
SPECS = [
    ModelSpec("clinical", CLINICAL, params=CONSTANT),
    ModelSpec("imaging + clinical", IMAGING + CLINICAL, params=CONSTANT),
]


def write_tables(n_patients: int, seed: int, folder: Path) -> tuple[TableFiles, dict[str, float]]:
    """Generate and build a cohort, write its two tables to Parquet; the files and their sizes (MB)."""
    data = generate_cohort(n_patients, seed, n_risk_paths=0)
    cohort = build_cohort(data.patients, data.measurements, data.outcomes, demo_cohort_spec())
    frames = {
        "landmark_stack": cohort.landmark_stack(DEFAULT_LANDMARKS_DAYS, DEFAULT_HORIZON_DAYS),
        "counting_process": cohort.counting_process,
    }
    paths, sizes = {}, {}
    for name, frame in frames.items():
        paths[name] = folder / f"{name}.parquet"
        frame.to_parquet(paths[name], index=False)
        sizes[f"{name} rows"] = len(frame)
        sizes[f"{name} file MB"] = paths[name].stat().st_size / 2**20
        sizes[f"{name} memory MB"] = frame.memory_usage(deep=True).sum() / 2**20
    return TableFiles.of(paths), sizes


def timed(source: PrecomputedTables, reps: int, config: ExecutionConfig) -> tuple[float, pd.DataFrame]:
    start = time.perf_counter()
    table = bootstrap_optimism(SPECS, source, HORIZONS_DAYS, n_boot=reps, seed=2026, config=config)
    return time.perf_counter() - start, table


def worker_memory_mb() -> float:
    """Resident memory of this process (MB)."""
    import psutil

    return psutil.Process().memory_info().rss / 2**20


def on_cluster(source: PrecomputedTables, reps: int, workers: int) -> tuple[float, pd.DataFrame, list[float]]:
    """Wall time and table of ``reps`` replicates on a fresh LocalCluster; the workers' memory after it."""
    from distributed import Client, LocalCluster

    with LocalCluster(
        n_workers=workers,
        threads_per_worker=1,
        processes=True,
        dashboard_address=None,
        silence_logs=40,
        host="127.0.0.1",
    ) as cluster:
        config = ExecutionConfig(scheduler_address=cluster.scheduler_address, replicates_per_task=1, progress=False)
        seconds, table = timed(source, reps, config)
        with Client(cluster.scheduler_address, set_as_default=False) as client:
            memory = sorted(client.run(worker_memory_mb).values())
    return seconds, table, memory


def load() -> str:
    one, five, _ = os.getloadavg()
    return f"load average {one:.1f} (1 min), {five:.1f} (5 min) on {os.cpu_count()} cores"


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--patients", type=int, default=3000)
    parser.add_argument("--reps", type=int, default=8, help="replicates of each run (one per task)")
    parser.add_argument("--cost-patients", type=int, default=30000, help="0 skips the larger cohort")
    parser.add_argument("--cost-reps", type=int, default=2)
    args = parser.parse_args(argv)

    with tempfile.TemporaryDirectory(prefix="rb-dask-") as folder:
        files, sizes = write_tables(args.patients, 7, Path(folder))
        print(f"{args.patients} patients: " + ", ".join(f"{k} {v:,.1f}" for k, v in sizes.items()), flush=True)
        source = table_source(files)
        print(load(), flush=True)
        serial, expected = timed(source, args.reps, ExecutionConfig(progress=False))
        joblib_s, joblib_table = timed(
            source, args.reps, ExecutionConfig(n_jobs=2, replicates_per_task=1, progress=False)
        )
        dask1_s, dask1_table, mem1 = on_cluster(source, args.reps, 1)
        dask2_s, dask2_table, mem2 = on_cluster(source, args.reps, 2)
        for table in (joblib_table, dask1_table, dask2_table):
            pd.testing.assert_frame_equal(expected, table, check_exact=True)
        print(
            f"{args.reps} replicates, identical tables: serial {serial:.1f} s, joblib 2 processes {joblib_s:.1f} s, "
            f"Dask 1 worker {dask1_s:.1f} s, Dask 2 workers {dask2_s:.1f} s",
            flush=True,
        )
        per = {
            "serial": serial / args.reps,
            "joblib 2": joblib_s * 2 / args.reps,
            "Dask 1": dask1_s / args.reps,
            "Dask 2": dask2_s * 2 / args.reps,
        }
        print("per-task cost (wall x workers / tasks): " + ", ".join(f"{k} {v:.2f} s" for k, v in per.items()))
        print(f"worker memory after the run: 1 worker {mem1[0]:.0f} MB; 2 workers {mem2[0]:.0f} and {mem2[-1]:.0f} MB")
        print(load(), flush=True)
    if args.cost_patients:
        with tempfile.TemporaryDirectory(prefix="rb-dask-") as folder:
            files, sizes = write_tables(args.cost_patients, 7, Path(folder))
            print(f"{args.cost_patients} patients: " + ", ".join(f"{k} {v:,.1f}" for k, v in sizes.items()), flush=True)
            seconds, _ = timed(table_source(files), args.cost_reps, ExecutionConfig(progress=False))
            growth = (seconds / args.cost_reps) / per["serial"]
            print(
                f"serial per replicate at {args.cost_patients} patients: {seconds / args.cost_reps:.2f} s "
                f"({growth:.1f} x the cost at {args.patients}; patients x {args.cost_patients / args.patients:.0f}); "
                + load(),
                flush=True,
            )
    ours, peer = per["Dask 2"], per["joblib 2"]
    print(
        f"dask replicates {args.patients // 1000}k patients: ours {ours:.2f} s per task, peer joblib {peer:.2f} s, "
        f"ratio {peer / ours:.2f}"
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
