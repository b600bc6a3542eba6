"""Run independent replicates serially, on local processes (joblib) or on a Dask cluster.

Each replicate receives its own :class:`numpy.random.SeedSequence`, spawned from one seed, and
results come back in replicate order, so serial, local-parallel and Dask runs give identical numbers.
Replicates are grouped into tasks of consecutive indices (``replicates_per_task``; by default about four
tasks per worker, :func:`task_size`): enough tasks to keep every worker busy to the end, few enough that each
outweighs its dispatch. The grouping never changes a result, because replicate i always gets seed i.

Scaling out on Dask: the tables every replicate reads are handed over as Parquet files
(:mod:`riskbench.validation.table_files`): the task payload carries only their paths and digests, each worker
process reads them once, and before the first task every worker is asked whether it can read them. Progress
(replicates done, elapsed, time left) is reported as tasks finish (:mod:`riskbench.progress`).

Where the data goes
-------------------
Serial and joblib runs stay on this machine: joblib's loky workers are local processes fed through pipes,
and the arrays they share are memory-mapped in joblib's temporary folder (``JOBLIB_TEMP_FOLDER``; the
notebook runner points it inside the run's staging folder). Dask is contacted only when a scheduler
address is configured. A scheduler that is not on this machine (not a loopback address) is refused
unless ``allow_remote_scheduler`` is true *and* the three TLS files are given; the connection then uses
``tls://`` with Dask's ``Security(require_encryption=True)``. A loopback scheduler whose workers run on
other machines is refused the same way before any data is sent (:func:`check_scheduler`,
:func:`check_workers`).
"""

from __future__ import annotations

import ipaddress
import math
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any, TypeVar
from urllib.parse import urlsplit

import numpy as np

from riskbench.progress import Progress, default_sinks
from riskbench.validation.errors import ValidationInputError
from riskbench.validation.table_files import referenced_tables, table_problems

R = TypeVar("R")

ReplicateFunction = Callable[[Any, int, np.random.SeedSequence], Any]


@dataclass(frozen=True)
class ExecutionConfig:
    """Where replicates run.

    Attributes
    ----------
    n_jobs : int, default 1
        Local worker processes (joblib, loky backend); 1 runs in this process, -1 uses every core.
        Ignored when ``scheduler_address`` is set.
    scheduler_address : str, optional
        Address of a running Dask distributed scheduler, e.g. ``"tcp://127.0.0.1:8786"`` or
        ``"tls://10.0.0.5:8786"``; when set, replicates run on that cluster (see :func:`check_scheduler`).
    progress : bool, optional
        Report progress (replicates done, elapsed, time left; :func:`riskbench.progress.default_sinks`): by
        default in the notebook when run in one, on standard error when it is a terminal, and to the
        runner's progress file when it set one; False for silence; True also on a standard error that is
        not a terminal.
    replicates_per_task : int, optional
        Replicates grouped into one task; by default about four tasks per worker (:func:`task_size`).
    connect_timeout_s : float, default 20
        Seconds to wait for the Dask scheduler before giving up.
    allow_remote_scheduler : bool, default False
        Allow a scheduler or workers that are not on this machine (then TLS is required).
    tls_ca_file, tls_client_cert_file, tls_client_key_file : str, optional
        PEM files for Dask's TLS: the certificate authority, this client's certificate and its key.
    """

    n_jobs: int = 1
    scheduler_address: str | None = None
    progress: bool | None = None
    connect_timeout_s: float = 20.0
    allow_remote_scheduler: bool = False
    tls_ca_file: str | None = None
    tls_client_cert_file: str | None = None
    tls_client_key_file: str | None = None
    replicates_per_task: int | None = None

    def __post_init__(self) -> None:
        if not isinstance(self.n_jobs, (int, np.integer)) or self.n_jobs == 0 or self.n_jobs < -1:
            raise ValidationInputError(f"n_jobs must be a positive integer or -1 (all cores); got {self.n_jobs!r}.")
        per_task = self.replicates_per_task
        if per_task is not None and (not isinstance(per_task, (int, np.integer)) or per_task < 1):
            raise ValidationInputError(f"replicates_per_task must be a positive integer; got {per_task!r}.")

    @classmethod
    def from_plan(cls, plan: Any, *, progress: bool | None = None) -> ExecutionConfig:
        """The execution settings of an ``[execution]`` plan (``workers``, ``scheduler_address``,
        ``allow_remote_scheduler``, ``tls_ca_file``, ``tls_client_cert_file``, ``tls_client_key_file``,
        ``replicates_per_task``)."""

        def file(key: str) -> str | None:
            value = getattr(plan, key, None)
            return str(value) if value else None

        return cls(
            n_jobs=int(getattr(plan, "workers", 1)),
            scheduler_address=getattr(plan, "scheduler_address", None) or None,
            progress=progress,
            allow_remote_scheduler=bool(getattr(plan, "allow_remote_scheduler", False)),
            replicates_per_task=getattr(plan, "replicates_per_task", None) or None,
            tls_ca_file=file("tls_ca_file"),
            tls_client_cert_file=file("tls_client_cert_file"),
            tls_client_key_file=file("tls_client_key_file"),
        )


