"""Survival forest on a 50 k-row landmark stack: time, peak memory, and the cost of coarsening the times.

Goal (issue 4): 50 000 landmark-stack rows fitted (and predicted on 10 000 held-out rows) in <= 60 s and
<= 1 GB peak resident memory on 2 cores, with times coarsened to a monthly grid; and, in the same run, the
held-out Harrell concordance of the coarsened forest within 0.01 of a forest on continuous times, both fitted
on the same 5 000-row subsample (continuous times are what makes the forest run out of memory at scale).

Data: the synthetic demo cohort (``riskbench.demo.generate_cohort``, seeded) through the cohort stage
(``build_cohort`` with ``demo_cohort_spec()``), landmarks every 6 months for 3.5 years, horizon 2 years;
the first 50 000 stack rows (sorted by patient) of one cohort for fitting, 10 000 rows of another for testing.
The data are built once (not timed); each measured fit runs in its own child process; its peak memory is the
larger of its own ``ru_maxrss`` and the peak, sampled every 50 ms, of the summed resident set size of the
child and its worker processes.

Run: ``.venv/bin/python benchmarks/forest.py [--repeats 3]``. Prints medians; the last line is the summary.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

MONTH = 365.25 / 12
HORIZON = 24 * MONTH
LANDMARKS = [k * 6 * MONTH for k in range(8)]
COVARIATES = [
    "landmark",
    "log_nodule_volume",
    "log_nodule_volume_change",
    "suspicion_score",
    "serum_marker",
    "days_since_exam",
    "n_exams",
    "age",
    "sex_male",
    "pack_years",
]
N_ROWS, N_TEST, N_SUB = 50_000, 10_000, 5_000
FOREST_PARAMS = dict(n_estimators=100, max_samples=5_000, min_samples_leaf=15, random_state=0, n_jobs=2)
SUBSAMPLE_PARAMS = dict(n_estimators=50, max_samples=None)


def demo_stack(n_rows: int, n_patients: int, seed: int) -> pd.DataFrame:
    """The first ``n_rows`` landmark rows (sorted by patient) of a seeded demo cohort."""
    from riskbench.cohort import build_cohort
    from riskbench.demo import generate_cohort
    from riskbench.demo.cohort_spec import demo_cohort_spec

    cohort = generate_cohort(n_patients, seed=seed, n_risk_paths=0)
    tables = build_cohort(cohort.patients, cohort.measurements, cohort.outcomes, demo_cohort_spec())
    stack = tables.landmark_stack(LANDMARKS, HORIZON).dropna(subset=COVARIATES)
    stack = stack.sort_values(["patient_id", "landmark"], kind="stable").reset_index(drop=True)
    last_patient = stack["patient_id"].iloc[min(n_rows, len(stack)) - 1]
    keep = stack["patient_id"] <= last_patient
    if keep.sum() < n_rows:
        raise RuntimeError(f"the demo cohort gave only {int(keep.sum())} rows; raise n_patients")
    return stack[keep].iloc[:n_rows]


def concordance(stack: pd.DataFrame, risk: np.ndarray) -> float:
    """Harrell's C of the risk at the horizon for the outcome (competing events count as censored)."""
    from lifelines.utils import concordance_index

    return float(concordance_index(stack["time"], -risk, stack["status"] == 1))


def child(task: str, folder: Path) -> None:
    """Run one measured task and print a JSON line: seconds, peak RSS (bytes), concordance."""
    from riskbench.models import SurvivalForest

    train = pd.read_parquet(folder / "train.parquet")
    test = pd.read_parquet(folder / "test.parquet")
    if task == "full":
        params, rows = FOREST_PARAMS | {"grid_days": MONTH}, train
    else:
        # 5 k-row subsample, coarsened or continuous times, fewer trees and test rows: with continuous
        # times every leaf holds ~5 000 time points, which is the memory problem the grid solves
        rows, test = train.sample(N_SUB, random_state=3), test.iloc[:N_SUB]
        params = FOREST_PARAMS | SUBSAMPLE_PARAMS | {"grid_days": MONTH if task == "sub_grid" else None}
    started = time.perf_counter()
    model = SurvivalForest(COVARIATES, **params).fit(rows)
    fitted = time.perf_counter()
    risk = model.predict_risk(test, HORIZON)
    seconds = time.perf_counter() - started
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024  # Linux reports KiB
    print(
        json.dumps(
            {
                "seconds": seconds,
                "fit_seconds": fitted - started,
                "peak_bytes": peak,
                "c_index": concordance(test, risk),
            }
        )
    )


