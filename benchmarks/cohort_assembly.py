"""Benchmark of the cohort stage.

1. 1 M patients (about 30 measurement rows each) from the demo generator, read from Parquet: the full
   ``build_cohort`` (reading, every ledger check, counting-process table) and then writing the counting-process
   table, and separately the landmark stack for 8 landmarks; wall time and the peak memory of the process
   (goal: <= 30 s and <= 8 GB each on this 2-core machine).
2. 10 k patients x about 10 measurements: ours against lifelines' ``to_long_format`` +
   ``add_covariate_to_timeline`` building the same table in the same run (goal: >= 200x faster).

The last line reads ``<what>: ours <x> s, peer <y> s, ratio <y/x>`` (medians over ``--repeats``).
Each large measurement runs in a fresh child process so that its peak memory is its own.
"""

from __future__ import annotations

import argparse
import json
import resource
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

LANDMARKS_DAYS = [0.0, 182.625, 365.25, 547.875, 730.5, 1095.75, 1461.0, 1826.25]
HORIZON_DAYS = 730.5


def small_cohort(n: int, seed: int) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    """Random cohort: ``n`` patients, about 10 values of two variables each, integer days."""
    rng = np.random.default_rng(seed)
    ids = np.array([f"P{i:06d}" for i in range(n)])
    entry = pd.Timestamp("2015-01-01") + pd.to_timedelta(rng.integers(0, 700, n), unit="D")
    end = rng.integers(30, 2000, n)
    kind = rng.choice(["outcome", "competing", "end_of_follow_up"], n, p=[0.2, 0.1, 0.7])
    k = rng.poisson(5, size=(n, 2))
    pid = np.repeat(np.arange(n), k.sum(axis=1))
    var = np.concatenate([np.repeat(["v0", "v1"], k[i]) for i in range(n)])
    day = (rng.random(pid.size) * (end[pid] + 1)).astype(int)
    value = rng.integers(1, 100, pid.size).astype(float)
    meas = pd.DataFrame(
        {
            "patient_id": ids[pid],
            "date": (entry[pid] + pd.to_timedelta(day, unit="D")).strftime("%Y-%m-%d"),
            "variable": var,
            "value": value,
        }
    )
    meas = meas.drop_duplicates(["patient_id", "date", "variable"], ignore_index=True)
    patients = pd.DataFrame({"patient_id": ids, "entry_date": entry.strftime("%Y-%m-%d")})
    outcomes = pd.DataFrame(
        {"patient_id": ids, "date": (entry + pd.to_timedelta(end, unit="D")).strftime("%Y-%m-%d"), "kind": kind}
    )
    return patients, meas, outcomes


def ours_small(patients: pd.DataFrame, meas: pd.DataFrame, outcomes: pd.DataFrame) -> pd.DataFrame:
    from riskbench.cohort import CohortSpec, VariableSpec, build_cohort

    spec = CohortSpec(variables=(VariableSpec("v0"), VariableSpec("v1")), static=(), current_age=False)
    return build_cohort(patients, meas, outcomes, spec).counting_process


def peer_small(patients: pd.DataFrame, meas: pd.DataFrame, outcomes: pd.DataFrame) -> pd.DataFrame:
    from lifelines.utils import add_covariate_to_timeline, to_long_format

    entry = pd.to_datetime(patients.set_index("patient_id")["entry_date"])
    base = pd.DataFrame(
        {
            "patient_id": outcomes.patient_id,
            "duration": (pd.to_datetime(outcomes.date) - entry.loc[outcomes.patient_id].to_numpy()).dt.days,
            "event": outcomes.kind != "end_of_follow_up",
        }
    )
    table = to_long_format(base, "duration")
    days = (pd.to_datetime(meas.date) - entry.loc[meas.patient_id].to_numpy()).dt.days
    for var in ["v0", "v1"]:
        sel = meas.variable == var
        cv = pd.DataFrame({"patient_id": meas.patient_id[sel], "time": days[sel], var: meas.value[sel]})
        table = add_covariate_to_timeline(table, cv, id_col="patient_id", duration_col="time", event_col="event")
    return table


