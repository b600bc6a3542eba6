"""Subcommands of the demo stage: ``simulate-cohort`` and ``demo-summary``."""

from __future__ import annotations

import argparse
from pathlib import Path

from riskbench.demo.generator import DEFAULT_RISK_PATHS, VARIANTS, generate_cohort
from riskbench.demo.parameters import CohortShift
from riskbench.demo.storage import read_tables, write_cohort


def _simulate(args: argparse.Namespace) -> int:
    shift = CohortShift(
        outcome_hazard_multiplier=args.hazard_multiplier,
        age_shift_years=args.age_shift,
        pack_years_multiplier=args.pack_years_multiplier,
        log_volume_shift=args.volume_shift,
    )
    cohort = generate_cohort(args.patients, args.seed, args.variant, n_risk_paths=args.risk_paths, shift=shift)
    folder = write_cohort(cohort, args.out)
    shifted = "" if shift.is_identity else " (shifted population)"
    print(
        f"wrote {args.variant}{shifted} cohort of {len(cohort.patients)} patient rows, {len(cohort.measurements)} "
        f"measurement rows, {len(cohort.outcomes)} outcome rows to {folder}"
    )
    return 0


def _summary(args: argparse.Namespace) -> int:
    from riskbench.demo.summary import write_summary  # matplotlib only when needed

    folder = Path(args.data)
    if not folder.is_dir():
        raise FileNotFoundError(f"--data {folder}: no such folder (make one with `riskbench simulate-cohort`)")
    summary, figure = write_summary(read_tables(folder), args.out)
    print(f"demo cohort in {folder} (synthetic; research software, not a medical device)")
    for line in summary.lines():
        print(f"  {line}")
    print(f"figure: {figure}")
    return 0


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the demo subcommands to the ``riskbench`` command line."""
    sim = subparsers.add_parser(
        "simulate-cohort",
        help="generate a synthetic lung-nodule surveillance cohort (clean or messy) with its truth",
        description="Generate a synthetic cohort with a known data-generating process and write it as CSV "
        "and Parquet (clean: plus truth.json, true_intervals.parquet, true_risk.parquet; messy: defects.json).",
    )
    sim.add_argument("--patients", type=int, default=3000, help="number of patients (default 3000)")
    sim.add_argument("--seed", type=int, default=0, help="random seed (default 0)")
    sim.add_argument("--variant", choices=VARIANTS, default="clean", help="clean or messy (default clean)")
    sim.add_argument("--out", required=True, help="output folder")
    sim.add_argument(
        "--risk-paths",
        type=int,
        default=DEFAULT_RISK_PATHS,
        help=f"Monte Carlo futures per patient and landmark for the true risk; 0 skips it "
        f"(default {DEFAULT_RISK_PATHS})",
    )
    shift = sim.add_argument_group(
        "population shift", "simulate another site or a later period (defaults: the demo population unchanged)"
    )
    shift.add_argument(
        "--hazard-multiplier", type=float, default=1.0, help="factor on the outcome's baseline hazard (default 1)"
    )
    shift.add_argument("--age-shift", type=float, default=0.0, help="years added to the mean age at entry (default 0)")
    shift.add_argument(
        "--pack-years-multiplier", type=float, default=1.0, help="factor on smokers' pack-years (default 1)"
    )
    shift.add_argument(
        "--volume-shift",
        type=float,
        default=0.0,
        help="added to the mean ln nodule volume at entry, ln mm3 (default 0)",
    )
    sim.set_defaults(handler=_simulate)

    summ = subparsers.add_parser(
        "demo-summary",
        help="print counts and median follow-up of a cohort folder and draw its incidence curves",
    )
    summ.add_argument("--data", required=True, help="cohort folder (patients/measurements/outcomes .parquet)")
    summ.add_argument("--out", required=True, help="folder for summary.json and incidence.png")
    summ.set_defaults(handler=_summary)
