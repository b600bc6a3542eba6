"""Progress of long work: how much is done, the time elapsed and an estimate of the time left.

One :class:`Progress` counts units of work (replicates, folds) and tells its state to *sinks*:

* :class:`TerminalSink` writes to standard error: one line rewritten in place on an interactive terminal,
  otherwise a line at most every ``interval_s`` seconds and one when the work ends (no control characters
  in a log file).
* :class:`NotebookSink` shows one plain-text output in a notebook and updates it in place; the executed
  notebook keeps the final state ("... 200 of 200 replicates in 1 min 40 s"). It writes nothing to the
  notebook's standard error, so an executed notebook carries no progress noise or warnings.
* :class:`FileSink` appends the state as JSON lines to the file named by the environment variable
  ``RISKBENCH_PROGRESS_FILE``; the notebook runner sets it for the stage kernels and relays the lines to the
  terminal (:mod:`riskbench.workflow.progress`).

The estimate of the time left assumes the remaining units cost what the finished ones cost on average
(elapsed / done x remaining); it is shown only once a unit has finished, and never as a bar that moves
without work being done.
"""

from __future__ import annotations

import json
import math
import os
import sys
import time
from collections.abc import Callable, Sequence
from dataclasses import asdict, dataclass
from typing import Any, Protocol, TextIO

#: Environment variable naming the file that receives progress as JSON lines (set by the notebook runner).
PROGRESS_FILE_ENV = "RISKBENCH_PROGRESS_FILE"


@dataclass(frozen=True)
class ProgressState:
    """A snapshot of some work.

    Attributes
    ----------
    label : str
        What is being done, e.g. ``"bootstrap optimism"``.
    done, total : int
        Units finished and units in all.
    elapsed_s : float
        Seconds since the work started.
    unit : str
        Plural name of a unit, e.g. ``"replicates"``.
    """

    label: str
    done: int
    total: int
    elapsed_s: float
    unit: str = "replicates"

    @property
    def finished(self) -> bool:
        """True once every unit is done."""
        return self.done >= self.total

    @property
    def remaining_s(self) -> float | None:
        """Estimated seconds left (mean cost of a finished unit times the units left); None before the first."""
        if self.done <= 0:
            return None
        return self.elapsed_s / self.done * max(self.total - self.done, 0)

    def line(self) -> str:
        """One line for a person, e.g. ``"bootstrap optimism: 40 of 200 replicates, 1 min 02 s elapsed, about
        4 min 08 s left"``."""
        head = f"{self.label}: {self.done} of {self.total} {self.unit}"
        if self.finished:
            return f"{head} in {format_seconds(self.elapsed_s)}"
        left = self.remaining_s
        tail = "estimating the time left" if left is None else f"about {format_seconds(left)} left"
        return f"{head}, {format_seconds(self.elapsed_s)} elapsed, {tail}"

    def to_json(self) -> str:
        """The state as one JSON object (a line of the progress file)."""
        return json.dumps(asdict(self), separators=(",", ":"))

    @classmethod
    def from_json(cls, text: str) -> ProgressState:
        """Read a line written by :meth:`to_json`; raises ValueError for anything else."""
        data = json.loads(text)
        if not isinstance(data, dict):
            raise ValueError("a progress line is a JSON object")
        return cls(
            label=str(data["label"]),
            done=int(data["done"]),
            total=int(data["total"]),
            elapsed_s=float(data["elapsed_s"]),
            unit=str(data.get("unit", "replicates")),
        )


def format_seconds(seconds: float) -> str:
    """A duration for people: ``"0.4 s"``, ``"12 s"``, ``"3 min 05 s"``, ``"2 h 07 min"``."""
    if not math.isfinite(seconds) or seconds < 0:
        return "unknown time"
    if seconds < 10:
        return f"{seconds:.1f} s"
    whole = round(seconds)
    if whole < 60:
        return f"{whole} s"
    minutes, secs = divmod(whole, 60)
    if minutes < 60:
        return f"{minutes} min {secs:02d} s"
    hours, minutes = divmod(minutes, 60)
    return f"{hours} h {minutes:02d} min"


