"""Subcommands about a configuration: ``check-config`` (its handler) and ``list-covariates``."""

from __future__ import annotations

import argparse
from pathlib import Path
from typing import Any

from riskbench.time_units import format_duration


def check_config(args: argparse.Namespace) -> int:
    """Check a configuration completely (with its data unless ``--no-data``); print what was found.

    Errors raise :class:`~riskbench.workflow.config.ConfigError` (every problem, one per line; exit 2).
    Deprecated keys and warnings are printed, then a one-line summary.
    """
    from riskbench.workflow.config import load_config

    config = load_config(args.config, check_data=not getattr(args, "no_data", False))
    for message in config.deprecations:
        print(f"deprecated: {message}")
    for message in config.warnings:
        print(f"warning: {message}")
    names = ", ".join(f"{m.name} ({m.family})" for m in config.models)
    landmarks = ", ".join(format_duration(s) for s in config.landmarks.landmarks_days)
    checked = "configuration" if getattr(args, "no_data", False) else "configuration and data sample"
    print(
        f"{Path(args.config)}: valid ({checked}); landmarks {landmarks}; prediction window "
        f"{format_duration(config.landmarks.horizon_days)}; models: {names}"
    )
    return 0


def covariate_rows(config: Any) -> list[tuple[str, str, str]]:
    """(column, label with unit, models using it) for every covariate column the cohort stage creates."""
    cohort = config.cohort
    rows = []
    for column in cohort.covariate_columns:
        label_of = getattr(cohort, "label", None)
        label = label_of(column) if callable(label_of) else column
        users = [m.name for m in config.models if column in m.covariates]
        rows.append((column, label, ", ".join(users) or "-"))
    return rows


def _list_covariates(args: argparse.Namespace) -> int:
    from riskbench.workflow.config import load_config

    config = load_config(args.config)
    rows = [("column", "label (unit)", "used by models"), *covariate_rows(config)]
    widths = [max(len(r[i]) for r in rows) for i in range(2)]
    for column, label, users in rows:
        print(f"{column:<{widths[0]}}  {label:<{widths[1]}}  {users}")
    return 0


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add ``list-covariates`` to the ``riskbench`` parser."""
    listing = subparsers.add_parser(
        "list-covariates",
        help="list every covariate column the configuration's cohort stage creates, and which models use it",
        description="Print each covariate column the cohort stage will create for CONFIG (its readable label "
        "and unit, and the models that use it). Use these names in [[models]] covariates.",
    )
    listing.add_argument("config", help="analysis configuration (TOML)")
    listing.set_defaults(handler=_list_covariates)
