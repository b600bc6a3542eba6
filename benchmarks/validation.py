"""Benchmark of the validation stage: bootstrap optimism correction of two landmark Cox specs.

Workload: the committed 3,000-patient demo cohort (``demo_data/clean``), landmark stack at 0, 0.5, 1, 1.5, 2
and 3 years with a 2-year horizon (about 16 k rows); specs "clinical" (serum marker, age at entry, pack-years)
and "imaging + clinical" (+ log nodule volume, its change, suspicion score), each a landmark super-model with
a competing-event model and constant covariate effects (the demo truth's effects are constant). Every
replicate draws 3,000 patients with replacement, refits both specs, and evaluates both on the drawn and on
the original patients with every measure (Harrell and Uno C, AUC, Brier, scaled Brier, calibration slope,
O/E, ICI at 1 and 2 years; net benefit at 5, 10 and 20 %).

Goal: 200 replicates in <= 180 s on this 2-core machine with 2 workers. There is no peer in the same run
(no general library runs this pipeline); the last line gives our time against the goal and the speed-up
from 1 to 2 workers, measured on the same ``--speedup-reps`` replicates (seeds identical, results equal).

Usage: ``python benchmarks/validation.py [--reps 200] [--speedup-reps 16] [--repeats 1]``.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from pathlib import Path

import pandas as pd

from riskbench.cohort import build_cohort
from riskbench.demo import DEFAULT_HORIZON_DAYS, DEFAULT_LANDMARKS_DAYS, read_tables
from riskbench.demo.cohort_spec import demo_cohort_spec
from riskbench.validation import ExecutionConfig, ModelSpec, PrecomputedTables, bootstrap_optimism

ROOT = Path(__file__).resolve().parents[1]
GOAL_SECONDS = 180.0
HORIZONS_DAYS = (365.25, 730.5)
THRESHOLDS = (0.05, 0.10, 0.20)
IMAGING = ["log_nodule_volume", "log_nodule_volume_change", "suspicion_score"]
CLINICAL = ["serum_marker", "age_at_entry", "pack_years"]


def _source() -> PrecomputedTables:
    tables = read_tables(ROOT / "demo_data" / "clean")
    cohort = build_cohort(tables["patients"], tables["measurements"], tables["outcomes"], demo_cohort_spec())
    return PrecomputedTables.from_cohort(
        cohort, DEFAULT_LANDMARKS_DAYS, DEFAULT_HORIZON_DAYS, with_counting_process=False
    )


def _run(source: PrecomputedTables, specs: list[ModelSpec], reps: int, n_jobs: int) -> tuple[float, pd.DataFrame]:
    start = time.perf_counter()
    table = bootstrap_optimism(
        specs,
        source,
        HORIZONS_DAYS,
        n_boot=reps,
        seed=2026,
        thresholds=THRESHOLDS,
        config=ExecutionConfig(n_jobs=n_jobs, progress=False),
    )
    return time.perf_counter() - start, table


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--reps", type=int, default=200, help="replicates of the headline run (2 workers)")
    parser.add_argument("--speedup-reps", type=int, default=16, help="replicates timed with 1 and with 2 workers")
    parser.add_argument("--repeats", type=int, default=1, help="repeats of the headline run (median quoted)")
    args = parser.parse_args(argv)

    source = _source()
    n_rows = len(source.full_tables().landmark_stack)
    print(f"demo cohort: {len(source.patient_ids())} patients, {n_rows} landmark rows", flush=True)
    constant = {"landmark_effects": "none"}
    specs = [
        ModelSpec("clinical", CLINICAL, params=constant),
        ModelSpec("imaging + clinical", IMAGING + CLINICAL, params=constant),
    ]

    one, table_one = _run(source, specs, args.speedup_reps, 1)
    two, table_two = _run(source, specs, args.speedup_reps, 2)
    pd.testing.assert_frame_equal(table_one, table_two, check_exact=True)
    speedup = one / two
    print(
        f"{args.speedup_reps} reps: 1 worker {one:.1f} s, 2 workers {two:.1f} s, speed-up {speedup:.2f} "
        "(identical results)",
        flush=True,
    )

    times = []
    table = table_two
    for _ in range(args.repeats):
        seconds, table = _run(source, specs, args.reps, 2)
        times.append(seconds)
        print(f"{args.reps} reps, 2 workers: {seconds:.1f} s", flush=True)
    median = statistics.median(times)
    c = table[(table["metric"] == "harrell_c") & (table["horizon_days"] == 730.5)]
    print(c[["spec", "apparent", "optimism", "corrected", "n_boot"]].to_string(index=False), flush=True)
    print(
        f"bootstrap {args.reps} reps x 2 specs: ours {median:.1f} s (2 workers), goal {GOAL_SECONDS:.0f} s, "
        f"ratio {GOAL_SECONDS / median:.2f}; speed-up 1->2 workers {speedup:.2f}"
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
