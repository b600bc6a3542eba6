"""Benchmark of the whole analysis: the demo configuration with 200 bootstrap resamples at 3 k and 30 k patients.

Workload: cohorts of 3,000 and 30,000 patients from the demo generator (clean variant, seed 2026, no Monte Carlo
truth), each analysed with ``configs/demo.toml`` (two landmark super-models, 5-fold cross-validation, landmarks
0 to 2 years, report horizons 1 and 2 years, two local worker processes) with ``[validation]
bootstrap_resamples`` set to 200. The four stage functions run in this process, one after the other, exactly as
the generated notebooks call them (``run_cohort_stage``, ``run_models_stage``, ``run_validation_stage``,
``run_comparison_stage``; ``run-analysis`` adds papermill, the HTML export of the notebooks and the manifest,
a fixed cost of a few seconds). The validation stage holds the cross-validation and the bootstrap optimism; the
comparison stage the per-landmark bootstrap, the paired bootstrap comparison of the two models, calibration,
decision curves and the report.

Goal: 200 resamples at 30 k patients, all stages, in at most 900 s on this 2-core machine.

Where the time of one replicate went at 30 k patients (cProfile, one worker; seconds per replicate; "start" is
main at the start of issue 14, "middle" after the fast path and the compiled loops, "now" this script's
commit; "—" was not measured; the first two columns were measured on a shared machine, so read the ratios
rather than the seconds):

| part of a replicate | start | middle | now | what changed |
|---|---|---|---|---|
| paired comparison: patients left out of the draw (``np.setdiff1d`` on text ids) | 5.5 | 0.003 | 0.003 | hash look-up |
| drawing a resample (counting-process table repeated although no spec fits on it) | 0.42 | 0.10 | 0.21 | stack only (unchanged since; the two later figures come from different profiles) |
| Harrell's + Uno's C per model and horizon (140 k landmark rows) | 0.30 | 0.08 | 0.02 | one pass, shared sort; ranks shared with the AUC |
| refitting the two landmark super-models (four cause-specific Cox fits) | — | 1.27 | 0.91 | started from the whole-cohort estimates, no cluster-robust variance |
| bootstrap-optimism replicate (fit, predict, measure on drawn, original and left-out rows) | 7.0 | 4.5 | 3.7 | the above; also measures the paired comparison |
| paired-comparison replicate (stage 4) | 8.1 | 2.4 | 0 | read from stage 3: same seeds, same refits |
| per-landmark bootstrap replicate (fixed predictions, 24 cells) | 2.3 | 1.1 | 0.58 | ranks counted from one sort per column, curves and weights cached per outcome set |
| triage bootstrap replicate, per model (140 k rows, 200 thresholds) | — | 0.12 | 0.007 | threshold groups sorted once, each resample recounted |
| calibration with its 100-resample band, per model and horizon | — | 5.7 | 3.6 | band refits on threads (2 cores) |

Now a bootstrap-optimism replicate spends 0.9 s refitting, 0.6 s predicting, 1.3 s on calibration slopes and
ICIs (two cloglog regressions per model, horizon and evaluation set), 0.45 s on the paired comparison's
measures and the rest on the other measures. Every change kept the numbers: bit-identical, except the warm
started refits, equal to the refits from zero to 1e-8 (tests/models/test_landmark_warm_start.py).

Last measured (2 cores, nothing else running; the median of three runs at 30 k, with its 3 k figures):

| patients | cohort | models | validation | comparison | total |
|---|---|---|---|---|---|
| 3 000 | 5.4 s | 8.5 s | 59.2 s | 20.0 s | 93.1 s |
| 30 000 | 11.1 s | 17.2 s | 408.8 s | 92.9 s | 530.0 s |

The three runs at 30 k took 531.1 s (before the calibration band went on threads: validation 399.1 s,
comparison 103.3 s), 530.0 s and 492.7 s (validation 381.3 s, comparison 84.9 s): median 530.0 s, ratio to the
goal 1.70. Growth exponent from 3 k to 30 k in the median run: validation 0.84, comparison 0.67, total 0.76.
Before this round (numba loops, no shared refits): 1 186.3 s (validation 621.7 s, comparison 530.1 s), ratio
0.76.

Usage: ``python benchmarks/full_analysis.py [--sizes 3000 30000] [--resamples 200] [--workers 2]``; smaller
figures (e.g. ``--sizes 30000 --resamples 10``) give the per-replicate cost to extrapolate from.
"""