TLS_KEYS: tuple[str, ...] = ("tls_ca_file", "tls_client_cert_file", "tls_client_key_file")
SCHEMES: tuple[str, ...] = ("tcp", "tls")


def scheduler_host(address: str) -> tuple[str, str]:
    """``(scheme, host)`` of a Dask address such as ``tls://10.0.0.5:8786`` or ``127.0.0.1:8786``
    (scheme ``tcp`` when none is written); raises ValueError for an address that cannot be parsed."""
    text = address.strip()
    parts = urlsplit(text if "://" in text else f"tcp://{text}")
    if not parts.hostname:
        raise ValueError(address)
    parts.port  # noqa: B018 - raises ValueError for a port that is not a number
    return parts.scheme.lower(), parts.hostname


def is_loopback(host: str) -> bool:
    """True for ``localhost`` and loopback IP addresses (127.0.0.0/8, ::1): traffic stays on this machine."""
    if host.lower() == "localhost":
        return True
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return False


def check_scheduler(plan: Any) -> list[str]:
    """Problems with the Dask settings of an ``[execution]`` plan; empty when they may be used.

    Rules: no address means local processes (Dask is not contacted). The address must be ``tcp://`` or
    ``tls://`` host:port. An address that is not loopback needs ``allow_remote_scheduler = true``, the
    ``tls://`` scheme and the three TLS files (existing files), because patient-level tables would leave
    this machine. Each problem names the ``[execution]`` key and the fix.
    """
    address = (getattr(plan, "scheduler_address", None) or "").strip()
    if not address:
        return []
    try:
        scheme, host = scheduler_host(address)
    except ValueError:
        return [
            f"[execution] scheduler_address = {address!r} is not a Dask address; write tcp://HOST:PORT for a "
            "scheduler on this machine or tls://HOST:PORT, or leave it empty to run on local processes"
        ]
    if scheme not in SCHEMES:
        return [
            f"[execution] scheduler_address = {address!r} uses {scheme}://, which riskbench does not use; "
            "write tcp://HOST:PORT (this machine) or tls://HOST:PORT"
        ]
    problems: list[str] = []
    files = {k: getattr(plan, k, None) for k in TLS_KEYS}
    if not is_loopback(host):
        if not getattr(plan, "allow_remote_scheduler", False):
            problems.append(
                f"[execution] scheduler_address = {address!r} is not on this machine: patient-level tables would "
                "be sent to it; set allow_remote_scheduler = true and give tls_ca_file, tls_client_cert_file and "
                "tls_client_key_file, or leave scheduler_address empty to run on local processes"
            )
        if scheme != "tls":
            problems.append(
                f"[execution] scheduler_address = {address!r}: a scheduler on another machine must be "
                f"reached over TLS; write tls://{address.split('://')[-1]}"
            )
        missing = [k for k, v in files.items() if not v]
        if missing:
            problems.append(
                f"[execution] {', '.join(missing)} not set: a scheduler on another machine needs all "
                "three TLS files (certificate authority, client certificate, client key)"
            )
    problems += [
        f"[execution] {k} = {str(v)!r} is not a readable file; give the path of the PEM file"
        for k, v in files.items()
        if v and not Path(v).is_file()
    ]
    if scheme == "tls" and is_loopback(host) and not all(files.values()):
        problems.append(
            f"[execution] scheduler_address = {address!r} uses TLS: give tls_ca_file, "
            "tls_client_cert_file and tls_client_key_file"
        )
    return problems


def check_workers(worker_addresses: Iterable[str], allow_remote: bool) -> list[str]:
    """Problems with the workers a scheduler reports: a worker off this machine needs the remote opt-in."""
    if allow_remote:
        return []
    remote = sorted({host for a in worker_addresses for _, host in [scheduler_host(a)] if not is_loopback(host)})
    if not remote:
        return []
    return [
        f"the Dask scheduler has workers on other machines ({', '.join(remote)}): patient-level tables would be "
        "sent to them; set [execution] allow_remote_scheduler = true with the TLS files, or use a scheduler "
        "whose workers run on this machine"
    ]


def data_leaves_machine(plan: Any) -> bool:
    """True when the plan sends replicate data to a Dask scheduler that is not on this machine."""
    address = (getattr(plan, "scheduler_address", None) or "").strip()
    if not address:
        return False
    try:
        return not is_loopback(scheduler_host(address)[1])
    except ValueError:
        return True