class ProgressSink(Protocol):
    """Where a progress state is told."""

    def show(self, state: ProgressState) -> None: ...

    def close(self, state: ProgressState) -> None: ...


class TerminalSink:
    """Progress on a text stream (standard error by default).

    Parameters
    ----------
    stream : text stream, optional
        Default ``sys.stderr`` (looked up when writing).
    interactive : bool, optional
        Rewrite one line in place (``\\r``); by default when the stream is a terminal.
    interval_s : float, default 30
        On a stream that is not interactive, the least number of seconds between two lines.
    prefix : str, default ""
        Text put before every line (e.g. the stage).
    clock : callable, default time.monotonic
    """

    def __init__(
        self,
        stream: TextIO | None = None,
        *,
        interactive: bool | None = None,
        interval_s: float = 30.0,
        prefix: str = "",
        clock: Callable[[], float] = time.monotonic,
    ) -> None:
        self._stream = stream
        self._interactive = interactive
        self._interval = interval_s
        self._prefix = prefix
        self._clock = clock
        self._last: float | None = None
        self._width = 0

    @property
    def stream(self) -> TextIO:
        """The stream written to."""
        return self._stream if self._stream is not None else sys.stderr

    @property
    def interactive(self) -> bool:
        """Whether the line is rewritten in place."""
        if self._interactive is not None:
            return self._interactive
        return is_terminal(self.stream)

    def show(self, state: ProgressState) -> None:
        """Rewrite the line (interactive) or write one when ``interval_s`` has passed since the last."""
        if self.interactive:
            self._rewrite(state)
            return
        now = self._clock()
        if self._last is None or now - self._last >= self._interval:
            self._last = now
            self._write_line(state)

    def close(self, state: ProgressState) -> None:
        """Write the final state and end the line."""
        if self.interactive:
            self._rewrite(state)
            self.stream.write("\n")
            self.stream.flush()
            self._width = 0
        else:
            self._write_line(state)

    def _rewrite(self, state: ProgressState) -> None:
        text = self._prefix + state.line()
        pad = " " * max(self._width - len(text), 0)  # blank out the end of a longer previous line
        self._width = len(text)
        self.stream.write("\r" + text + pad)
        self.stream.flush()

    def _write_line(self, state: ProgressState) -> None:
        self.stream.write(self._prefix + state.line() + "\n")
        self.stream.flush()


class NotebookSink:
    """Progress as one plain-text output of the running notebook cell, updated in place.

    Parameters
    ----------
    interval_s : float, default 0.5
        The least number of seconds between two updates (the final state is always shown).
    clock : callable, default time.monotonic
    """

    def __init__(self, interval_s: float = 0.5, clock: Callable[[], float] = time.monotonic) -> None:
        self._interval = interval_s
        self._clock = clock
        self._handle: Any = None
        self._last: float | None = None

    def show(self, state: ProgressState) -> None:
        """Create the output on the first call; update it at most every ``interval_s`` seconds."""
        now = self._clock()
        if self._handle is not None and self._last is not None and now - self._last < self._interval:
            return
        self._last = now
        self._display(state)

    def close(self, state: ProgressState) -> None:
        """Show the final state."""
        self._display(state)

    def _display(self, state: ProgressState) -> None:
        from IPython.display import display

        data = {"text/plain": state.line()}
        if self._handle is None:
            self._handle = display(data, raw=True, display_id=True)
        else:
            self._handle.update(data, raw=True)


