"""Writing figures and tables into a run folder: atomically and byte-for-byte reproducibly.

Every file is first written under a temporary name in the same folder and then renamed into place, so a
reader (or a restarted run) never sees half a file. Figures are saved as PNG and SVG without time stamps or
random element ids, so the same inputs give the same bytes.
"""

from __future__ import annotations

import io
import os
import tempfile
from dataclasses import dataclass
from pathlib import Path

import matplotlib

matplotlib.use("Agg")  # figures are files; never open a window
import matplotlib.pyplot as plt  # noqa: E402
import pandas as pd  # noqa: E402

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


def save_figure(fig: plt.Figure, run_dir: str | Path, name: str, *, close: bool = True) -> FigureFiles:
    """Save ``fig`` as ``figures/<name>.png`` and ``figures/<name>.svg`` in the run folder."""
    folder = Path(run_dir) / FIGURES
    png = atomic_write_bytes(folder / f"{name}.png", figure_png_bytes(fig))
    buf = io.BytesIO()
    fig.savefig(buf, format="svg", bbox_inches="tight", metadata=_SVG_META)
    svg = atomic_write_bytes(folder / f"{name}.svg", buf.getvalue())
    if close:
        plt.close(fig)
    return FigureFiles(name=name, png=png, svg=svg)


def save_table(table: pd.DataFrame, run_dir: str | Path, name: str) -> Path:
    """Save a report table as ``tables/<name>.csv`` (numbers rounded to 6 significant digits)."""
    text = table.to_csv(index=False, float_format="%.6g", lineterminator="\n")
    return atomic_write_text(Path(run_dir) / TABLES / f"{name}.csv", text)


def save_data(table: pd.DataFrame, run_dir: str | Path, name: str) -> Path:
    """Save a stage's intermediate table as ``data/<name>.parquet`` for the next stage."""
    buf = io.BytesIO()
    table.to_parquet(buf, index=False)
    return atomic_write_bytes(Path(run_dir) / DATA / f"{name}.parquet", buf.getvalue())


def load_data(run_dir: str | Path, name: str) -> pd.DataFrame:
    """Read ``data/<name>.parquet`` written by an earlier stage; say which stage to run when missing."""
    path = Path(run_dir) / DATA / f"{name}.parquet"
    if not path.is_file():
        raise FileNotFoundError(
            f"{path} is missing: run the earlier stage notebooks of this run first (in order 01..04)"
        )
    return pd.read_parquet(path)
