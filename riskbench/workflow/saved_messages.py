"""Error text that is saved (manifest, executed notebooks) keeps words and line numbers, never raw values.

A stage that fails may raise an error that quotes what it read: a patient id, a date, a raw row (a
headerless patients file makes its first data row the "columns present"). The terminal shows that text in
full; what is written into the run or ``<out>.failed/`` goes through :func:`scrub_text` first:

* quoted text (``'...'``, ``"..."``) is replaced by ``…`` unless it is a known name (a column, variable,
  covariate or model name of the configuration, a source file name);
* a token with a digit is replaced by ``…`` unless it is a whole number counting lines, rows or cells
  (``line 57``, ``rows 3, 9 and 12``) or things (``41 missing values``, ``3 outcomes``);
* paths of the input files are shortened to their file names; words without digits are kept.

:func:`scrub_notebook` applies it to the error outputs and the standard-error stream of an executed notebook.
"""

from __future__ import annotations

import re
from collections.abc import Iterable
from pathlib import Path

import nbformat

REDACTED = "…"
LOCATORS = frozenset({"line", "lines", "row", "rows", "cell", "cells", "stage"})
JOINERS = frozenset({"and", "or", "to", "...", REDACTED})
NOUNS = frozenset(
    {
        "line",
        "lines",
        "row",
        "rows",
        "cell",
        "cells",
        "value",
        "values",
        "patient",
        "patients",
        "outcome",
        "outcomes",
        "event",
        "events",
        "parameter",
        "parameters",
        "column",
        "columns",
        "landmark",
        "landmarks",
        "fold",
        "folds",
        "resample",
        "resamples",
        "missing",
        "duplicate",
        "duplicated",
        "distinct",
        "more",
        "times",
        "records",
        "measurements",
        "ids",
        "other",
    }
)
_QUOTED = re.compile(r"""(?<![A-Za-z0-9])(?:'[^'\n]*'|"[^"\n]*")(?![A-Za-z0-9])""")
_TOKEN = re.compile(r"[^\s,;:()\[\]{}<>=|'\"`]+")
_WHOLE = re.compile(r"\d+\.?")


def _kept_tokens(tokens: list[str], names: frozenset[str]) -> list[bool]:
    """Which tokens stay: words, known names, and whole numbers that count lines, rows, cells or things."""
    keep, counting = [], False
    for i, token in enumerate(tokens):
        word = token.lower().rstrip(".")
        following = tokens[i + 1].lower().rstrip(".") if i + 1 < len(tokens) else ""
        if token in names or token.rstrip(".") in names or not any(ch.isdigit() for ch in token):
            keep.append(True)
            counting = word in LOCATORS or (counting and word in JOINERS)
        elif _WHOLE.fullmatch(token) and (counting or following in NOUNS):
            keep.append(True)
        else:
            keep.append(False)
            counting = False
    return keep


def scrub_text(text: str, names: Iterable[str] = (), paths: Iterable[str | Path] = ()) -> str:
    """``text`` with raw values replaced by ``…`` (see the module docstring); one line.

    Parameters
    ----------
    text
        The message, possibly several lines (a traceback).
    names
        Names that may be shown as they are (configuration names, column names, file names).
    paths
        Input file paths, shown by their file name only.
    """
    names = frozenset(str(n) for n in names if str(n))
    line = " ".join(str(text).split())
    for path in sorted((str(p) for p in paths), key=len, reverse=True):
        line = line.replace(path, Path(path).name)
    line = _QUOTED.sub(
        lambda m: m.group(0) if m.group(0)[1:-1] in names else m.group(0)[0] + REDACTED + m.group(0)[0], line
    )
    tokens = list(_TOKEN.finditer(line))
    out, end = [], 0
    for match, keep in zip(tokens, _kept_tokens([m.group(0) for m in tokens], names), strict=True):
        out.append(line[end : match.start()])
        out.append(match.group(0) if keep else REDACTED)
        end = match.end()
    out.append(line[end:])
    return re.sub(rf"{REDACTED}(?:[\s,;:/\-.]*{REDACTED})+", REDACTED, "".join(out))


def scrub_notebook(path: str | Path, names: Iterable[str] = (), paths: Iterable[str | Path] = ()) -> None:
    """Scrub the error outputs and the standard-error stream outputs of the executed notebook ``path``.

    Each error output keeps its class name and a one-line scrubbed message; its traceback becomes that line.
    """
    names, paths = list(names), list(paths)
    nb = nbformat.read(str(path), as_version=4)
    for cell in nb.cells:
        for output in cell.get("outputs", []):
            kind = output.get("output_type")
            if kind == "error":
                output["evalue"] = scrub_text(output.get("evalue", ""), names, paths)
                output["traceback"] = [
                    f"{output.get('ename', 'Error')}: {output['evalue']} (the full message "
                    "was shown on the terminal only)"
                ]
            elif kind == "stream" and output.get("name") == "stderr":
                output["text"] = scrub_text(output.get("text", ""), names, paths) + "\n"
    nbformat.write(nb, str(path))