class FileSink:
    """Progress appended as JSON lines to a file (see :data:`PROGRESS_FILE_ENV`).

    Parameters
    ----------
    path : str or os.PathLike
    interval_s : float, default 1
        The least number of seconds between two lines (the final state is always written).
    clock : callable, default time.monotonic
    """

    def __init__(
        self, path: str | os.PathLike[str], interval_s: float = 1.0, clock: Callable[[], float] = time.monotonic
    ) -> None:
        self._path = os.fspath(path)
        self._interval = interval_s
        self._clock = clock
        self._last: float | None = None

    def show(self, state: ProgressState) -> None:
        """Append the state when ``interval_s`` has passed since the last line."""
        now = self._clock()
        if self._last is None or now - self._last >= self._interval:
            self._last = now
            self._append(state)

    def close(self, state: ProgressState) -> None:
        """Append the final state."""
        self._append(state)

    def _append(self, state: ProgressState) -> None:
        try:
            with open(self._path, "a", encoding="utf-8") as handle:
                handle.write(state.to_json() + "\n")
        except OSError:
            pass  # progress is a courtesy: a vanished temporary folder must not stop the work


def is_terminal(stream: Any) -> bool:
    """True when ``stream`` is an interactive terminal."""
    try:
        return bool(stream.isatty())
    except (AttributeError, ValueError):
        return False


def in_notebook_kernel() -> bool:
    """True inside a Jupyter kernel (a notebook run by hand or by papermill)."""
    if "ipykernel" not in sys.modules:
        return False
    try:
        from IPython import get_ipython
    except ImportError:  # pragma: no cover - ipykernel always brings IPython
        return False
    shell = get_ipython()
    return shell is not None and getattr(shell, "kernel", None) is not None


def default_sinks(show: bool | None = None) -> list[ProgressSink]:
    """The sinks for work started here.

    Parameters
    ----------
    show : bool, optional
        False: none. True: the notebook output inside a kernel, else standard error even when it is not a
        terminal. None (default): the notebook output inside a kernel, standard error only when it is a
        terminal. In every case but False, also the progress file when :data:`PROGRESS_FILE_ENV` is set.
    """
    if show is False:
        return []
    sinks: list[ProgressSink] = []
    path = os.environ.get(PROGRESS_FILE_ENV)
    if path:
        sinks.append(FileSink(path))
    if in_notebook_kernel():
        sinks.append(NotebookSink())
    elif show or is_terminal(sys.stderr):
        sinks.append(TerminalSink())
    return sinks


class Progress:
    """Count finished units of some work and tell the sinks.

    Parameters
    ----------
    label : str
        What is being done.
    total : int
        Units in all.
    sinks : sequence of ProgressSink
        Where to tell it (:func:`default_sinks`); empty for silence.
    unit : str, default "replicates"
    clock : callable, default time.monotonic

    Examples
    --------
    >>> with Progress("bootstrap", 3, sinks=[]) as progress:
    ...     for _ in range(3):
    ...         progress.advance()
    >>> progress.state.done
    3
    """

    def __init__(
        self,
        label: str,
        total: int,
        sinks: Sequence[ProgressSink],
        *,
        unit: str = "replicates",
        clock: Callable[[], float] = time.monotonic,
    ) -> None:
        self.label = label
        self.total = int(total)
        self.unit = unit
        self._sinks = list(sinks)
        self._clock = clock
        self._start = clock()
        self._done = 0
        self._closed = False
        self._tell()

    @property
    def state(self) -> ProgressState:
        """The current snapshot."""
        return ProgressState(self.label, self._done, self.total, self._clock() - self._start, self.unit)

    def advance(self, units: int = 1) -> None:
        """Record ``units`` more finished units (the last one tells the final state, see :meth:`close`)."""
        self._done = min(self._done + int(units), self.total)
        if self._done >= self.total:
            self.close()
        else:
            self._tell()

    def close(self) -> None:
        """Tell the final state once (also when the work stopped early: the count then says how far it got)."""
        if self._closed:
            return
        self._closed = True
        state = self.state
        for sink in self._sinks:
            sink.close(state)

    def _tell(self) -> None:
        if not self._sinks:
            return
        state = self.state
        for sink in self._sinks:
            sink.show(state)

    def __enter__(self) -> Progress:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()
