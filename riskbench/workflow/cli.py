"""The ``riskbench`` command line.

Each stage owns its subcommands in a module named ``command`` inside its package, which exposes
``register(subparsers)``. This module only collects them, so stages never edit each other's files.

Exit status and messages: 0 success; 2 a configuration or data problem
(:class:`~riskbench.errors.RiskbenchError`) or a file that cannot be read or written (``OSError``); 1 an
internal error; 130 Ctrl-C, 143 SIGTERM. Each failure is one line on standard error (a configuration with
several problems: one line per problem); ``--debug`` (before or after the subcommand) adds the traceback.
"""

from __future__ import annotations

import argparse
import importlib
import signal
import sys
import traceback
from collections.abc import Sequence

from riskbench import __version__
from riskbench.errors import RiskbenchError

# Stage modules that contribute subcommands, in the order they appear in --help.
COMMAND_MODULES: tuple[str, ...] = (
    "riskbench.demo.command",
    "riskbench.cohort.command",
    "riskbench.workflow.command",
    "riskbench.workflow.config_command",
    "riskbench.workflow.external_command",
    "riskbench.workflow.score_command",
)


DEBUG_HELP = "show the full traceback of an error"


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
    parser.add_argument("--debug", action="store_true", help=DEBUG_HELP)
    subparsers = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name in COMMAND_MODULES:
        try:
            module = importlib.import_module(name)
        except ModuleNotFoundError as exc:
            if exc.name == name:  # the stage has no commands yet
                continue
            raise
        module.register(subparsers)
    for sub in subparsers.choices.values():  # --debug also after the subcommand
        if "--debug" not in sub._option_string_actions:
            sub.add_argument("--debug", action="store_true", default=argparse.SUPPRESS, help=DEBUG_HELP)
    return parser


def _one_line(text: object) -> str:
    return " ".join(str(text).split())


def _os_error_line(exc: OSError) -> str:
    where = f" {exc.filename}" if exc.filename else ""
    return f"cannot use{where}: {exc.strerror or _one_line(exc)}"


def describe_failure(exc: BaseException, command: str, debug: bool = False) -> tuple[int, str]:
    """The exit status and the one line shown for an error that ended ``command``."""
    prefix = f"riskbench {command}"
    if isinstance(exc, KeyboardInterrupt):
        signum = int(getattr(exc, "signum", signal.SIGINT))
        line = f"{prefix}: stopped by {'SIGTERM' if signum == signal.SIGTERM else 'Ctrl-C'}"
        if command == "run-analysis":
            line += "; its temporary files and unfinished folder were removed, an earlier run folder is unchanged"
        return 128 + signum, line
    if isinstance(exc, RiskbenchError):  # a list of configuration problems keeps its one line per problem
        return 2, f"{prefix}: error: " + "\n".join(line.rstrip() for line in str(exc).strip().splitlines())
    if isinstance(exc, OSError):
        return 2, f"{prefix}: error: {_os_error_line(exc)}"
    if getattr(exc, "one_line_message", False):  # e.g. a stage that failed: the message says what to do
        return 1, f"{prefix}: error: {_one_line(exc)}"
    return 1, (
        f"{prefix}: internal error: {type(exc).__name__}: {_one_line(exc)}"
        + ("" if debug else "; rerun with --debug for the traceback and report it")
    )


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; return the process exit code (see the module docstring)."""
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "handler", None):
        parser.print_help()
        return 0
    debug = bool(getattr(args, "debug", False))
    try:
        return int(args.handler(args) or 0)
    except (KeyboardInterrupt, Exception) as exc:  # every failure is one line
        status, line = describe_failure(exc, args.command, debug)
        if debug:
            traceback.print_exception(exc, file=sys.stderr)
            details = getattr(exc, "details", "")  # a stage's own traceback, from inside its notebook
            if details:
                print(f"--- traceback inside the stage notebook ---\n{details}", file=sys.stderr)
        print(line, file=sys.stderr)
        return status