def run(task: str, folder: Path) -> dict:
    """Run one task in a child process; add the peak of the summed RSS of the child and its workers."""
    import psutil

    command = [sys.executable, __file__, "--child", task, "--data", str(folder)]
    child_process = subprocess.Popen(command, stdout=subprocess.PIPE, text=True)
    watched, peak, cpu = psutil.Process(child_process.pid), 0, {}
    while child_process.poll() is None:
        total = 0
        try:
            for proc in [watched, *watched.children(recursive=True)]:
                with proc.oneshot():
                    total += proc.memory_info().rss
                    times = proc.cpu_times()
                    cpu[proc.pid] = times.user + times.system
        except psutil.Error:  # a worker ended between listing and reading
            pass
        peak = max(peak, total)
        time.sleep(0.05)
    out, _ = child_process.communicate()
    if child_process.returncode:
        raise RuntimeError(f"benchmark task {task} failed with exit code {child_process.returncode}")
    result = json.loads(out.strip().splitlines()[-1])
    result["tree_peak_bytes"] = peak
    result["cpu_seconds"] = sum(cpu.values())  # last CPU times seen of the child and its workers (incl. setup)
    return result


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--child", choices=["full", "sub_grid", "sub_continuous"], help=argparse.SUPPRESS)
    parser.add_argument("--data", type=Path, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        child(args.child, args.data)
        return
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        train = demo_stack(N_ROWS, n_patients=9_000, seed=101)
        demo_stack(N_TEST, n_patients=2_000, seed=202).to_parquet(folder / "test.parquet")
        train.to_parquet(folder / "train.parquet")
        print(
            f"training stack: {len(train)} rows, {train['patient_id'].nunique()} patients, "
            f"{int((train['status'] == 1).sum())} outcomes, {int((train['status'] == 2).sum())} competing"
        )
        full = [run("full", folder) for _ in range(args.repeats)]
        grid, continuous = run("sub_grid", folder), run("sub_continuous", folder)
    seconds = float(np.median([r["seconds"] for r in full]))
    peak_gb = max(max(r["peak_bytes"], r["tree_peak_bytes"]) for r in full) / 1e9
    gap = abs(grid["c_index"] - continuous["c_index"])
    print(
        f"50k rows, monthly grid, {FOREST_PARAMS['n_estimators']} trees of {FOREST_PARAMS['max_samples']} rows, "
        f"2 jobs: median {seconds:.1f} s over {args.repeats} runs, peak RSS {peak_gb:.2f} GB, "
        f"held-out C {np.median([r['c_index'] for r in full]):.4f}; CPU of the whole child process tree "
        f"(data loading included) median {np.median([r['cpu_seconds'] for r in full]):.1f} s; "
        f"load average {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores"
    )
    print(
        f"5k-row subsample: C monthly grid {grid['c_index']:.4f} ({grid['seconds']:.1f} s, "
        f"{grid['peak_bytes'] / 1e9:.2f} GB) vs continuous times {continuous['c_index']:.4f} "
        f"({continuous['seconds']:.1f} s, {continuous['peak_bytes'] / 1e9:.2f} GB); "
        f"gap {gap:.4f} (goal <= 0.01: {'met' if gap <= 0.01 else 'NOT met'})"
    )
    print(
        f"survival forest 50k rows: ours {seconds:.1f} s, goal 60 s, ratio {60 / seconds:.2f}; "
        f"peak {peak_gb:.2f} GB (goal 1 GB)"
    )


if __name__ == "__main__":
    main()
