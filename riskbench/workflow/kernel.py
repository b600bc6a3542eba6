"""The Jupyter kernel that runs the stage notebooks: always the current Python interpreter.

The notebooks must see the same riskbench and the same package versions as the command that runs them, so
the kernel spec ``riskbench`` is (re)registered inside the current environment when it is missing or points
at another interpreter. Nothing is downloaded.
"""

from __future__ import annotations

import os
import sys
import tempfile
from pathlib import Path

KERNEL_NAME = "riskbench"


def _spec_python(name: str) -> str | None:
    from jupyter_client.kernelspec import KernelSpecManager, NoSuchKernel

    try:
        return KernelSpecManager().get_kernel_spec(name).argv[0]
    except (NoSuchKernel, IndexError):
        return None


def ensure_kernel(name: str = KERNEL_NAME) -> str:
    """Make sure a kernel spec ``name`` runs ``sys.executable``; return the name to give papermill.

    The spec is installed under ``sys.prefix`` (the virtual environment); if that folder is not writable,
    under a private temporary folder added to ``JUPYTER_PATH`` for this process.
    """
    if _spec_python(name) == sys.executable:
        return name
    from ipykernel.kernelspec import install

    display = "riskbench (this environment)"
    try:
        install(kernel_name=name, display_name=display, prefix=sys.prefix)
    except OSError:
        private = tempfile.mkdtemp(prefix="riskbench-kernels-")
        install(kernel_name=name, display_name=display, prefix=private)
        os.environ["JUPYTER_PATH"] = os.pathsep.join(
            p for p in (os.path.join(private, "share", "jupyter"), os.environ.get("JUPYTER_PATH")) if p
        )
    if _spec_python(name) != sys.executable:
        raise RuntimeError(
            f"the Jupyter kernel {name!r} does not run {sys.executable}; remove the conflicting kernel spec "
            f"(jupyter kernelspec remove {name}) and retry"
        )
    return name


LAUNCHER = "riskbench.workflow.kernel_launch"


def local_socket_kernel_manager(folder: str, temp_folder: str | None = None) -> type:
    """A kernel manager class whose kernel opens no TCP port and keeps its temporary files in ``temp_folder``.

    The manager talks to the kernel over Unix-domain sockets in ``folder`` (ZeroMQ ``ipc`` transport: shell,
    iopub, stdin, control and heartbeat), writes the connection file there, and starts the kernel through
    :mod:`riskbench.workflow.kernel_launch`, which also moves ipykernel's subprocess-output pipe (TCP on
    127.0.0.1 by default) to a Unix-domain socket in ``folder`` and sets the kernel's temporary folder to
    ``temp_folder``. A run therefore opens no network port, not even on localhost. Keep ``folder`` short
    (socket names are limited to about 100 characters), private, and remove it after the run.
    """
    from jupyter_client.manager import AsyncKernelManager
    from traitlets import default

    temp = temp_folder or os.path.join(folder, "tmp")

    class LocalSocketKernelManager(AsyncKernelManager):
        @default("transport")
        def _default_transport(self) -> str:
            return "ipc"

        @default("ip")
        def _default_ip(self) -> str:
            return os.path.join(folder, "k")

        @default("connection_file")
        def _default_connection_file(self) -> str:
            return os.path.join(folder, "kernel.json")

        def format_kernel_cmd(self, extra_arguments: list[str] | None = None) -> list[str]:
            cmd = super().format_kernel_cmd(extra_arguments)
            try:
                at = cmd.index("ipykernel_launcher")
            except ValueError:
                raise RuntimeError(
                    f"the kernel spec does not start ipykernel_launcher ({cmd}); riskbench cannot "
                    "keep that kernel off the network"
                ) from None
            return [*cmd[:at], LAUNCHER, folder, temp, *cmd[at + 1 :]]

    return LocalSocketKernelManager


def kernel_pids(folder: str) -> list[int]:
    """Process ids of the kernels started with ``local_socket_kernel_manager(folder)``: from the pid files
    they write and, on Linux, from the command lines of running processes (a kernel still starting up)."""
    pids = set()
    for path in Path(folder).glob("kernel-*.pid"):
        try:
            pids.add(int(path.read_text()))
        except (OSError, ValueError):
            continue
    for cmdline in Path("/proc").glob("[0-9]*/cmdline"):
        try:
            args = cmdline.read_bytes().decode(errors="replace").split("\0")
        except OSError:
            continue
        if LAUNCHER in args and folder in args:
            pids.add(int(cmdline.parent.name))
    return sorted(pids)
