"""The tables one stage hands the next (``data/<name>.parquet``), as file-backed objects for replicate workers.

The cohort stage writes its tables once to Parquet; the validation and comparison stages resample them.
:func:`stage_tables` gives them as a :class:`~riskbench.validation.table_files.TableFiles` mapping and
:func:`stage_source` as a resampling source, both of which reach local or Dask workers as file references
(path and SHA-256) that each worker process reads once, instead of frames pickled into every task.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

from riskbench.report.outputs import DATA, output_path
from riskbench.validation.sources import PrecomputedTables
from riskbench.validation.table_files import TableFiles, table_source

#: The cohort stage's tables that resampling reads.
RESAMPLED_TABLES = ("counting_process", "landmark_stack")


def stage_tables(run_dir: str | Path, names: Sequence[str] = RESAMPLED_TABLES) -> TableFiles:
    """``name -> table`` for ``data/<name>.parquet`` of the run, read when first used.

    Raises
    ------
    FileNotFoundError
        A table is missing (the earlier stages have not run); the message says which stage to run.
    """
    paths = {}
    for name in names:
        path = output_path(run_dir, DATA, name, ".parquet")
        if not path.is_file():
            raise FileNotFoundError(
                f"{path} is missing: run the earlier stage notebooks of this run first (in order 01..04)"
            )
        paths[name] = path
    return TableFiles.of(paths)


def stage_source(run_dir: str | Path) -> PrecomputedTables:
    """The landmark stack and counting-process table of the run as a resampling source (cut by patient)."""
    return table_source(stage_tables(run_dir))
