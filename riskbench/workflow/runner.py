"""Run the stage notebooks in order with papermill into a run folder, export them to HTML, write the manifest.

Folder protocol (see :mod:`riskbench.workflow.run_folder`)
---------------------------------------------------------
The run is built in ``<parent>/.<name>.partial/`` and renamed to ``<parent>/<name>/`` only when every stage
has finished and the manifest is written, so ``<name>/`` always holds a complete run and nothing
half-written ever replaces a good run. Every folder the runner creates carries the marker file
``.riskbench-run``; ``overwrite`` replaces only a folder with that marker, and a leftover ``.partial`` or
``.failed`` folder is removed only when it carries it. A lock file ``.<name>.lock`` beside the run folder
refuses a second run into the same folder while the first is going (a stale lock, whose process is gone,
is taken over with a message). A run started again after an interruption starts from the first stage;
every stage is deterministic given the configuration, so the final outputs are the same.

A failing stage stops the run: the folder, with the partial executed notebook, is kept as
``<parent>/<name>.failed/`` and the error is reported in one line (stage, cell, error). The terminal gets the
full message; the manifest and the saved notebook get it scrubbed of raw values
(:mod:`riskbench.workflow.saved_messages`).

Temporary files and the network: the stages' temporary files (DuckDB spill files, joblib memory maps) are
written in ``.tmp/`` inside the staging folder and removed on success, failure, Ctrl-C and SIGTERM. The
kernel is reached over Unix-domain sockets only (:mod:`riskbench.workflow.kernel_launch`).
"""

from __future__ import annotations

import contextlib
import logging
import os
import re
import shutil
import signal
import tempfile
import threading
import time
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path

import nbformat

from riskbench.cohort.reading import OPTIONAL, REQUIRED
from riskbench.errors import RiskbenchError
from riskbench.validation.parallel import check_scheduler
from riskbench.workflow.config import AnalysisConfig, ConfigError, load_config
from riskbench.workflow.kernel import LAUNCHER, ensure_kernel, kernel_pids, local_socket_kernel_manager
from riskbench.workflow.manifest import build_manifest, input_files, utc_now, write_manifest
from riskbench.workflow.notebook_builder import STAGE_NOTEBOOKS, write_notebooks
from riskbench.workflow.notebook_html import export_html
from riskbench.workflow.notebook_paths import relocate_notebook
from riskbench.workflow.progress import stage_progress
from riskbench.workflow.run_folder import (
    TEMP,
    NotARunFolder,
    RunFolderExists,
    RunLock,
    RunPaths,
    files_inside,
    location_error,
    pid_alive,
    remove_owned,
    why_not_a_run_folder,
    write_marker,
)
from riskbench.workflow.saved_messages import scrub_notebook, scrub_text

NOTEBOOKS = "notebooks"
REPORT = "report.html"
_ANSI = re.compile(r"\x1b\[[0-9;]*m")
KERNEL_STOP_WAIT_S = 5.0
# Importing the stage functions registers every RiskbenchError subclass the stages can raise.
USER_ERROR_MODULES: tuple[str, ...] = ("riskbench.workflow.stages", "riskbench.workflow.pseudonyms")

__all__ = [
    "NotARunFolder",
    "RunFolderExists",
    "RunInterrupted",
    "RunResult",
    "StageFailed",
    "StageInputError",
    "run_analysis",
]


class StageFailed(Exception):
    """A stage notebook raised an internal error; the message is one line naming the stage, the cell and
    the error (exit status 1 on the command line)."""

    one_line_message = True
    details = ""  # the notebook's traceback, shown by the command line with --debug (never saved)


class StageInputError(StageFailed, RiskbenchError):
    """A stage rejected the configuration or the data (a :class:`~riskbench.errors.RiskbenchError` raised in
    the notebook; exit status 2 on the command line)."""


class RunInterrupted(KeyboardInterrupt):
    """The run was stopped by Ctrl-C (SIGINT) or SIGTERM; its staging folder and temporary files are removed."""

    def __init__(self, signum: int) -> None:
        super().__init__(signum)
        self.signum = signum


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


def user_error_names() -> frozenset[str]:
    """Class names of every :class:`RiskbenchError` subclass (how a notebook's error is classified)."""
    import importlib

    for module in USER_ERROR_MODULES:
        importlib.import_module(module)
    names, todo = set(), [RiskbenchError]
    while todo:
        cls = todo.pop()
        names.add(cls.__name__)
        todo += cls.__subclasses__()
    return frozenset(names)