def execution_statement(plan: Any) -> str:
    """One sentence for the report and the manifest: where the resampling replicates ran."""
    address = (getattr(plan, "scheduler_address", None) or "").strip()
    if not address:
        return "no: every step ran on this machine (no network connection was opened)"
    if data_leaves_machine(plan):
        return (
            f"yes: resampling replicates (patient-level tables under run pseudonyms) were sent over TLS to the "
            f"Dask scheduler at {address} and its workers"
        )
    return (
        f"no: resampling replicates ran on the Dask scheduler at {address} on this machine (loopback), "
        "whose workers were checked to be on this machine"
    )


def replicate_seeds(seed: int, n: int) -> list[np.random.SeedSequence]:
    """Independent seeds for ``n`` replicates, derived from one seed.

    Parameters
    ----------
    seed : int
        The run's seed (non-negative).
    n : int
        Number of replicates.

    Returns
    -------
    list of numpy.random.SeedSequence
        ``SeedSequence(seed).spawn(n)``: replicate i always gets the same stream whatever runs it.
    """
    if n < 0:
        raise ValidationInputError(f"the number of replicates must be non-negative; got {n}.")
    if not isinstance(seed, (int, np.integer)) or seed < 0:
        raise ValidationInputError(f"seed must be a non-negative integer; got {seed!r}.")
    return np.random.SeedSequence(int(seed)).spawn(n)


def seed_to_int(seq: np.random.SeedSequence) -> int:
    """A 31-bit integer seed from a SeedSequence, for estimators that take ``random_state=int``."""
    return int(seq.generate_state(1, dtype=np.uint32)[0] & 0x7FFFFFFF)


def _single_threaded(func: ReplicateFunction, shared: Any, index: int, seed: np.random.SeedSequence) -> Any:
    """Run one replicate with BLAS/OpenMP limited to one thread.

    Worker processes of joblib and Dask already run their numerical libraries single-threaded; doing the
    same in the serial path makes every floating-point reduction happen in the same order, so results are
    bit-for-bit identical whatever executes them (and parallel workers do not oversubscribe the cores).
    """
    from threadpoolctl import threadpool_limits

    with threadpool_limits(limits=1):
        return func(shared, index, seed)


def replicate_chunks(n: int, size: int) -> list[range]:
    """Replicate indices 0..n-1 cut into consecutive tasks of ``size`` (the last may be shorter)."""
    if size < 1:
        raise ValidationInputError(f"replicates per task must be at least 1; got {size}.")
    return [range(start, min(start + size, n)) for start in range(0, n, size)]


def task_size(n: int, workers: int, per_task: int | None = None) -> int:
    """Replicates per task: ``per_task`` when given, else about :data:`TASKS_PER_WORKER` tasks per worker.

    Several tasks per worker keep every worker busy to the end when replicates differ in cost (a worker that
    finishes early takes the next task) while each task still does enough work to outweigh its dispatch.
    """
    if per_task is not None:
        return max(int(per_task), 1)
    return max(math.ceil(n / (max(workers, 1) * TASKS_PER_WORKER)), 1)


#: Tasks per worker when the configuration does not fix the replicates per task.
TASKS_PER_WORKER = 4


def _run_task(func: ReplicateFunction, shared: Any, task: Sequence[tuple[int, np.random.SeedSequence]]) -> list[Any]:
    """Run the replicates of one task in order (each single-threaded, see :func:`_single_threaded`)."""
    return [_single_threaded(func, shared, i, s) for i, s in task]


#: Replicates to run: each index with its seed.
Numbered = Sequence[tuple[int, np.random.SeedSequence]]


def _tasks(numbered: Numbered, size: int) -> list[list[tuple[int, np.random.SeedSequence]]]:
    return [[numbered[k] for k in chunk] for chunk in replicate_chunks(len(numbered), size)]


