"""Writing figures and tables into a run folder: atomically, byte-for-byte reproducibly and safely.

Every file is first written under a temporary name in the same folder and then renamed into place, so a
reader (or a restarted run) never sees half a file. Figures are saved as PNG and SVG without time stamps or
random element ids, so the same inputs give the same bytes.

No user string is trusted: a file name is derived from the name it is given (:func:`safe_file_stem`) and
the resulting path is checked to lie inside the run folder; every text cell of a CSV table that a
spreadsheet would run as a formula is neutralised (:func:`neutralise_csv_cell`).
"""

from __future__ import annotations

import hashlib
import io
import os
import re
import tempfile
from dataclasses import dataclass
from pathlib import Path

import matplotlib

matplotlib.use("Agg")  # figures are files; never open a window
import matplotlib.pyplot as plt
import pandas as pd

FIGURES = "figures"
TABLES = "tables"
DATA = "data"

# Fixed salt: matplotlib otherwise draws random ids into SVG files.
matplotlib.rcParams["svg.hashsalt"] = "riskbench"
_PNG_META = {"Software": None}
_UMASK = os.umask(0)
os.umask(_UMASK)
_SVG_META = {"Date": None, "Creator": None}


def atomic_write_bytes(path: str | Path, data: bytes) -> Path:
    """Write ``data`` to ``path`` through a temporary file in the same folder and rename it into place."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
        os.chmod(tmp, 0o666 & ~_UMASK)  # mkstemp makes 0600; give the file the usual permissions
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return path


def atomic_write_text(path: str | Path, text: str) -> Path:
    """Write UTF-8 text atomically (see :func:`atomic_write_bytes`)."""
    return atomic_write_bytes(path, text.encode("utf-8"))


@dataclass(frozen=True)
class FigureFiles:
    """Where one figure was written."""

    name: str
    png: Path
    svg: Path


def figure_png_bytes(fig: plt.Figure, dpi: int = 110) -> bytes:
    """The figure as PNG bytes (no time stamp)."""
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi, bbox_inches="tight", metadata=_PNG_META)
    return buf.getvalue()


#: Longest file stem derived from a name (a hash suffix included).
MAX_STEM = 80
_UNSAFE = re.compile(r"[^A-Za-z0-9_]+")
_SAFE_STEM = re.compile(r"^[A-Za-z0-9_]+$")


def safe_file_stem(name: str, max_length: int = MAX_STEM) -> str:
    """A file stem derived from ``name``: only ``[A-Za-z0-9_]``, at most ``max_length`` characters.

    A name that is already safe and short enough is kept as it is. Any other name has every run of other
    characters replaced by ``_`` and is cut to length, followed by ``_`` and the first 8 hexadecimal digits
    of the name's SHA-256, so two different names never share a stem by being cleaned (``a/b`` and ``a_b``
    differ). ``"x/../../escaped"`` gives ``"x_escaped_<hash>"``.
    """
    name = str(name)
    if _SAFE_STEM.fullmatch(name) and len(name) <= max_length:  # fullmatch: "$" would let a final newline through
        return name
    digest = hashlib.sha256(name.encode("utf-8", "surrogatepass")).hexdigest()[:8]
    cleaned = _UNSAFE.sub("_", name).strip("_")[: max(max_length - 9, 1)].rstrip("_")
    return f"{cleaned}_{digest}" if cleaned else f"name_{digest}"


def output_path(run_dir: str | Path, folder: str, name: str, suffix: str) -> Path:
    """``<run_dir>/<folder>/<safe stem of name><suffix>``, checked to lie inside the run folder.

    Raises
    ------
    ValueError
        If the path would leave the run folder (cannot happen with a derived stem; checked all the same).
    """
    root = Path(run_dir).resolve()
    path = (root / folder / f"{safe_file_stem(name)}{suffix}").resolve()
    if root not in path.parents:
        raise ValueError(f"output file {path} would lie outside the run folder {root}")
    return path


#: First characters that make a spreadsheet read a cell as a formula (OWASP "CSV Injection").
FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")
_FLOAT_TEXT = re.compile(r"^[-+]?(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?$|^[-+]?(inf|nan)$", re.IGNORECASE)


def neutralise_csv_cell(value: object) -> object:
    """A text cell that starts like a formula, prefixed with a single quote (OWASP "CSV Injection").

    Cells starting with ``=``, ``+``, ``-``, ``@``, a tab or a carriage return are prefixed with ``'`` so a
    spreadsheet shows them as text; text that reads as a plain number (``"-0.25"``, ``"-1e-3"``) and every
    non-text value are left alone. A cell that already starts with ``'`` gets a second one, so that
    :func:`restore_csv_cell` gives every cell back exactly.
    """
    if isinstance(value, str) and (
        (value.startswith(FORMULA_STARTS) and not _FLOAT_TEXT.match(value)) or value.startswith("'")
    ):
        return "'" + value
    return value


def restore_csv_cell(value: str) -> str:
    """The cell as it was before :func:`neutralise_csv_cell` (for showing a table read back from CSV)."""
    return value[1:] if isinstance(value, str) and value.startswith("'") else value


def neutralise_csv_table(table: pd.DataFrame) -> pd.DataFrame:
    """A copy of ``table`` with every text cell and column name passed through :func:`neutralise_csv_cell`."""
    out = table.copy()
    for col in out.columns:
        if not (pd.api.types.is_numeric_dtype(out[col]) or pd.api.types.is_bool_dtype(out[col])):
            out[col] = out[col].map(neutralise_csv_cell)
    out.columns = [neutralise_csv_cell(c) if isinstance(c, str) else c for c in out.columns]
    return out


def csv_text(table: pd.DataFrame) -> str:
    """The CSV text the tool writes for ``table``: formulas neutralised, 6 significant digits, ``\\n``."""
    return neutralise_csv_table(table).to_csv(index=False, float_format="%.6g", lineterminator="\n")


def save_figure(fig: plt.Figure, run_dir: str | Path, name: str, *, close: bool = True) -> FigureFiles:
    """Save ``fig`` as ``figures/<stem>.png`` and ``.svg`` in the run folder (stem: :func:`safe_file_stem`)."""
    png = atomic_write_bytes(output_path(run_dir, FIGURES, name, ".png"), figure_png_bytes(fig))
    buf = io.BytesIO()
    fig.savefig(buf, format="svg", bbox_inches="tight", metadata=_SVG_META)
    svg = atomic_write_bytes(output_path(run_dir, FIGURES, name, ".svg"), buf.getvalue())
    if close:
        plt.close(fig)
    return FigureFiles(name=name, png=png, svg=svg)


def save_table(table: pd.DataFrame, run_dir: str | Path, name: str) -> Path:
    """Save a report table as ``tables/<stem>.csv`` (see :func:`csv_text` and :func:`safe_file_stem`)."""
    return atomic_write_text(output_path(run_dir, TABLES, name, ".csv"), csv_text(table))


def save_data(table: pd.DataFrame, run_dir: str | Path, name: str) -> Path:
    """Save a stage's intermediate table as ``data/<stem>.parquet`` for the next stage."""
    buf = io.BytesIO()
    table.to_parquet(buf, index=False)
    return atomic_write_bytes(output_path(run_dir, DATA, name, ".parquet"), buf.getvalue())


def load_data(run_dir: str | Path, name: str) -> pd.DataFrame:
    """Read ``data/<stem>.parquet`` written by an earlier stage; say which stage to run when missing."""
    path = output_path(run_dir, DATA, name, ".parquet")
    if not path.is_file():
        raise FileNotFoundError(
            f"{path} is missing: run the earlier stage notebooks of this run first (in order 01..04)"
        )
    return pd.read_parquet(path)
