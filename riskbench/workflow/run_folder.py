"""Run folders that riskbench owns: the ownership marker, the lock, and removal of only what a run made.

Every folder the runner creates (the hidden staging folder, which becomes the run folder or
``<name>.failed``) holds the marker file ``.riskbench-run``. A folder is replaced or removed only when it
carries that marker (or, for runs made before the marker existed, a ``manifest.json`` of a riskbench run
and nothing but run-folder entries); anything else, such as a study folder holding the input files, is
refused with a message that says why.

A lock file ``.<name>.lock`` beside the run folder holds the pid, host and start time of the run writing
there. A second run into the same ``--out`` is refused while that process lives; a lock whose process is gone
on this host (stale: the run was killed) is taken over, with a message.
"""

from __future__ import annotations

import contextlib
import errno
import json
import os
import shutil
import socket
import time
from collections.abc import Callable, Iterable
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path

from riskbench.errors import RiskbenchError

MARKER = ".riskbench-run"
MARKER_HEADER = "riskbench run folder"
TEMP = ".tmp"
RUN_ENTRIES = frozenset(
    {"data", "tables", "figures", "notebooks", "notes", "report.html", "manifest.json", MARKER, TEMP, ".templates"}
)
UNREADABLE_LOCK_GRACE_S = 10.0


class RunFolderExists(RiskbenchError):
    """The run folder exists and overwriting was not asked for."""


class NotARunFolder(RiskbenchError):
    """A folder that riskbench would replace or remove was not made by a riskbench run."""


class RunLocked(RiskbenchError):
    """Another run is writing into the same run folder."""


class RunLocationError(RiskbenchError):
    """The run folder cannot be created or written (permissions, read-only file system, disk full)."""


@dataclass(frozen=True)
class RunPaths:
    """The folders and files of one run folder ``out``: all beside each other in ``out``'s parent."""

    out: Path

    @property
    def staging(self) -> Path:
        return self.out.parent / f".{self.out.name}.partial"

    @property
    def failed(self) -> Path:
        return self.out.parent / f"{self.out.name}.failed"

    @property
    def old(self) -> Path:
        return self.out.parent / f".{self.out.name}.old"

    @property
    def lock(self) -> Path:
        return self.out.parent / f".{self.out.name}.lock"

    def owned(self) -> tuple[Path, ...]:
        """Every folder the runner may create or remove for this run folder."""
        return self.out, self.staging, self.failed, self.old


def write_marker(folder: Path, status: str) -> None:
    """Mark ``folder`` as made by a riskbench run (``status``: partial, complete, failed)."""
    record = {"status": status, "written_utc": datetime.now(UTC).isoformat(timespec="seconds")}
    (folder / MARKER).write_text(f"{MARKER_HEADER}\n{json.dumps(record)}\n", encoding="utf-8")


def _legacy_run(folder: Path) -> bool:
    """A run folder written before the marker existed: a riskbench manifest and only run-folder entries."""
    try:
        manifest = json.loads((folder / "manifest.json").read_text(encoding="utf-8"))
        names = {p.name for p in folder.iterdir()}
    except (OSError, ValueError):
        return False
    return isinstance(manifest, dict) and manifest.get("riskbench_run") == 1 and names <= RUN_ENTRIES


def why_not_a_run_folder(folder: Path) -> str | None:
    """None when ``folder`` is a folder a riskbench run made; otherwise the reason, for the message."""
    if folder.is_symlink():
        return "it is a symbolic link"
    if not folder.is_dir():
        return "it is not a folder"
    marker = folder / MARKER
    if marker.is_file() and not marker.is_symlink():
        try:
            with marker.open(encoding="utf-8") as handle:
                if handle.readline().strip() == MARKER_HEADER:
                    return None
        except (OSError, UnicodeDecodeError):
            pass
    if _legacy_run(folder):
        return None
    return f"it has no {MARKER} marker file, so it was not made by a riskbench run"


def remove_owned(folder: Path, purpose: str) -> None:
    """Remove ``folder`` if a riskbench run made it; refuse (NotARunFolder) otherwise. Absent: nothing."""
    if not folder.exists() and not folder.is_symlink():
        return
    reason = why_not_a_run_folder(folder)
    if reason is not None:
        raise NotARunFolder(
            f"{folder} is in the way ({purpose}) but {reason}; riskbench removes only folders its runs made. "
            "Move it away or choose another --out"
        )
    shutil.rmtree(folder)