from __future__ import annotations

import argparse
import math
import re
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
GOAL_SECONDS = 900.0
SEED = 2026
STAGES = ("cohort", "models", "validation", "comparison")


def write_configuration(folder: Path, n_patients: int, resamples: int, workers: int) -> Path:
    """The demo configuration pointed at a generated cohort of ``n_patients`` in ``folder``."""
    from riskbench.demo import generate_cohort, write_cohort

    data = folder / "data"
    write_cohort(generate_cohort(n_patients, seed=SEED, n_risk_paths=0), data)
    text = (ROOT / "configs" / "demo.toml").read_text()
    text = text.replace("../demo_data/clean/", f"{data.as_posix()}/")
    text = re.sub(r"(?m)^bootstrap_resamples = \d+", f"bootstrap_resamples = {resamples}", text)
    text = re.sub(r"(?m)^workers = \d+", f"workers = {workers}", text)
    path = folder / "analysis.toml"
    path.write_text(text)
    return path


def run_stages(config_path: Path, run_dir: Path) -> dict[str, float]:
    """Run the four stages in order; seconds per stage."""
    from riskbench.workflow.config import load_config
    from riskbench.workflow.stages import (
        run_cohort_stage,
        run_comparison_stage,
        run_models_stage,
        run_validation_stage,
    )

    config = load_config(config_path)
    run_dir.mkdir(parents=True, exist_ok=True)
    seconds = {}
    for name, stage in zip(STAGES, (run_cohort_stage, run_models_stage, run_validation_stage, run_comparison_stage)):
        start = time.perf_counter()
        stage(config, run_dir)
        seconds[name] = time.perf_counter() - start
        print(f"  {name}: {seconds[name]:.1f} s", flush=True)
    seconds["total"] = sum(seconds.values())
    return seconds


def growth_exponent(small: float, large: float, n_small: int, n_large: int) -> float:
    """b in time ∝ n^b between two sizes."""
    return math.log(large / small) / math.log(n_large / n_small)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=(__doc__ or "").splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[3000, 30000], help="cohort sizes (patients)")
    parser.add_argument("--resamples", type=int, default=200, help="bootstrap resamples of every bootstrap")
    parser.add_argument("--workers", type=int, default=2, help="local worker processes ([execution] workers)")
    args = parser.parse_args(argv)

    sizes = sorted(args.sizes)
    times: dict[int, dict[str, float]] = {}
    with tempfile.TemporaryDirectory(prefix="riskbench-full-") as tmp:
        for n in sizes:
            folder = Path(tmp) / f"n{n}"
            folder.mkdir()
            config_path = write_configuration(folder, n, args.resamples, args.workers)
            print(f"{n} patients, {args.resamples} resamples, {args.workers} workers:", flush=True)
            times[n] = run_stages(config_path, folder / "run")
    header = "| patients | " + " | ".join(STAGES) + " | total |"
    print(header)
    print("|" + "---|" * (len(STAGES) + 2))
    for n in sizes:
        print(f"| {n} | " + " | ".join(f"{times[n][s]:.1f} s" for s in (*STAGES, "total")) + " |")
    if len(sizes) > 1:
        small, large = sizes[0], sizes[-1]
        exponents = ", ".join(
            f"{s} {growth_exponent(times[small][s], times[large][s], small, large):.2f}" for s in (*STAGES, "total")
        )
        print(f"growth exponent from {small} to {large} patients (time ∝ n^b): {exponents}")
    largest = sizes[-1]
    ours = times[largest]["total"]
    print(
        f"full analysis {largest // 1000}k patients, {args.resamples} resamples: ours {ours:.1f} s, "
        f"goal {GOAL_SECONDS:.0f} s, ratio {GOAL_SECONDS / ours:.2f}"
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
