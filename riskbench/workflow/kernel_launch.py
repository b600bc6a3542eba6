"""Start the stage-notebook kernel with no TCP socket and with its temporary files inside the run.

``python -m riskbench.workflow.kernel_launch SOCKETS TEMP -f CONNECTION_FILE`` starts ipykernel after three
changes, made before any notebook code runs:

* ipykernel's output pipe for forked subprocesses, which it binds to a random TCP port on 127.0.0.1, is
  bound to a Unix-domain socket in ``SOCKETS`` instead (the kernel's own channels already use the ``ipc``
  transport, see :func:`riskbench.workflow.kernel.local_socket_kernel_manager`). The kernel then listens on
  no TCP or UDP port at all.
* ``TMPDIR`` and ``JOBLIB_TEMP_FOLDER`` point at ``TEMP`` (a folder inside the run's staging folder), so the
  DuckDB spill files of the cohort stage, joblib's memory-mapped arrays and any other temporary file of the
  stages are written there, and ``tempfile`` uses it too.
* The kernel process's own standard output and error go to /dev/null (cell output is unaffected).
* A watchdog thread removes ``TEMP`` and ends the kernel as soon as the process that started it is gone
  (runner killed), and a SIGTERM handler removes it before the kernel exits.

IPython's input history is switched off, so no notebook code is copied into the user's home folder.
"""

from __future__ import annotations

import os
import shutil
import signal
import sys
import tempfile
import threading
import time
from pathlib import Path

from riskbench.workflow.progress import tell_progress_to

WATCH_INTERVAL_S = 0.5


def bind_output_pipe_to_ipc(folder: str) -> None:
    """Make ipykernel's subprocess output pipe use a Unix-domain socket in ``folder`` instead of TCP."""
    import zmq
    from ipykernel import iostream
    from zmq.eventloop.zmqstream import ZMQStream

    thread_class = iostream.IOPubThread
    for name in ("_setup_pipe_in", "_setup_pipe_out", "_handle_pipe_msg"):
        if not hasattr(thread_class, name):  # a future ipykernel: refuse rather than open a TCP port
            raise RuntimeError(
                f"ipykernel {getattr(sys.modules.get('ipykernel'), '__version__', '?')} has no "
                f"IOPubThread.{name}; riskbench cannot keep the kernel off TCP with this version"
            )

    def setup_pipe_in(self) -> None:
        ctx = self.socket.context
        self._pipe_uuid = os.urandom(16)  # authenticates pipe messages, as ipykernel does
        pipe_in = ctx.socket(zmq.PULL)
        pipe_in.linger = 0
        self._pipe_endpoint = f"ipc://{os.path.join(folder, f'pipe-{os.getpid()}')}"
        pipe_in.bind(self._pipe_endpoint)
        self._pipe_in = ZMQStream(pipe_in, self.io_loop)
        self._pipe_in.on_recv(self._handle_pipe_msg)

    def setup_pipe_out(self):
        ctx = zmq.Context()
        pipe_out = ctx.socket(zmq.PUSH)
        pipe_out.linger = 3000
        pipe_out.connect(self._pipe_endpoint)
        return ctx, pipe_out

    thread_class._setup_pipe_in = setup_pipe_in  # type: ignore[method-assign]  # the patch this module exists for
    thread_class._setup_pipe_out = setup_pipe_out  # type: ignore[method-assign]


def quiet_process_output() -> None:
    """Send the kernel process's own standard output and error (ipykernel's log, C libraries) to /dev/null.

    What the notebook cells print reaches the executed notebook through the kernel's channels, not these
    file descriptors; without this, a kernel being shut down after Ctrl-C writes its log over the runner's
    one-line message, and a crashing library could print raw values on the terminal.
    """
    devnull = os.open(os.devnull, os.O_WRONLY)
    for fd in (1, 2):
        os.dup2(devnull, fd)
    os.close(devnull)


def keep_temporary_files_in(folder: str) -> None:
    """Send every temporary file of this process and its children to ``folder``."""
    Path(folder).mkdir(mode=0o700, exist_ok=True)  # never its parents: a run already cleaned up stays gone
    for name in ("TMPDIR", "TEMP", "TMP", "JOBLIB_TEMP_FOLDER"):
        os.environ[name] = folder
    tempfile.tempdir = folder


def remove_temporary_files(folder: str) -> None:
    shutil.rmtree(folder, ignore_errors=True)


def watch_parent(folder: str, parent: int) -> None:
    """Remove ``folder`` and end the kernel once ``parent`` (the runner) is gone."""

    def watch() -> None:
        while os.getppid() == parent:
            time.sleep(WATCH_INTERVAL_S)
        remove_temporary_files(folder)
        os._exit(1)

    threading.Thread(target=watch, name="riskbench-parent-watch", daemon=True).start()


def main(argv: list[str]) -> None:
    if len(argv) < 2:
        raise SystemExit("usage: python -m riskbench.workflow.kernel_launch SOCKETS TEMP -f CONNECTION_FILE")
    sockets, temp, rest = argv[0], argv[1], argv[2:]
    watch_parent(temp, os.getppid())  # first: a runner gone during start-up ends this kernel too

    def on_term(_signum: int, _frame: object) -> None:
        remove_temporary_files(temp)
        os._exit(128 + signal.SIGTERM)

    signal.signal(signal.SIGTERM, on_term)
    Path(sockets, f"kernel-{os.getpid()}.pid").write_text(str(os.getpid()))
    quiet_process_output()
    keep_temporary_files_in(temp)
    tell_progress_to(temp)  # the runner relays it to its terminal
    bind_output_pipe_to_ipc(sockets)
    from ipykernel.kernelapp import IPKernelApp

    IPKernelApp.launch_instance(argv=[*rest, "--HistoryManager.enabled=False"])


if __name__ == "__main__":
    main(sys.argv[1:])
