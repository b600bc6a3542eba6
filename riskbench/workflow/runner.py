"""Run the stage notebooks in order with papermill into a run folder, export them to HTML, write the manifest.

Folder protocol
---------------
The run is built in ``<parent>/.<name>.partial/`` and renamed to ``<parent>/<name>/`` only when every stage
has finished and the manifest is written, so ``<name>/`` always holds a complete run. A leftover
``.partial`` folder (an interrupted run) is discarded by the next run, which starts again from the first
stage; every stage is deterministic given the configuration, so the final outputs are the same.
A failing stage stops the run: the folder, with the partial executed notebook, is kept as
``<parent>/<name>.failed/`` and the error is reported in one line (stage, cell, error).
An existing ``<name>/`` is replaced only when ``overwrite`` is true.
"""

from __future__ import annotations

import os
import shutil
import tempfile
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import nbformat

from riskbench.workflow.config import AnalysisConfig, load_config
from riskbench.workflow.kernel import ensure_kernel, local_socket_kernel_manager
from riskbench.workflow.manifest import build_manifest, utc_now, write_manifest
from riskbench.workflow.notebook_builder import STAGE_NOTEBOOKS, write_notebooks
from riskbench.workflow.notebook_html import export_html

NOTEBOOKS = "notebooks"
REPORT = "report.html"


class RunFolderExists(ValueError):
    """The run folder exists and overwriting was not asked for."""


class StageFailed(ValueError):
    """A stage notebook raised; the message is one line naming the stage, the cell and the error."""


@dataclass(frozen=True)
class RunResult:
    """What a finished run produced."""

    run_dir: Path
    report: Path
    manifest: Path
    stage_seconds: dict[str, float] = field(default_factory=dict)


def default_notebooks_dir() -> Path | None:
    """The committed ``notebooks/`` folder of a source checkout, if there is one."""
    folder = Path(__file__).resolve().parents[2] / NOTEBOOKS
    return folder if all((folder / nb).is_file() for _, nb in STAGE_NOTEBOOKS) else None


def _one_line(text: str, limit: int = 300) -> str:
    line = " ".join(str(text).split())
    return line if len(line) <= limit else line[: limit - 3] + "..."


def run_analysis(
    config_path: str | Path,
    out: str | Path,
    *,
    overwrite: bool = False,
    notebooks_dir: str | Path | None = None,
    stages: Sequence[tuple[str, str]] = STAGE_NOTEBOOKS,
    log: Callable[[str], None] | None = print,
) -> RunResult:
    """Run the analysis of ``config_path`` into the run folder ``out``.

    Parameters
    ----------
    config_path
        The analysis configuration (TOML); checked before anything runs.
    out
        The run folder to create, e.g. ``results/demo``.
    overwrite
        Replace an existing run folder (only once the new run has finished).
    notebooks_dir
        Folder with the stage notebooks; default the committed ``notebooks/`` (or freshly written ones).
    stages
        ``(stage name, notebook file)`` pairs, run in this order.
    log
        Receives one progress line per stage; None for silence.

    Raises
    ------
    RunFolderExists
        ``out`` exists and ``overwrite`` is false.
    StageFailed
        A stage notebook raised an error.
    """
    say = log or (lambda _msg: None)
    config: AnalysisConfig = load_config(config_path)
    out = Path(out).resolve()
    if out.exists() and not overwrite:
        raise RunFolderExists(f"{out} already exists; choose another --out or pass --overwrite to replace it")
    staging = out.parent / f".{out.name}.partial"
    failed = out.parent / f"{out.name}.failed"
    for leftover in (staging, failed):
        if leftover.exists():
            shutil.rmtree(leftover)
    (staging / NOTEBOOKS).mkdir(parents=True)

    if notebooks_dir is None:
        notebooks_dir = default_notebooks_dir()
    if notebooks_dir is None:  # an installed package without the source tree: write them afresh
        notebooks_dir = staging / ".templates"
        write_notebooks(notebooks_dir)
    notebooks_dir = Path(notebooks_dir)
    kernel = ensure_kernel()
    started = utc_now()
    with tempfile.TemporaryDirectory(prefix="rbk-") as sockets:
        seconds = _run_stages(config, stages, notebooks_dir, staging, failed, kernel,
                              local_socket_kernel_manager(sockets), started, say)

    shutil.rmtree(staging / ".templates", ignore_errors=True)
    manifest = build_manifest(config, staging, started=started, finished=utc_now(), stage_seconds=seconds)
    write_manifest(manifest, staging)
    _move_into_place(staging, out)
    return RunResult(run_dir=out, report=out / REPORT, manifest=out / "manifest.json", stage_seconds=seconds)


