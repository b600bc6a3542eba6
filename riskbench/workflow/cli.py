"""The ``riskbench`` command line.

Each stage owns its subcommands in a module named ``command`` inside its package, which exposes
``register(subparsers)``. This module only collects them, so stages never edit each other's files.
"""

from __future__ import annotations

import argparse
import importlib
import sys
from collections.abc import Sequence

from riskbench import __version__

# Stage modules that contribute subcommands, in the order they appear in --help.
COMMAND_MODULES: tuple[str, ...] = (
    "riskbench.demo.command",
    "riskbench.cohort.command",
    "riskbench.workflow.command",
)


class UserFacingError(Exception):
    """An error whose message is meant for the user as it stands (no traceback)."""


def build_parser() -> argparse.ArgumentParser:
    """Build the top-level parser with every stage's subcommands."""
    parser = argparse.ArgumentParser(
        prog="riskbench",
        description=(
            "Build leakage-free survival tables from dated surveillance records, fit and validate "
            "dynamic risk models, and run reproducible analyses. Research software, not a medical device."
        ),
    )
    parser.add_argument("--version", action="version", version=f"riskbench {__version__}")
    subparsers = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name in COMMAND_MODULES:
        try:
            module = importlib.import_module(name)
        except ModuleNotFoundError as exc:
            if exc.name == name:  # the stage has no commands yet
                continue
            raise
        module.register(subparsers)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; return the process exit code."""
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "handler", None):
        parser.print_help()
        return 0
    try:
        return int(args.handler(args) or 0)
    except (UserFacingError, ValueError, FileNotFoundError) as exc:
        print(f"riskbench {args.command}: error: {exc}", file=sys.stderr)
        return 2