def run_replicates(
    func: ReplicateFunction,
    shared: Any,
    seed: int,
    n: int,
    config: ExecutionConfig | None = None,
    *,
    description: str = "replicates",
    indices: Sequence[int] | None = None,
) -> list[Any]:
    """Call ``func(shared, i, seed_i)`` for i = 0..n-1 (or for the given ``indices`` only) and return the
    results in order.

    Replicates are grouped into tasks of consecutive indices (``config.replicates_per_task``, by default
    about four tasks per worker); replicate i always receives seed i, so the results do not depend on the
    grouping, the number of workers or the order in which tasks finish.

    Parameters
    ----------
    func : callable
        A module-level function (it must pickle for process and cluster workers) taking the shared
        payload, the replicate index and the replicate's SeedSequence.
    shared : object
        Read-only payload used by every replicate (specs, plans and the tables). Tables held as
        :class:`~riskbench.validation.table_files.TableFiles` or
        :class:`~riskbench.validation.table_files.ParquetTables` travel as file references and are read
        once per worker process; anything else is pickled once per task for joblib and sent once per worker
        for Dask (scattered with broadcast).
    seed : int
        Seed from which the replicate seeds are spawned.
    n : int
        Number of replicates.
    config : ExecutionConfig, optional
        Serial by default.
    description : str
        What the replicates do, for the progress report (:mod:`riskbench.progress`).
    indices : sequence of int, optional
        Run only these replicates of the n (each still with its own seed i), e.g. those an earlier stage did
        not already compute.

    Returns
    -------
    list
        ``[func(shared, 0, s0), func(shared, 1, s1), ...]`` (with ``indices``: one result per index, in
        increasing order).
    """
    config = config or ExecutionConfig()
    seeds = replicate_seeds(seed, n)
    chosen = range(n) if indices is None else sorted(set(int(i) for i in indices))
    if chosen and not (chosen[0] >= 0 and chosen[-1] < n):
        raise ValidationInputError(f"replicate indices must lie in 0..{n - 1}; got {chosen[0]}..{chosen[-1]}.")
    numbered = [(i, seeds[i]) for i in chosen]
    if not numbered:
        return []
    with Progress(description, len(numbered), default_sinks(config.progress)) as progress:
        if config.scheduler_address is not None:
            return _run_dask(func, shared, numbered, config, progress)
        if config.n_jobs == 1:
            results = []
            for i, s in numbered:
                results.append(_single_threaded(func, shared, i, s))
                progress.advance()
            return results
        return _run_joblib(func, shared, numbered, config, progress)


def _run_joblib(
    func: ReplicateFunction,
    shared: Any,
    numbered: Numbered,
    config: ExecutionConfig,
    progress: Progress,
) -> list[Any]:
    from joblib import Parallel, cpu_count, delayed

    workers = cpu_count() if config.n_jobs == -1 else config.n_jobs
    tasks = _tasks(numbered, task_size(len(numbered), workers, config.replicates_per_task))
    parallel = Parallel(n_jobs=config.n_jobs, backend="loky", return_as="generator")
    results: list[Any] = []
    for part in parallel(delayed(_run_task)(func, shared, task) for task in tasks):
        results += part
        progress.advance(len(part))
    return results


def _run_dask(
    func: ReplicateFunction,
    shared: Any,
    numbered: Numbered,
    config: ExecutionConfig,
    progress: Progress,
) -> list[Any]:
    try:
        from distributed import Client, as_completed
    except ImportError as exc:  # pragma: no cover - dask is an optional extra
        raise ValidationInputError(
            "a Dask scheduler address was configured but dask.distributed is not installed; "
            "install the 'cluster' extra (pip install 'riskbench[cluster]') or unset scheduler_address."
        ) from exc
    problems = check_scheduler(config)
    if problems:
        raise ValidationInputError("; ".join(problems))
    address = config.scheduler_address or ""
    security = None
    if scheduler_host(address)[0] == "tls":  # check_scheduler made sure the three files are given
        from distributed.security import Security

        security = Security(
            tls_ca_file=config.tls_ca_file,
            tls_client_cert=config.tls_client_cert_file,
            tls_client_key=config.tls_client_key_file,
            require_encryption=True,
        )
    try:
        client = Client(address, set_as_default=False, timeout=f"{config.connect_timeout_s}s", security=security)
    except (OSError, TimeoutError) as exc:
        raise ValidationInputError(
            f"cannot reach the Dask scheduler at {address!r} ({exc}); check the address and that the "
            "scheduler runs, or unset scheduler_address to run on local processes."
        ) from exc
    with client:
        workers = client.scheduler_info().get("workers", {})
        problems = check_workers(workers, config.allow_remote_scheduler) or _worker_table_problems(client, shared)
        if problems:
            raise ValidationInputError("; ".join(problems))
        tasks = _tasks(numbered, task_size(len(numbered), len(workers), config.replicates_per_task))
        shared_future = client.scatter(shared, broadcast=True)  # small: tables travel as file references
        futures = {client.submit(_run_task, func, shared_future, task, pure=False): k for k, task in enumerate(tasks)}
        parts: dict[int, list[Any]] = {}
        with client.as_current():  # as_completed looks for the client of this context
            for future in as_completed(futures):
                parts[futures[future]] = part = future.result()
                progress.advance(len(part))
        return [result for k in range(len(tasks)) for result in parts[k]]


def _worker_table_problems(client: Any, shared: Any) -> list[str]:
    """Table files of ``shared`` that some worker cannot read at their path (checked before any task)."""
    tables = referenced_tables(shared)
    if not tables:
        return []
    answers = client.run(table_problems, tables)
    return [
        f"Dask worker {worker}: {problem}; put the run folder on storage every worker mounts at the same "
        "path, or run on local processes (unset [execution] scheduler_address)"
        for worker, problems in sorted(answers.items())
        for problem in problems
    ]