def _socket_folder() -> str:
    """A new private folder for the kernel's Unix-domain sockets (holds no data). Socket paths are limited
    to about 100 characters, so a long temporary-folder path is replaced by /tmp."""
    base = tempfile.gettempdir()
    return tempfile.mkdtemp(prefix="rbk-", dir=base if len(base) <= 60 or not os.path.isdir("/tmp") else "/tmp")


def _run_folder_path(out: str | Path) -> Path:
    """``out`` made absolute without following a symbolic link at its last component."""
    out = Path(os.path.abspath(out))
    return out.parent.resolve() / out.name


def _quiet(_message: str) -> None:
    """The log of a run that should say nothing."""


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
        Replace an existing run folder made by riskbench (only once the new run has finished).
    notebooks_dir
        Folder with the stage notebooks; default the committed ``notebooks/`` (or freshly written ones).
    stages
        ``(stage name, notebook file)`` pairs, run in this order.
    log
        Receives one progress line per stage (and lock messages); None for silence.

    Raises
    ------
    RunFolderExists
        ``out`` exists and ``overwrite`` is false.
    NotARunFolder
        ``out`` (or a leftover beside it) is in the way and was not made by a riskbench run, or an input file
        lies inside a folder the run would replace.
    RunLocked
        Another run is writing into ``out``.
    RunLocationError
        ``out`` cannot be created or written.
    StageInputError
        A stage rejected the configuration or the data (a RiskbenchError in the notebook).
    StageFailed
        A stage notebook raised another error.
    RunInterrupted
        Ctrl-C or SIGTERM; nothing is left but what was there before.
    """
    say = log or _quiet
    config: AnalysisConfig = load_config(config_path, check_data=True)
    problems = check_scheduler(config.execution)  # also part of the configuration check; kept as a guard
    if problems:
        raise ConfigError(f"{config.path}: " + "; ".join(problems))
    paths = RunPaths(_run_folder_path(out))
    key_file = getattr(getattr(config, "privacy", None), "key_file", None)
    kept = [*input_files(config).values(), *([Path(key_file)] if key_file else [])]
    inside = files_inside(kept, paths.owned())
    if inside:
        file, folder = inside[0]
        raise NotARunFolder(
            f"the file {file}, which this run reads, lies inside {folder}, which this run would "
            "replace or remove; choose an --out elsewhere"
        )
    try:
        paths.out.parent.mkdir(parents=True, exist_ok=True)
        lock = RunLock(paths, say).acquire()
    except OSError as exc:
        raise location_error(exc, paths.out) from None
    try:
        with _signals_interrupt():
            return _run_locked(config, paths, overwrite, notebooks_dir, stages, say)
    finally:
        lock.release()


def _run_locked(
    config: AnalysisConfig,
    paths: RunPaths,
    overwrite: bool,
    notebooks_dir: str | Path | None,
    stages: Sequence[tuple[str, str]],
    say: Callable[[str], None],
) -> RunResult:
    out, staging = paths.out, paths.staging
    if out.exists() or out.is_symlink():
        if not overwrite:
            raise RunFolderExists(f"{out} already exists; choose another --out or pass --overwrite to replace it")
        reason = why_not_a_run_folder(out)
        if reason is not None:
            raise NotARunFolder(
                f"--overwrite refused: {out} exists but {reason}; riskbench replaces only run "
                "folders it made. Move it away or choose another --out"
            )
    for leftover in (staging, paths.failed, paths.old):
        remove_owned(leftover, "a leftover of an earlier run")
    try:
        staging.mkdir()
        write_marker(staging, "partial")
        (staging / NOTEBOOKS).mkdir()
        (staging / TEMP).mkdir(mode=0o700)
    except OSError as exc:
        raise location_error(exc, out) from None
    temp = staging / TEMP
    sockets = _socket_folder()
    try:
        return _run_in_staging(config, paths, notebooks_dir, stages, temp, sockets, say)
    except KeyboardInterrupt:
        logging.getLogger("asyncio").setLevel(logging.CRITICAL)  # the notebook client's orphaned tasks
        _stop_kernels(sockets)
        shutil.rmtree(staging, ignore_errors=True)  # an interrupted run keeps nothing; the next run starts afresh
        raise
    finally:
        _stop_kernels(sockets)
        shutil.rmtree(temp, ignore_errors=True)
        shutil.rmtree(sockets, ignore_errors=True)


def _run_in_staging(
    config: AnalysisConfig,
    paths: RunPaths,
    notebooks_dir: str | Path | None,
    stages: Sequence[tuple[str, str]],
    temp: Path,
    sockets: str,
    say: Callable[[str], None],
) -> RunResult:
    staging = paths.staging
    if notebooks_dir is None:
        notebooks_dir = default_notebooks_dir()
    if notebooks_dir is None:  # an installed package without the source tree: write them afresh
        notebooks_dir = staging / ".templates"
        write_notebooks(notebooks_dir)
    notebooks_dir = Path(notebooks_dir)
    kernel = ensure_kernel()
    started = utc_now()
    manager = local_socket_kernel_manager(sockets, str(temp))
    seconds: dict[str, float] = {}
    for name, notebook in stages:
        say(f"stage {name}: running {notebook}")
        t0 = time.perf_counter()
        with stage_progress(temp, name, show=say is not _quiet):  # replicates done, elapsed, time left on stderr
            error = _execute(notebooks_dir / notebook, staging / NOTEBOOKS / notebook, config, staging, kernel, manager)
        seconds[name] = time.perf_counter() - t0
        if error is not None:
            _stop_kernels(sockets)
            shutil.rmtree(temp, ignore_errors=True)
            raise _stop(config, paths, name, notebook, started, seconds, error)
        relocate_notebook(staging / NOTEBOOKS / notebook, staging, paths.out)  # no staging path is kept
        export_html(staging / NOTEBOOKS / notebook, (staging / NOTEBOOKS / notebook).with_suffix(".html"))
        say(f"stage {name}: done in {seconds[name]:.1f} s")

    _stop_kernels(sockets)
    shutil.rmtree(temp, ignore_errors=True)
    shutil.rmtree(staging / ".templates", ignore_errors=True)
    write_marker(staging, "complete")
    manifest = build_manifest(config, staging, started=started, finished=utc_now(), stage_seconds=seconds)
    write_manifest(manifest, staging)
    _move_into_place(paths)
    out = paths.out
    return RunResult(run_dir=out, report=out / REPORT, manifest=out / "manifest.json", stage_seconds=seconds)


def _execute(
    source: Path, executed: Path, config: AnalysisConfig, staging: Path, kernel: str, manager: type
) -> Exception | None:
    """Run one notebook with papermill; return the notebook's error (None when it ran through)."""
    import papermill as pm
    from papermill.exceptions import PapermillExecutionError

    try:
        pm.execute_notebook(
            str(source),
            str(executed),
            parameters={"config_path": str(config.path), "run_dir": str(staging)},
            kernel_name=kernel,
            language="python",
            progress_bar=False,
            log_output=False,
            cwd=str(staging),
            request_save_on_cell_execute=True,
            kernel_manager_class=manager,
        )
    except PapermillExecutionError as exc:
        return exc
    except RuntimeError as exc:  # the kernel died (nbclient's DeadKernelError) or could not start
        return exc
    return None