def child_large(folder: Path, what: str) -> None:
    """Run one large measurement in this process and print a JSON line with seconds and peak memory."""
    from riskbench.cohort import build_cohort
    from riskbench.demo.cohort_spec import demo_cohort_spec

    out = Path(tempfile.mkdtemp(prefix="riskbench_cohort_bench_"))
    t0 = time.perf_counter()
    cohort = build_cohort(
        folder / "patients.parquet",
        folder / "measurements.parquet",
        folder / "outcomes.parquet",
        demo_cohort_spec(),
        memory_limit="5GB",
        threads=2,
    )
    if what == "counting_process":
        shutil.copyfile(cohort.counting_process_file, out / "counting_process.parquet")
        seconds = time.perf_counter() - t0
        rows = cohort._con.execute("SELECT count(*) FROM cp").fetchall()[0][0]
    else:
        from riskbench.cohort.landmark import landmark_sql

        t0 = time.perf_counter()  # the stack alone, from the built cohort, written out of core
        target = out / "landmark_stack.parquet"
        cohort._con.execute(
            f"COPY ({landmark_sql(cohort.spec, LANDMARKS_DAYS, HORIZON_DAYS)}) TO '{target}' (FORMAT parquet)"
        )
        seconds = time.perf_counter() - t0
        rows = cohort._con.execute(f"SELECT count(*) FROM read_parquet('{target}')").fetchall()[0][0]
    peak_gb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024**2
    shutil.rmtree(out, ignore_errors=True)
    print(json.dumps({"what": what, "seconds": seconds, "rows": rows, "peak_gb": peak_gb}))


def generate_large(folder: Path, n: int, seed: int) -> None:
    from riskbench.demo import generate_cohort, write_cohort

    if (folder / "measurements.parquet").exists():
        return
    cohort = generate_cohort(n, seed, n_risk_paths=0)
    write_cohort(cohort, folder)


def run_child(folder: Path, what: str) -> dict:
    proc = subprocess.run(
        [sys.executable, __file__, "--child", what, "--data", str(folder)], capture_output=True, text=True, check=True
    )
    return json.loads(proc.stdout.strip().splitlines()[-1])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--large", type=int, default=1_000_000, help="patients in the large run (0 skips it)")
    parser.add_argument("--small", type=int, default=10_000, help="patients in the comparison with lifelines")
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--data", type=Path, default=None, help="folder for the generated large cohort (reused)")
    parser.add_argument("--child", default=None, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        child_large(args.data, args.child)
        return
    print("note: the 2-core machine is shared with other jobs; figures are medians of noisy runs")
    if args.large:
        folder = args.data or Path(tempfile.gettempdir()) / f"riskbench_demo_{args.large}"
        t0 = time.perf_counter()
        generate_large(folder, args.large, seed=2024)
        print(f"generated / reused {args.large} patients in {time.perf_counter() - t0:.1f} s at {folder}")
        for what in ("counting_process", "landmark_stack"):
            runs = [run_child(folder, what) for _ in range(args.repeats)]
            med = statistics.median(r["seconds"] for r in runs)
            peak = max(r["peak_gb"] for r in runs)
            each = ", ".join(f"{r['seconds']:.1f}" for r in runs)
            print(
                f"{what} ({args.large} patients, {runs[0]['rows']} rows): median {med:.1f} s over "
                f"{len(runs)} runs ({each}; goal <= 30 s), peak memory {peak:.2f} GB (goal <= 8 GB)"
            )
    if not args.small:
        return
    patients, meas, outcomes = small_cohort(args.small, seed=7)
    ours_times = []
    for _ in range(args.repeats):
        t0 = time.perf_counter()
        ours = ours_small(patients, meas, outcomes)
        ours_times.append(time.perf_counter() - t0)
    t0 = time.perf_counter()
    peer = peer_small(patients, meas, outcomes)
    peer_time = time.perf_counter() - t0  # once: it is the slow side
    ours_time = statistics.median(ours_times)
    print(f"rows: ours {len(ours)} (split at every value date), peer {len(peer)} (split where a value changes)")
    print(
        f"counting-process table, {args.small} patients x ~10 values: ours {ours_time:.3f} s, "
        f"peer {peer_time:.1f} s, ratio {peer_time / ours_time:.0f}"
    )


if __name__ == "__main__":
    main()
