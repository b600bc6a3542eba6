"""Notes of a run: which report parts were left out or could not be computed, and why, per stage and model.

A part of the report that is switched off in the configuration, or that cannot be computed for a model
(a fit that fails, a target no threshold reaches, too few outcomes before a horizon), does not stop the
run: the stage records a :class:`Note` and goes on. Fitting warnings (separation, non-convergence,
floating-point trouble) are counted per model and stage. Each stage saves its notes and warning counts as
``notes/<stage>.json`` in the run folder; :func:`notes_html` renders them all, escaped, as the report's
"Notes" section.
"""

from __future__ import annotations

import html
import json
from collections.abc import Sequence
from dataclasses import asdict, dataclass
from pathlib import Path

import pandas as pd

from riskbench.models.fit_warnings import COUNT_COLUMNS, KIND_MEANING
from riskbench.report.outputs import atomic_write_text

NOTES = "notes"
STAGE_ORDER: tuple[str, ...] = ("cohort", "models", "validation", "comparison")
#: Kinds of note, in the order the report explains them.
NOTE_KINDS: tuple[str, ...] = (
    "switched off",
    "fit failed",
    "not computed",
    "resamples dropped",
    "fitting warnings",
    "caution",
)


@dataclass(frozen=True)
class Note:
    """One sentence for the reader about a part of the report.

    Attributes
    ----------
    stage : str
        The stage that wrote it (``cohort``, ``models``, ``validation``, ``comparison``).
    part : str
        The report part concerned, in words (e.g. ``"triage operating point"``).
    text : str
        What happened and what would change it (plain text; escaped when shown).
    model : str
        The model concerned; empty for the whole run.
    kind : str
        One of :data:`NOTE_KINDS`.
    """

    stage: str
    part: str
    text: str
    model: str = ""
    kind: str = "not computed"

    def __post_init__(self) -> None:
        if self.kind not in NOTE_KINDS:
            raise ValueError(f"note kind must be one of {NOTE_KINDS}; got {self.kind!r}")

    def sentence(self) -> str:
        """The note as one line (for notebooks and logs)."""
        who = f"model {self.model!r}, " if self.model else ""
        return f"{who}{self.part}: {self.text}"


def switched_off(stage: str, part: str, key: str) -> Note:
    """The note of a part switched off by a configuration key (``key`` as written, e.g. ``[report] triage``)."""
    return Note(stage, part, f"switched off by {key} = false.", kind="switched off")


def save_notes(
    run_dir: str | Path, stage: str, notes: Sequence[Note], fit_warnings: pd.DataFrame | None = None
) -> Path:
    """Write ``notes/<stage>.json`` (the stage's notes and its fitting-warning counts); return its path.

    ``fit_warnings`` has the columns of :func:`riskbench.models.fit_warnings.count_warnings`.
    """
    counts = pd.DataFrame(columns=COUNT_COLUMNS) if fit_warnings is None else fit_warnings[COUNT_COLUMNS]
    payload = {
        "stage": stage,
        "notes": [asdict(n) for n in notes],
        "fit_warnings": json.loads(counts.to_json(orient="records")),
    }
    path = Path(run_dir) / NOTES / f"{stage}.json"
    path.parent.mkdir(parents=True, exist_ok=True)
    return atomic_write_text(path, json.dumps(payload, indent=1, ensure_ascii=False) + "\n")


def _stage_files(run_dir: Path) -> list[Path]:
    files = sorted((run_dir / NOTES).glob("*.json"))
    rank = {s: i for i, s in enumerate(STAGE_ORDER)}
    return sorted(files, key=lambda p: (rank.get(p.stem, len(rank)), p.stem))


def load_notes(run_dir: str | Path) -> tuple[list[Note], pd.DataFrame]:
    """Every stage's notes (in stage order) and fitting-warning counts (with a ``stage`` column)."""
    notes: list[Note] = []
    counts = []
    for path in _stage_files(Path(run_dir)):
        payload = json.loads(path.read_text(encoding="utf-8"))
        notes.extend(Note(**n) for n in payload.get("notes", []))
        table = pd.DataFrame(payload.get("fit_warnings", []), columns=COUNT_COLUMNS)
        if len(table):
            table.insert(0, "stage", payload.get("stage", path.stem))
            counts.append(table)
    warned = pd.concat(counts, ignore_index=True) if counts else pd.DataFrame(columns=["stage", *COUNT_COLUMNS])
    return notes, warned


def failed_models(run_dir: str | Path) -> dict[str, str]:
    """Models whose fit on the whole cohort failed in the models stage: name -> the note's text."""
    path = Path(run_dir) / NOTES / "models.json"
    if not path.is_file():
        return {}
    payload = json.loads(path.read_text(encoding="utf-8"))
    return {n["model"]: n["text"] for n in payload.get("notes", []) if n.get("kind") == "fit failed"}


_INTRO = (
    "Parts of the report that were switched off or could not be computed, per stage and model, and how "
    "often model fits warned. A part listed here is missing above; the rest of the report stands. A "
    "caution is shown above but says how far to trust it."
)


def _rows(cells: Sequence[Sequence[str]], header: Sequence[str], numeric: Sequence[bool]) -> str:
    def cell(tag: str, value: str, num: bool) -> str:
        attribute = ' class="num"' if num else ""
        return f"<{tag}{attribute}>{html.escape(str(value))}</{tag}>"

    head = "".join(cell("th", h, n) for h, n in zip(header, numeric))
    body = "".join("<tr>" + "".join(cell("td", v, n) for v, n in zip(row, numeric)) + "</tr>" for row in cells)
    return f'<div class="wide"><table class="data"><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table></div>'


def notes_html(run_dir: str | Path) -> str:
    """The report's "Notes" section (every text escaped); says so when there is nothing to note."""
    notes, warned = load_notes(run_dir)
    parts = ['<section id="notes"><h2>Notes</h2>', f"<p>{html.escape(_INTRO)}</p>"]
    if not notes and not len(warned):
        parts.append('<p class="meta">Nothing to note: every part was computed and no fit warned.</p>')
    if notes:
        parts.append(
            _rows(
                [(n.stage, n.model or "(all)", n.part, n.kind, n.text) for n in notes],
                ("stage", "model", "part", "kind", "note"),
                (False,) * 5,
            )
        )
    if len(warned):
        parts.append("<h3>Fitting warnings</h3>")
        rows = [
            (
                r.stage,
                r.model,
                f"{r.kind}: {KIND_MEANING.get(r.kind, r.kind)}",
                str(int(r.warnings)),
                f"{int(r.fits_warned)} of {int(r.fits)}",
                r.terms,
            )
            for r in warned.itertuples(index=False)
        ]
        parts.append(
            _rows(
                rows,
                ("stage", "model", "kind", "warnings", "fits that warned", "terms named"),
                (False, False, False, True, True, False),
            )
        )
    parts.append("</section>")
    return "".join(parts)