def _saved_names(config: AnalysisConfig) -> set[str]:
    """Names that saved messages may show as they are: configuration names and input file names."""
    names = {m.name for m in config.models} | {c for m in config.models for c in m.covariates}
    cohort = config.cohort
    names |= {str(v.name) for v in getattr(cohort, "variables", ())}
    names |= set(getattr(cohort, "static", ())) | set(getattr(cohort, "covariate_columns", ()))
    names |= {str(k) for k in (getattr(cohort, "columns", None) or {})}
    for key in ("patients", "measurements", "outcomes"):
        names.add(key)
        source = getattr(config.sources, key, None)
        names |= {str(k) for k in (getattr(source, "columns", None) or {})}
    names |= {p.name for p in input_files(config).values()}
    names |= {c for table in (REQUIRED, OPTIONAL) for columns in table.values() for c in columns}
    return names


def _stop(
    config: AnalysisConfig,
    paths: RunPaths,
    stage: str,
    notebook: str,
    started: str,
    seconds: dict[str, float],
    exc: Exception,
) -> StageFailed:
    """Keep the partial run as ``<name>.failed`` (messages scrubbed) and build the one-line error."""
    staging, failed = paths.staging, paths.failed
    executed = staging / NOTEBOOKS / notebook
    cell = _failing_cell(executed)
    ename = getattr(exc, "ename", type(exc).__name__)
    evalue = getattr(exc, "evalue", str(exc))
    user = ename in user_error_names()
    names, files = _saved_names(config), [str(p) for p in input_files(config).values()]
    where = f"stage {stage} failed in cell {cell}: {ename}"
    saved = f"{where}: {scrub_text(evalue, names, files)}"
    try:
        if executed.is_file():
            scrub_notebook(executed, names, files)
            relocate_notebook(executed, staging, failed)
        write_marker(staging, "failed")
        write_manifest(
            build_manifest(
                config,
                staging,
                started=started,
                finished=utc_now(),
                stage_seconds=seconds,
                status="failed",
                failure=saved,
            ),
            staging,
        )
    except (OSError, ValueError):  # the one-line error matters more than the record of a failed run
        pass
    os.replace(staging, failed)
    advice = (
        "fix the configuration or the data as the message says and run again"
        if user
        else "this looks like a problem in riskbench or its environment; rerun with --debug and report it"
    )
    cls = StageInputError if user else StageFailed
    error = cls(f"{where}: {_one_line(evalue)} (partial run kept in {failed}; {advice})")
    error.details = _ANSI.sub("", "\n".join(getattr(exc, "traceback", None) or [f"{ename}: {evalue}"]))
    return error


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


