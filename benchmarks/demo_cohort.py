"""Benchmark: generating the synthetic surveillance cohort for one million patients.

Goal (issue 2): 1 M patients in under 120 s on the project machine (2 shared cores). There is no peer
program for this job, so the last line gives our median time against the goal. The true risk (Monte
Carlo oracle) is timed separately on a smaller cohort because it is optional and scales linearly.

Usage: ``python benchmarks/demo_cohort.py [--patients 1000000] [--repeats 3] [--messy]``
"""

from __future__ import annotations

import argparse
import os
import resource
import statistics
import sys
import time

from riskbench.demo import generate_cohort

GOAL_SECONDS = 120.0


def peak_rss_gib() -> float:
    """Peak resident memory of this process so far (GiB; Linux reports KiB)."""
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20


def timed(n: int, variant: str, paths: int, seed: int) -> tuple[float, float, int]:
    """Wall-clock and CPU seconds of one generation, and its number of measurement rows."""
    start, cpu = time.perf_counter(), time.process_time()
    cohort = generate_cohort(n, seed, variant, n_risk_paths=paths)
    return time.perf_counter() - start, time.process_time() - cpu, len(cohort.measurements)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--patients", type=int, default=1_000_000)
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--messy", action="store_true", help="also time the messy variant once")
    args = parser.parse_args(argv)

    secs, cpu, rows = timed(10_000, "clean", 40, seed=1)
    print(f"with true risk (40 paths), 10k patients: {secs:.1f} s wall, {cpu:.1f} s CPU ({rows} measurement rows)")
    times, cpus = [], []
    for r in range(args.repeats):
        secs, cpu, rows = timed(args.patients, "clean", 0, seed=r)
        times.append(secs)
        cpus.append(cpu)
        print(
            f"run {r + 1}: clean {args.patients} patients in {secs:.1f} s wall, {cpu:.1f} s CPU "
            f"({rows} measurement rows); peak memory {peak_rss_gib():.2f} GiB",
            flush=True,
        )
    if args.messy:
        secs, cpu, rows = timed(args.patients, "messy", 0, seed=0)
        print(
            f"messy {args.patients} patients in {secs:.1f} s wall, {cpu:.1f} s CPU ({rows} measurement rows); "
            f"peak memory {peak_rss_gib():.2f} GiB"
        )
    ours = statistics.median(times)
    print(
        f"median CPU time {statistics.median(cpus):.1f} s (single-threaded: wall = CPU on an idle core); "
        f"machine: 2 cores shared with other jobs, load {os.getloadavg()[0]:.1f}; "
        f"peak memory {peak_rss_gib():.2f} GiB"
    )
    label = f"{args.patients // 1_000_000}M" if args.patients % 1_000_000 == 0 else str(args.patients)
    print(
        f"synthetic cohort {label} patients: ours {ours:.1f} s, goal {GOAL_SECONDS:.0f} s, "
        f"ratio {GOAL_SECONDS / ours:.2f}"
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
