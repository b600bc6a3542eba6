"""Tables handed to replicate workers as Parquet files: sent by path, read once per worker process.

A resampling run sends every worker the same read-only tables (the landmark stack, the counting-process
table). Pickling those frames into each task costs time and memory in proportion to the cohort; instead the
objects here travel as a file reference (path, size, SHA-256) and each worker process reads the file the
first time it needs it and keeps it for the following tasks (:func:`read_table`). The digest is checked when a
process reads the file, so a worker never computes on a table other than the one the run wrote, and results
stay identical to a serial run.

* :class:`TableFile` -- one Parquet file.
* :class:`TableFiles` -- a read-only mapping ``name -> DataFrame`` backed by table files.
* :class:`ParquetTables` -- a :class:`~riskbench.validation.sources.PrecomputedTables` source backed by
  table files (the bootstrap and comparison plans cut it by patient).

Workers must see the files at the same path: on one machine always; on a cluster the run folder has to be on
storage every worker mounts at that path (:func:`table_problems` says which are not).
"""

from __future__ import annotations

import hashlib
import os
import threading
from collections import OrderedDict
from collections.abc import Iterator, Mapping
from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from riskbench.validation.errors import ValidationInputError
from riskbench.validation.sources import PrecomputedTables

#: Tables a worker process keeps in memory (least recently used beyond that are dropped).
CACHED_TABLES = 4
_CHUNK = 1 << 20
_SEARCHED_CHILDREN = 64  # a payload's long lists hold ids or splits, not tables


