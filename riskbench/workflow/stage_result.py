"""What a stage function returns to its notebook: the tables and figures it wrote (already suppressed)."""

from __future__ import annotations

import html
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from riskbench.report.outputs import FigureFiles, safe_file_stem


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


def _html_table(table: pd.DataFrame) -> str:
    """The table as an HTML ``<table>`` whose headers and cells are all escaped text."""
    return table.to_html(index=False, escape=True, na_rep="", border=0)


def show(result: StageResult) -> None:
    """Display a stage's notes, tables and figures in a notebook (plain print outside Jupyter).

    Every user string (notes, table names, labels in cells and headers) is shown as escaped HTML text,
    never as Markdown or live markup, so it stays text in the exported notebook page too.
    """
    try:
        from IPython.display import HTML, Image, display
    except ImportError:  # pragma: no cover - IPython ships with ipykernel
        display = None
    for note in result.notes:
        if display:
            display(HTML(f"<p><em>{html.escape(note)}</em></p>"))
        else:
            print(note)
    for name, table in result.tables.items():
        if display:
            where = f"tables/{safe_file_stem(name)}.csv"
            display(HTML(f"<p><strong>{html.escape(name)}</strong> (<code>{html.escape(where)}</code>)</p>"
                         + _html_table(table)))
        else:
            print(name, table, sep="\n")
    for name, files in result.figures.items():
        if display:
            where = f"figures/{files.png.name}, {files.svg.name}"
            display(HTML(f"<p><strong>{html.escape(name)}</strong> (<code>{html.escape(where)}</code>)</p>"))
            display(Image(filename=str(files.png)))
        else:
            print(name, files.png)
