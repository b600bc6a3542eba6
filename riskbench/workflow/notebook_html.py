"""Export an executed notebook to one offline HTML file.

nbconvert's template loads require.js, MathJax and mermaid from the internet; the stage notebooks need none
of them (plain tables and PNG figures), so those scripts are removed: opening the page makes no network
request. The export also sanitises the HTML of Markdown cells and cell outputs (nbconvert's
``sanitize_html``: scripts, event handlers and other active markup removed), a second guard behind the
stages, which already show every user string as escaped text.
"""

from __future__ import annotations

import re
from pathlib import Path

import nbformat

from riskbench.report.outputs import atomic_write_text

_SCRIPT = re.compile(r"<script\b[^>]*>.*?</script>", re.IGNORECASE | re.DOTALL)
_REMOTE = re.compile(r"""(src\s*=\s*["']?https?:|import\s[^;]*["']https?:|https?://cdn)""", re.IGNORECASE)


def strip_remote_scripts(html: str) -> str:
    """Remove every ``<script>`` that loads or imports code from a URL."""
    return _SCRIPT.sub(lambda m: "" if _REMOTE.search(m.group(0)) else m.group(0), html)


def export_html(notebook: str | Path, target: str | Path) -> Path:
    """Write ``notebook`` (an executed ``.ipynb``) as a self-contained, offline HTML page at ``target``."""
    from nbconvert import HTMLExporter

    nb = nbformat.read(str(notebook), as_version=4)
    exporter = HTMLExporter(embed_images=True, sanitize_html=True)
    body, _ = exporter.from_notebook_node(nb)
    return atomic_write_text(target, strip_remote_scripts(body))