def _run_stages(config: AnalysisConfig, stages: Sequence[tuple[str, str]], notebooks_dir: Path, staging: Path,
                failed: Path, kernel: str, manager: type, started: str,
                say: Callable[[str], None]) -> dict[str, float]:
    """Execute each stage notebook into the staging folder and export it; return seconds per stage."""
    import papermill as pm
    from papermill.exceptions import PapermillExecutionError

    seconds: dict[str, float] = {}
    for name, notebook in stages:
        source = notebooks_dir / notebook
        executed = staging / NOTEBOOKS / notebook
        say(f"stage {name}: running {notebook}")
        t0 = time.perf_counter()
        try:
            pm.execute_notebook(
                str(source), str(executed),
                parameters={"config_path": str(config.path), "run_dir": str(staging)},
                kernel_name=kernel, language="python", progress_bar=False, log_output=False, cwd=str(staging),
                request_save_on_cell_execute=True, kernel_manager_class=manager,
            )
        except PapermillExecutionError as exc:
            seconds[name] = time.perf_counter() - t0
            raise _stop(config, staging, failed, name, notebook, started, seconds, exc) from None
        seconds[name] = time.perf_counter() - t0
        export_html(executed, executed.with_suffix(".html"))
        say(f"stage {name}: done in {seconds[name]:.1f} s")
    return seconds


def _stop(config: AnalysisConfig, staging: Path, failed: Path, stage: str, notebook: str, started: str,
          seconds: dict[str, float], exc: Exception) -> StageFailed:
    """Keep the partial run as ``<name>.failed`` and build the one-line error."""
    cell = _failing_cell(staging / NOTEBOOKS / notebook)
    ename = getattr(exc, "ename", type(exc).__name__)
    evalue = _one_line(getattr(exc, "evalue", str(exc)))
    message = f"stage {stage} failed in cell {cell}: {ename}: {evalue}"
    try:
        write_manifest(build_manifest(config, staging, started=started, finished=utc_now(),
                                      stage_seconds=seconds, status="failed", failure=message), staging)
    except OSError:  # the one-line error matters more than the manifest of a failed run
        pass
    os.replace(staging, failed)
    return StageFailed(f"{message} (partial notebook kept: {failed / NOTEBOOKS / notebook})")


def _failing_cell(path: Path) -> str:
    """``<n>``: 1-based position, among the code cells of the executed notebook (papermill's injected
    parameters cell included), of the cell whose output holds the error."""
    try:
        nb = nbformat.read(path, as_version=4)
    except (OSError, ValueError):
        return "?"
    code = [c for c in nb.cells if c.cell_type == "code"]
    for i, cell in enumerate(code, start=1):
        if any(o.get("output_type") == "error" for o in cell.get("outputs", [])):
            return str(i)
    return "?"


def _move_into_place(staging: Path, out: Path) -> None:
    """Rename the finished staging folder to ``out``, replacing an old run only at the very end."""
    if out.exists():
        old = out.parent / f".{out.name}.old"
        if old.exists():
            shutil.rmtree(old)
        os.replace(out, old)
        os.replace(staging, out)
        shutil.rmtree(old)
    else:
        os.replace(staging, out)
