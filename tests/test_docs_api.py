"""docs/api.md stays true: each ``python`` block runs (in order, one namespace, from the repository root) and prints
exactly the ``text`` block that follows it."""

from __future__ import annotations

import contextlib
import io
import re
from pathlib import Path

import matplotlib
import pytest

matplotlib.use("Agg")

ROOT = Path(__file__).resolve().parents[1]
DOC = ROOT / "docs" / "api.md"
BLOCK = re.compile(r"```python\n(.*?)```\n\n```text\n(.*?)```", re.S)


def _blocks() -> list[tuple[str, str]]:
    return BLOCK.findall(DOC.read_text(encoding="utf-8"))


@pytest.mark.skipif(
    not (ROOT / "demo_data" / "clean" / "patients.parquet").exists(), reason="committed demo cohort not present"
)
def test_every_example_prints_what_the_page_shows(monkeypatch):
    import matplotlib.pyplot as plt

    blocks = _blocks()
    assert len(blocks) >= 7 and DOC.read_text(encoding="utf-8").count("```python") == len(blocks)
    monkeypatch.chdir(ROOT)
    namespace: dict = {}
    try:
        for number, (code, shown) in enumerate(blocks, start=1):
            out = io.StringIO()
            with contextlib.redirect_stdout(out):
                exec(compile(code, f"docs/api.md block {number}", "exec"), namespace)
            assert out.getvalue().rstrip("\n") == shown.rstrip("\n"), f"block {number} prints something else"
    finally:
        plt.close("all")
