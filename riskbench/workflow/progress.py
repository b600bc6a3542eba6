"""Progress of the stage notebooks on the runner's terminal.

A stage runs inside a notebook kernel, whose standard error belongs to the notebook. The kernel started by
the runner therefore tells its progress (:mod:`riskbench.progress`: replicates done, elapsed, time left) to a
file in the run's temporary folder, named by ``RISKBENCH_PROGRESS_FILE``; while the stage runs,
:class:`ProgressRelay` reads the new lines of that file and shows them on standard error, prefixed with the
stage: one line rewritten in place on a terminal, otherwise a line every 30 s and one when a part ends.
The notebook itself shows the same progress as one output updated in place, never on its standard error.
"""

from __future__ import annotations

import os
import threading
from contextlib import AbstractContextManager, nullcontext
from pathlib import Path
from typing import TextIO

from riskbench.progress import PROGRESS_FILE_ENV, ProgressState, TerminalSink

#: The progress file's name inside the run's temporary folder.
PROGRESS_FILE_NAME = "progress.jsonl"


def progress_file(temp_folder: str | os.PathLike[str]) -> Path:
    """The progress file of the kernels whose temporary folder is ``temp_folder``."""
    return Path(temp_folder) / PROGRESS_FILE_NAME


def tell_progress_to(temp_folder: str | os.PathLike[str]) -> None:
    """Make progress reported in this process (a stage kernel) go to the progress file of ``temp_folder``."""
    os.environ[PROGRESS_FILE_ENV] = str(progress_file(temp_folder))


class ProgressRelay:
    """Show the progress lines a stage kernel appends to ``path`` on a text stream while the stage runs.

    Parameters
    ----------
    path : str or os.PathLike
        The progress file (it may not exist yet; lines already in it when the relay starts are skipped).
    stage : str
        The stage's name, put before every line.
    stream : text stream, optional
        Default standard error.
    interactive : bool, optional
        Rewrite one line in place; by default when ``stream`` is a terminal.
    poll_s : float, default 0.5
        Seconds between two reads of the file.
    interval_s : float, default 30
        On a stream that is not interactive, the least number of seconds between two lines of one part.
    """

    def __init__(
        self,
        path: str | os.PathLike[str],
        stage: str,
        stream: TextIO | None = None,
        *,
        interactive: bool | None = None,
        poll_s: float = 0.5,
        interval_s: float = 30.0,
    ) -> None:
        self._path = Path(path)
        self._stage = stage
        self._stream = stream
        self._interactive = interactive
        self._poll = poll_s
        self._interval = interval_s
        self._offset = self._size()
        self._pending = b""
        self._sink: TerminalSink | None = None
        self._label: str | None = None
        self._last: ProgressState | None = None
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None

    def __enter__(self) -> ProgressRelay:
        self._thread = threading.Thread(target=self._watch, name="riskbench-progress-relay", daemon=True)
        self._thread.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self._stop.set()
        if self._thread is not None:
            self._thread.join()
        self.poll()  # whatever the kernel wrote last
        if self._sink is not None and self._last is not None and not self._last.finished:
            self._sink.close(self._last)  # the stage stopped in the middle of a part: end its line
        self._sink = None

    def _size(self) -> int:
        try:
            return self._path.stat().st_size
        except OSError:
            return 0

    def _watch(self) -> None:
        while not self._stop.wait(self._poll):
            self.poll()

    def poll(self) -> None:
        """Read the lines appended since the last call and show them."""
        try:
            with open(self._path, "rb") as handle:
                handle.seek(self._offset)
                data = handle.read()
        except OSError:
            return
        self._offset += len(data)
        lines = (self._pending + data).split(b"\n")
        self._pending = lines.pop()  # a line the kernel is still writing
        for raw in lines:
            try:
                state = ProgressState.from_json(raw.decode("utf-8"))
            except (ValueError, KeyError, TypeError):
                continue  # not a progress line: ignore rather than show something untrue
            self._show(state)

    def _show(self, state: ProgressState) -> None:
        if self._sink is None or state.label != self._label:
            if self._sink is not None and self._last is not None and not self._last.finished:
                self._sink.close(self._last)
            self._sink = TerminalSink(
                self._stream, interactive=self._interactive, interval_s=self._interval, prefix=f"stage {self._stage}: "
            )
            self._label = state.label
        self._last = state
        if state.finished:
            self._sink.close(state)
            self._sink, self._label = None, None
        else:
            self._sink.show(state)


def stage_progress(
    temp_folder: str | os.PathLike[str], stage: str, show: bool = True
) -> AbstractContextManager[object]:
    """While a stage runs: relay its kernel's progress file (in ``temp_folder``) to standard error when ``show``."""
    return ProgressRelay(progress_file(temp_folder), stage) if show else nullcontext()
