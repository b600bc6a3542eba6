"""``riskbench build-tables CONFIG --out FOLDER``: check the sources of a configuration and write the tables."""

from __future__ import annotations

import argparse
import tomllib
from pathlib import Path

from riskbench.cohort.cohort import build_cohort
from riskbench.cohort.config_schema import read_cohort, read_sources
from riskbench.cohort.errors import SpecError
from riskbench.cohort.landmark import landmark_grid
from riskbench.cohort.sources import SourceSpec
from riskbench.cohort.spec import DAYS_PER_YEAR, CohortSpec

DAYS_PER_MONTH = DAYS_PER_YEAR / 12


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``build-tables`` subcommand."""
    parser = subparsers.add_parser(
        "build-tables",
        help="check the sources of a configuration; write counting-process table, ledger and flow (Parquet)",
        description="Read the [sources] and [cohort] sections of an analysis configuration (TOML), check every "
        "source row, print the cohort flow and the most frequent exclusion reasons, and write "
        "the tables as Parquet files.",
    )
    parser.add_argument("config", type=Path, help="analysis configuration (TOML)")
    parser.add_argument("--out", type=Path, required=True, help="folder for the Parquet tables")
    parser.add_argument(
        "--landmark-every-months",
        type=float,
        default=None,
        help="also write a landmark stack with landmarks every this many months",
    )
    parser.add_argument("--landmark-up-to-years", type=float, default=5.0, help="last landmark, years (default 5)")
    parser.add_argument("--horizon-years", type=float, default=2.0, help="landmark horizon, years (default 2)")
    parser.add_argument("--top", type=int, default=5, help="how many exclusion reasons to list (default 5)")
    parser.set_defaults(handler=run)


def read_config_sections(path: Path) -> tuple[SourceSpec, CohortSpec]:
    """Parse the ``[sources]`` and ``[cohort]`` sections of a TOML configuration file."""
    if not path.exists():
        raise FileNotFoundError(f"configuration file {path} does not exist")
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except tomllib.TOMLDecodeError as exc:
        raise SpecError(f"{path}: not valid TOML ({exc})") from exc
    for section in ("sources", "cohort"):
        if section not in data:
            raise SpecError(f"{path}: the configuration has no [{section}] section")
    return read_sources(data["sources"], path.resolve().parent), read_cohort(data["cohort"])


def run(args: argparse.Namespace) -> int:
    """Build the tables of ``args.config`` and write them to ``args.out``."""
    sources, spec = read_config_sections(args.config)
    cohort = build_cohort(sources.patients, sources.measurements, sources.outcomes, spec)
    landmarks = None
    if args.landmark_every_months is not None:
        landmarks = landmark_grid(
            args.landmark_every_months * DAYS_PER_MONTH, args.landmark_up_to_years * DAYS_PER_YEAR
        )
    paths = cohort.write_parquet(
        args.out, landmarks_days=landmarks, horizon_days=args.horizon_years * DAYS_PER_YEAR if landmarks else None
    )
    flow = cohort.flow
    shown = flow[(flow["excluded"] > 0) | flow["state"].isin(["read", "used"])]
    print("Cohort flow (rows per source table)")
    print(shown[["label", "excluded", "remaining"]].to_string(index=False))
    top = cohort.top_exclusions(args.top)
    print("\nTop exclusion reasons")
    print("none" if top.empty else top.to_string(index=False))
    print("\nWrote " + ", ".join(str(p) for p in paths.values()))
    return 0
