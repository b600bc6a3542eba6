"""The run manifest: everything needed to trace a run's numbers back to its inputs.

``manifest.json`` holds the configuration as read, SHA-256 of the configuration and of every input file,
the versions of Python and of the packages that compute, the seeds, start and end times (UTC), the
duration of each stage, the git commit of the riskbench source when it is a git checkout, SHA-256 of
every table and figure the run wrote, and where the data went (``network``: whether anything was sent off
this machine, and how the notebook kernel was reached).
"""

from __future__ import annotations

import json
import platform
import subprocess
import sys
from collections.abc import Iterable, Mapping
from datetime import UTC, datetime
from importlib.metadata import PackageNotFoundError, version
from pathlib import Path
from typing import Any

from riskbench.report.outputs import FIGURES, TABLES, atomic_write_text
from riskbench.validation.parallel import data_leaves_machine, execution_statement
from riskbench.workflow.config import AnalysisConfig, file_sha256

MANIFEST = "manifest.json"
PACKAGES: tuple[str, ...] = (
    "riskbench",
    "numpy",
    "pandas",
    "scipy",
    "scikit-learn",
    "scikit-survival",
    "lifelines",
    "matplotlib",
    "duckdb",
    "pyarrow",
    "joblib",
    "dask",
    "distributed",
    "papermill",
    "nbconvert",
    "nbformat",
    "ipykernel",
)


def utc_now() -> str:
    """The current time, UTC, ISO 8601 with seconds."""
    return datetime.now(UTC).isoformat(timespec="seconds")


def package_versions(names: Iterable[str] = PACKAGES) -> dict[str, str]:
    """Installed version of each package (``"not installed"`` when absent)."""
    out = {"python": platform.python_version()}
    for name in names:
        try:
            out[name] = version(name)
        except PackageNotFoundError:
            out[name] = "not installed"
    return out


def git_commit(source_dir: str | Path | None = None) -> dict[str, Any] | None:
    """Commit and dirty flag of the git checkout holding the riskbench source, or None.

    Runs ``git`` locally only (no network); returns None outside a checkout or without git.
    """
    folder = Path(source_dir) if source_dir else Path(__file__).resolve().parents[2]
    try:
        commit = subprocess.run(
            ["git", "-C", str(folder), "rev-parse", "HEAD"], capture_output=True, text=True, timeout=10, check=True
        ).stdout.strip()
        status = subprocess.run(
            ["git", "-C", str(folder), "status", "--porcelain", "--untracked-files=no"],
            capture_output=True,
            text=True,
            timeout=10,
            check=True,
        ).stdout
    except (OSError, subprocess.SubprocessError):
        return None
    return {"commit": commit, "dirty": bool(status.strip())}


def network_record(config: AnalysisConfig) -> dict[str, Any]:
    """Where the run's data went: sent off this machine or not, the Dask scheduler, the kernel transport."""
    plan = config.execution
    return {
        "data_left_machine": data_leaves_machine(plan),
        "statement": execution_statement(plan),
        "scheduler_address": getattr(plan, "scheduler_address", None) or None,
        "kernel_transport": "Unix-domain sockets (ZeroMQ ipc); no TCP or UDP port opened",
    }


def input_files(config: AnalysisConfig) -> dict[str, Path]:
    """The files the run reads: the configuration and the three source tables."""
    files = {
        "patients": config.sources.patients.path,
        "measurements": config.sources.measurements.path,
        "outcomes": config.sources.outcomes.path,
    }
    if config.path is not None:
        files = {"configuration": config.path, **files}
    return {k: Path(v) for k, v in files.items()}


def output_digests(run_dir: str | Path) -> dict[str, str]:
    """SHA-256 of every table, figure, notes file and saved model file of a run, keyed by path relative to the
    run folder."""
    run_dir = Path(run_dir)
    out: dict[str, str] = {}
    # notes: parts left out and fitting warnings (report/notes.py); models: saved models (workflow/model_bundle.py)
    for sub in (TABLES, FIGURES, "notes", "models"):
        for path in sorted((run_dir / sub).glob("*")):
            if path.is_file() and not path.name.startswith("."):
                out[f"{sub}/{path.name}"] = file_sha256(path)
    report = run_dir / "report.html"
    if report.is_file():
        out["report.html"] = file_sha256(report)
    return out


def build_manifest(
    config: AnalysisConfig,
    run_dir: str | Path,
    *,
    started: str,
    finished: str,
    stage_seconds: Mapping[str, float],
    status: str = "complete",
    failure: str | None = None,
) -> dict[str, Any]:
    """Assemble the manifest of a run (see the module docstring for the fields)."""
    return {
        "riskbench_run": 1,
        "status": status,
        "failure": failure,
        "started_utc": started,
        "finished_utc": finished,
        "stage_seconds": {k: round(float(v), 3) for k, v in stage_seconds.items()},
        "configuration": _jsonable(config.raw),
        "configuration_path": str(config.path) if config.path else None,
        "input_sha256": {k: file_sha256(p) for k, p in input_files(config).items()},
        "seeds": {"analysis": config.seed, "validation": config.validation.seed},
        "versions": package_versions(),
        "platform": {"system": platform.system(), "machine": platform.machine(), "python_executable": sys.executable},
        "git": git_commit(),
        "outputs_sha256": output_digests(run_dir),
        "network": network_record(config),
    }


def write_manifest(manifest: Mapping[str, Any], run_dir: str | Path) -> Path:
    """Write ``manifest.json`` atomically."""
    return atomic_write_text(Path(run_dir) / MANIFEST, json.dumps(manifest, indent=2, sort_keys=False) + "\n")


def _jsonable(value: Any) -> Any:
    if isinstance(value, Mapping):
        return {str(k): _jsonable(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_jsonable(v) for v in value]
    if isinstance(value, str | int | float | bool) or value is None:
        return value
    return str(value)  # TOML dates and times