def file_digest(path: str | os.PathLike[str]) -> str:
    """SHA-256 of a file's bytes (hex)."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(_CHUNK), b""):
            digest.update(block)
    return digest.hexdigest()


@dataclass(frozen=True)
class TableFile:
    """A Parquet file holding one table, identified by its absolute path, size (bytes) and SHA-256."""

    path: str
    size: int
    sha256: str

    @classmethod
    def of(cls, path: str | os.PathLike[str]) -> TableFile:
        """The reference of an existing Parquet file (reads it once for the digest)."""
        full = Path(path).resolve()
        if not full.is_file():
            raise ValidationInputError(
                f"{full} is not a file: the replicate tables are read from the Parquet files "
                "the cohort stage writes (data/*.parquet); run that stage first."
            )
        return cls(str(full), full.stat().st_size, file_digest(full))

    def problem(self) -> str | None:
        """Why this process cannot use the file (missing, other size); None when it can (the digest is checked
        on reading)."""
        try:
            size = os.stat(self.path).st_size
        except OSError as exc:
            return f"{self.path} cannot be read here ({exc.strerror or exc})"
        if size != self.size:
            return f"{self.path} has {size} bytes here, not the {self.size} the run wrote"
        return None

    def read(self) -> pd.DataFrame:
        """The table (read once per process, see :func:`read_table`)."""
        return read_table(self)


_cache: OrderedDict[TableFile, pd.DataFrame] = OrderedDict()
_lock = threading.Lock()


def read_table(table: TableFile) -> pd.DataFrame:
    """Read a table file, checking its digest, and keep it for later calls in this process.

    Callers must not modify the returned frame (every replicate function treats its shared tables as
    read-only).
    """
    with _lock:
        if table in _cache:
            _cache.move_to_end(table)
            return _cache[table]
        problem = table.problem()
        if problem is None and file_digest(table.path) != table.sha256:
            problem = f"{table.path} differs from the file the run wrote (SHA-256 mismatch)"
        if problem is not None:
            raise ValidationInputError(
                f"{problem}; the replicate tables must stay unchanged while a run uses them, and every worker "
                "must see the run folder at the same path (on a cluster: storage mounted on every worker)."
            )
        frame = pd.read_parquet(table.path)
        _cache[table] = frame
        while len(_cache) > CACHED_TABLES:
            _cache.popitem(last=False)
        return frame


def clear_table_cache() -> None:
    """Forget the tables this process has read (they are read again on the next use)."""
    with _lock:
        _cache.clear()


class TableFiles(Mapping[str, pd.DataFrame]):
    """A read-only mapping ``name -> DataFrame`` whose values are read from table files when first used.

    Pickled (for a worker) it is only the file references; each worker process reads a table once.

    Parameters
    ----------
    files : mapping of str to TableFile
    """

    def __init__(self, files: Mapping[str, TableFile]) -> None:
        self.files: dict[str, TableFile] = dict(files)

    @classmethod
    def of(cls, paths: Mapping[str, str | os.PathLike[str]]) -> TableFiles:
        """From ``name -> Parquet path``."""
        return cls({name: TableFile.of(path) for name, path in paths.items()})

    def __getitem__(self, name: str) -> pd.DataFrame:
        return read_table(self.files[name])

    def __iter__(self) -> Iterator[str]:
        return iter(self.files)

    def __len__(self) -> int:
        return len(self.files)

    def __reduce__(self) -> tuple[type[TableFiles], tuple[dict[str, TableFile]]]:
        return (TableFiles, (self.files,))


_sources: dict[tuple[TableFile | None, ...], ParquetTables] = {}


def parquet_tables(landmark_stack: TableFile, counting_process: TableFile | None = None) -> ParquetTables:
    """The :class:`ParquetTables` of these files, built once per process (unpickling calls this)."""
    key = (landmark_stack, counting_process)
    with _lock:
        source = _sources.get(key)
    if source is None:
        source = ParquetTables(landmark_stack, counting_process)
        with _lock:
            _sources.clear()  # one run's source at a time: a worker serving several runs keeps the latest
            _sources[key] = source
    return source


class ParquetTables(PrecomputedTables):
    """A :class:`~riskbench.validation.sources.PrecomputedTables` source whose tables live in Parquet files.

    It cuts the tables by patient exactly as ``PrecomputedTables`` does (same rows, same order), so every
    replicate gives the same numbers; pickled for a worker it is only the two file references, and each
    worker process reads the files once (:func:`parquet_tables`).

    Parameters
    ----------
    landmark_stack : TableFile
        The landmark stack of the whole cohort.
    counting_process : TableFile, optional
        The counting-process table of the whole cohort (needed for the ``"time_varying_cox"`` family and for
        each patient's status at the end of follow-up).
    """

    def __init__(self, landmark_stack: TableFile, counting_process: TableFile | None = None) -> None:
        self.files = (landmark_stack, counting_process)
        cp = counting_process.read() if counting_process is not None else None
        super().__init__(landmark_stack.read(), cp)

    def __reduce__(self) -> tuple[object, tuple[TableFile, TableFile | None]]:
        return (parquet_tables, self.files)


def table_source(tables: Mapping[str, pd.DataFrame]) -> PrecomputedTables:
    """The resampling source of ``landmark_stack`` and ``counting_process`` in ``tables``: a
    :class:`ParquetTables` (sent to workers by path) when ``tables`` is a :class:`TableFiles`, else a
    :class:`~riskbench.validation.sources.PrecomputedTables` of the frames."""
    if isinstance(tables, TableFiles):
        return parquet_tables(tables.files["landmark_stack"], tables.files.get("counting_process"))
    return PrecomputedTables(tables["landmark_stack"], tables.get("counting_process"))


def referenced_tables(payload: object, depth: int = 4) -> list[TableFile]:
    """The table files a replicate payload refers to: :class:`TableFile`, :class:`TableFiles` and
    :class:`ParquetTables` found inside dicts, lists, tuples, dataclasses and plain objects, ``depth`` levels
    deep (frames and arrays are not searched)."""
    found: list[TableFile] = []
    if isinstance(payload, TableFile):
        found.append(payload)
    elif isinstance(payload, TableFiles):
        found += list(payload.files.values())
    elif isinstance(payload, ParquetTables):
        found += [f for f in payload.files if f is not None]
    elif depth > 0 and not isinstance(payload, (pd.DataFrame, pd.Series, str, bytes)):
        if isinstance(payload, Mapping):
            children = list(payload.values())
        elif isinstance(payload, (list, tuple)):
            children = list(payload)
        else:
            children = list(getattr(payload, "__dict__", {}).values())
            children += [getattr(payload, n) for n in getattr(payload, "__dataclass_fields__", {})]
        for child in children[:_SEARCHED_CHILDREN]:
            found += referenced_tables(child, depth - 1)
    return list(dict.fromkeys(found))


def table_problems(tables: list[TableFile]) -> list[str]:
    """Problems this process has with the given table files (run on each worker before the replicates)."""
    return [p for p in (t.problem() for t in tables) if p is not None]