def _move_into_place(paths: RunPaths) -> None:
    """Rename the finished staging folder to ``out``, replacing an old run (checked again) only at the very
    end; Ctrl-C and SIGTERM wait until both renames are done."""
    out, staging, old = paths.out, paths.staging, paths.old
    with _signals_deferred():
        if out.exists() or out.is_symlink():
            reason = why_not_a_run_folder(out)
            if reason is not None:
                raise NotARunFolder(f"{out} appeared during the run and {reason}; the new run is left in {staging}")
            os.replace(out, old)
            os.replace(staging, out)
            shutil.rmtree(old)
        else:
            os.replace(staging, out)


# --------------------------------------------------------------------------------------------------
# Signals and kernels


def _in_main_thread() -> bool:
    return threading.current_thread() is threading.main_thread()


@contextmanager
def _signals_interrupt() -> Iterator[None]:
    """Turn SIGTERM into :class:`RunInterrupted` (Ctrl-C already raises KeyboardInterrupt) while running."""
    if not _in_main_thread():
        yield
        return

    def interrupt(signum: int, _frame: object) -> None:
        raise RunInterrupted(signum)

    previous = signal.signal(signal.SIGTERM, interrupt)
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)


@contextmanager
def _signals_deferred() -> Iterator[None]:
    """Hold SIGINT and SIGTERM back until the block is done (they are delivered afterwards)."""
    if not _in_main_thread() or not hasattr(signal, "pthread_sigmask"):
        yield
        return
    blocked = {signal.SIGINT, signal.SIGTERM}
    signal.pthread_sigmask(signal.SIG_BLOCK, blocked)
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_UNBLOCK, blocked)


def _is_our_kernel(pid: int, sockets: str) -> bool:
    try:
        with open(f"/proc/{pid}/cmdline", "rb") as handle:
            cmdline = handle.read().decode(errors="replace").split("\0")
    except OSError:
        return False
    return LAUNCHER in cmdline and sockets in cmdline


def _stop_kernels(sockets: str) -> None:
    """End every kernel (and its process group: joblib workers) started for this run that still runs."""
    pids = [p for p in kernel_pids(sockets) if pid_alive(p) and _is_our_kernel(p, sockets)]
    for sig in (signal.SIGTERM, signal.SIGKILL):
        for pid in pids:
            with contextlib.suppress(ProcessLookupError, PermissionError):
                os.killpg(pid, sig)  # the kernel leads its own session and process group
        deadline = time.monotonic() + KERNEL_STOP_WAIT_S
        while time.monotonic() < deadline and any(pid_alive(p) for p in pids):
            _reap(pids)
            time.sleep(0.05)
        _reap(pids)
        pids = [p for p in pids if pid_alive(p)]
        if not pids:
            return


def _reap(pids: Sequence[int]) -> None:
    for pid in pids:
        with contextlib.suppress(ChildProcessError):
            os.waitpid(pid, os.WNOHANG)
