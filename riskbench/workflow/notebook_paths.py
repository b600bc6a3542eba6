"""Executed notebooks name the folder the run ends up in, never the hidden staging folder it was built in.

papermill records the folder a notebook ran in (``metadata.papermill.cwd``), its input and output paths and
its parameters (also written into the injected-parameters cell), and the stages print paths into the cell
outputs. The runner builds a run in ``.<name>.partial/`` and renames it at the end, so every one of those
strings would name a folder that no longer exists. :func:`relocate_notebook` rewrites them.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import nbformat


def _replace(value: Any, old: str, new: str) -> Any:
    if isinstance(value, str):
        return value.replace(old, new)
    if isinstance(value, list):
        return [_replace(v, old, new) for v in value]
    if isinstance(value, dict):
        return type(value)((k, _replace(v, old, new)) for k, v in value.items())
    return value


def relocate_notebook(path: str | Path, old: str | Path, new: str | Path) -> None:
    """Rewrite the notebook at ``path`` so that every path under ``old`` names the same place under ``new``.

    Every string of the notebook is rewritten: cell sources, outputs (text, HTML, error tracebacks) and the
    notebook's and cells' metadata. Images (base64 strings) are left intact: the staging folder's name starts
    with a dot, a character base64 never uses.

    Parameters
    ----------
    path
        The executed ``.ipynb`` file (rewritten in place).
    old, new
        The staging folder and the folder the run will be moved to (absolute paths).
    """
    old, new = str(old), str(new)
    nb = nbformat.read(str(path), as_version=4)
    nb = nbformat.from_dict(_replace(dict(nb), old, new))
    nbformat.write(nb, str(path))
