"""Subcommands of the workflow stage: ``run-analysis`` and ``check-config``."""

from __future__ import annotations

import argparse
import time


def _run_analysis(args: argparse.Namespace) -> int:
    from riskbench.workflow.runner import run_analysis

    t0 = time.perf_counter()
    result = run_analysis(args.config, args.out, overwrite=args.overwrite, log=None if args.quiet else print)
    size_kb = result.report.stat().st_size / 1024
    if not args.quiet:
        print(f"finished in {time.perf_counter() - t0:.0f} s; manifest: {result.manifest}")
        print(f"report ({size_kb:.0f} KiB):")
    print(result.report)
    return 0


def _check_config(args: argparse.Namespace) -> int:
    from riskbench.workflow.config_command import check_config

    return check_config(args)


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the workflow subcommands to the ``riskbench`` parser."""
    run = subparsers.add_parser(
        "run-analysis",
        help="run the stage notebooks of an analysis configuration into a run folder and build the report",
        description=(
            "Run notebooks/01..04 with papermill into the run folder (data/, tables/, figures/, notebooks/ "
            "with HTML copies, report.html, manifest.json). The run is built in a hidden folder beside OUT "
            "and moved into place when complete; a failing stage is kept as OUT.failed."
        ),
    )
    run.add_argument("config", help="analysis configuration (TOML)")
    run.add_argument("--out", required=True, help="run folder to create, e.g. results/demo")
    run.add_argument("--overwrite", action="store_true", help="replace an existing run folder")
    run.add_argument("--quiet", action="store_true", help="print only the report path")
    run.set_defaults(handler=_run_analysis)

    check = subparsers.add_parser("check-config", help="check an analysis configuration without running it")
    check.add_argument("config", help="analysis configuration (TOML)")
    check.add_argument(
        "--no-data",
        action="store_true",
        help="check the file only, without reading the source headers and a sample of rows",
    )
    check.set_defaults(handler=_check_config)
