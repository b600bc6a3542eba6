"""Run independent replicates serially, on local processes (joblib) or on a Dask cluster.

Each replicate receives its own :class:`numpy.random.SeedSequence`, spawned from one seed, and
results come back in replicate order, so serial, local-parallel and Dask runs give identical numbers.
"""

from __future__ import annotations

import sys
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any, TypeVar

import numpy as np
from tqdm.auto import tqdm

from riskbench.validation.errors import ValidationInputError

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
        Address of a running Dask distributed scheduler, e.g. ``"tcp://10.0.0.5:8786"``; when set,
        replicates run on that cluster.
    progress : bool, optional
        Show a progress bar; by default only when standard error is an interactive terminal.
    connect_timeout_s : float, default 20
        Seconds to wait for the Dask scheduler before giving up.
    """

    n_jobs: int = 1
    scheduler_address: str | None = None
    progress: bool | None = None
    connect_timeout_s: float = 20.0

    def __post_init__(self) -> None:
        if not isinstance(self.n_jobs, (int, np.integer)) or self.n_jobs == 0 or self.n_jobs < -1:
            raise ValidationInputError(f"n_jobs must be a positive integer or -1 (all cores); got {self.n_jobs!r}.")


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


def _show_progress(config: ExecutionConfig) -> bool:
    if config.progress is not None:
        return config.progress
    return bool(getattr(sys.stderr, "isatty", lambda: False)())


def run_replicates(
    func: ReplicateFunction,
    shared: Any,
    seed: int,
    n: int,
    config: ExecutionConfig | None = None,
    *,
    description: str = "replicates",
) -> list[Any]:
    """Call ``func(shared, i, seed_i)`` for i = 0..n-1 and return the results in order.

    Parameters
    ----------
    func : callable
        A module-level function (it must pickle for process and cluster workers) taking the shared
        payload, the replicate index and the replicate's SeedSequence.
    shared : object
        Read-only payload used by every replicate (tables, specs); sent once per worker for Dask
        (scattered with broadcast) and once per task batch for joblib.
    seed : int
        Seed from which the replicate seeds are spawned.
    n : int
        Number of replicates.
    config : ExecutionConfig, optional
        Serial by default.
    description : str
        Label of the progress bar.

    Returns
    -------
    list
        ``[func(shared, 0, s0), func(shared, 1, s1), ...]``.
    """
    config = config or ExecutionConfig()
    seeds = replicate_seeds(seed, n)
    show = _show_progress(config)
    if config.scheduler_address is not None:
        return _run_dask(func, shared, seeds, config, show, description)
    if config.n_jobs == 1:
        return [
            _single_threaded(func, shared, i, s)
            for i, s in tqdm(list(enumerate(seeds)), desc=description, disable=not show)
        ]
    from joblib import Parallel, delayed

    parallel = Parallel(n_jobs=config.n_jobs, backend="loky", return_as="generator")
    results = parallel(delayed(_single_threaded)(func, shared, i, s) for i, s in enumerate(seeds))
    return list(tqdm(results, total=n, desc=description, disable=not show))


def _run_dask(
    func: ReplicateFunction,
    shared: Any,
    seeds: Sequence[np.random.SeedSequence],
    config: ExecutionConfig,
    show: bool,
    description: str,
) -> list[Any]:
    try:
        from distributed import Client
    except ImportError as exc:  # pragma: no cover - dask is an optional extra
        raise ValidationInputError(
            "a Dask scheduler address was configured but dask.distributed is not installed; "
            "install the 'cluster' extra (pip install 'riskbench[cluster]') or unset scheduler_address."
        ) from exc
    address = config.scheduler_address
    try:
        client = Client(address, set_as_default=False, timeout=f"{config.connect_timeout_s}s")
    except (OSError, TimeoutError) as exc:
        raise ValidationInputError(
            f"cannot reach the Dask scheduler at {address!r} ({exc}); check the address and that the "
            "scheduler runs, or unset scheduler_address to run on local processes."
        ) from exc
    with client:
        shared_future = client.scatter(shared, broadcast=True)
        futures = [
            client.submit(_single_threaded, func, shared_future, i, s, pure=False)
            for i, s in enumerate(seeds)
        ]
        results = []
        # Gather in replicate order; the bar advances as each finishes in that order.
        for future in tqdm(futures, total=len(futures), desc=description, disable=not show):
            results.append(client.gather(future))
        return results
