"""What a stage function returns to its notebook: the tables and figures it wrote (already suppressed)."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from riskbench.report.outputs import FigureFiles


@dataclass(frozen=True)
class StageResult:
    """Tables (as written to ``tables/``, small counts hidden) and figures of one stage.

    ``notes`` are plain sentences for the reader (e.g. what was left out and why).
    """

    stage: str
    run_dir: Path
    tables: dict[str, pd.DataFrame] = field(default_factory=dict)
    figures: dict[str, FigureFiles] = field(default_factory=dict)
    notes: list[str] = field(default_factory=list)


def show(result: StageResult) -> None:
    """Display a stage's notes, tables and figures in a notebook (plain print outside Jupyter)."""
    try:
        from IPython.display import Image, Markdown, display
    except ImportError:  # pragma: no cover - IPython ships with ipykernel
        display = None
    for note in result.notes:
        if display:
            display(Markdown(f"*{note}*"))
        else:
            print(note)
    for name, table in result.tables.items():
        if display:
            display(Markdown(f"**{name}** (`tables/{name}.csv`)"))
            display(table)
        else:
            print(name, table, sep="\n")
    for name, files in result.figures.items():
        if display:
            display(Markdown(f"**{name}** (`figures/{name}.png`, `.svg`)"))
            display(Image(filename=str(files.png)))
        else:
            print(name, files.png)