def fresh_output_folder(out: Path, overwrite: bool, purpose: str) -> None:
    """Create the output folder ``out`` of a command (with the marker, status partial).

    An existing ``out`` is refused (:class:`RunFolderExists`) unless ``overwrite``, and then replaced only when
    a riskbench command made it (:func:`remove_owned`).
    """
    if out.exists() or out.is_symlink():
        if not overwrite:
            raise RunFolderExists(f"{out} exists; choose another --out or add --overwrite to replace it")
        remove_owned(out, purpose)
    out.mkdir(parents=True)
    write_marker(out, "partial")


def files_inside(paths: Iterable[Path], folders: Iterable[Path]) -> list[tuple[Path, Path]]:
    """``(file, folder)`` pairs where a file lies inside one of the folders (resolved, symlinks followed)."""
    resolved = [f.resolve() for f in folders]
    hits = []
    for path in paths:
        p = Path(path).resolve()
        hits += [(Path(path), f) for f in resolved if p == f or f in p.parents]
    return hits


# --------------------------------------------------------------------------------------------------
# The lock


def pid_alive(pid: int) -> bool:
    """True when a process ``pid`` exists on this host (a zombie counts as gone)."""
    if pid <= 0:
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    try:
        with open(f"/proc/{pid}/stat", encoding="ascii") as handle:
            return handle.read().rsplit(")", 1)[1].split()[0] != "Z"
    except (OSError, IndexError):
        return True


def _read_lock(path: Path) -> dict | None:
    try:
        record = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    return record if isinstance(record, dict) and isinstance(record.get("pid"), int) else None


class RunLock:
    """The lock of one run folder; use as a context manager (released on exit, only if still ours)."""

    def __init__(self, paths: RunPaths, say: Callable[[str], None]) -> None:
        self.path = paths.lock
        self.out = paths.out
        self._say = say
        self._record = {
            "pid": os.getpid(),
            "host": socket.gethostname(),
            "started_utc": datetime.now(UTC).isoformat(timespec="seconds"),
            "token": os.urandom(8).hex(),
        }

    def _create(self) -> bool:
        try:
            fd = os.open(self.path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
        except FileExistsError:
            return False
        with os.fdopen(fd, "w", encoding="utf-8") as handle:
            handle.write(json.dumps(self._record) + "\n")
        return True

    def acquire(self) -> RunLock:
        for _attempt in range(3):
            if self._create():
                return self
            holder = _read_lock(self.path)
            if holder is None:  # being written right now, or garbled by a crash
                try:
                    age = time.time() - self.path.stat().st_mtime
                except FileNotFoundError:
                    continue
                if age < UNREADABLE_LOCK_GRACE_S:
                    raise RunLocked(
                        f"another run is starting in {self.out} (lock file {self.path}); wait for it "
                        "or choose another --out"
                    )
                self._say(f"removing the unreadable lock file {self.path} (older than {UNREADABLE_LOCK_GRACE_S:.0f} s)")
            elif holder.get("host") != self._record["host"]:
                raise RunLocked(
                    f"{self.out} is locked by process {holder['pid']} on host {holder.get('host')!r} since "
                    f"{holder.get('started_utc')}; if that run is no longer going, delete {self.path}"
                )
            elif pid_alive(holder["pid"]):
                raise RunLocked(
                    f"another run (process {holder['pid']}, started {holder.get('started_utc')}) is writing into "
                    f"{self.out}; wait for it to finish or choose another --out "
                    f"(if no run is going, delete {self.path})"
                )
            else:
                self._say(
                    f"taking over the stale lock of process {holder['pid']} (started "
                    f"{holder.get('started_utc')}, no longer running) on {self.out}"
                )
            with contextlib.suppress(FileNotFoundError):
                self.path.unlink()
        raise RunLocked(f"could not lock {self.out}: another run keeps taking the lock {self.path}")

    def release(self) -> None:
        holder = _read_lock(self.path)
        if holder is not None and holder.get("token") == self._record["token"]:
            with contextlib.suppress(FileNotFoundError):
                self.path.unlink()

    def __enter__(self) -> RunLock:
        return self.acquire()

    def __exit__(self, *exc: object) -> None:
        self.release()


def location_error(exc: OSError, where: Path) -> RunLocationError:
    """A one-line message for an OSError met while creating or writing the run folder."""
    reason = {
        errno.EACCES: "permission denied",
        errno.EPERM: "permission denied",
        errno.EROFS: "read-only file system",
        errno.ENOSPC: "no space left on the device",
        errno.EDQUOT: "disk quota exceeded",
    }.get(exc.errno or 0, exc.strerror or type(exc).__name__)
    target = exc.filename or where
    return RunLocationError(
        f"cannot write the run folder at {where}: {reason} ({target}); choose an --out in a folder you can write to"
    )
