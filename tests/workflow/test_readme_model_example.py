"""The Python block of README.md's "Using a saved model" section runs as written.

The block is taken from the README text (so the README cannot drift from the code) and executed in a folder that
holds ``my_analysis.toml`` over a small demo-generator cohort and a second generated cohort as ``new/`` (a
different seed: other, invented patients).
"""

from __future__ import annotations

import contextlib
import importlib.util
import io
import re
import shutil
from pathlib import Path

import numpy as np

_SPEC = importlib.util.spec_from_file_location("analysis_builder", Path(__file__).with_name("analysis_builder.py"))
B = importlib.util.module_from_spec(_SPEC)
_SPEC.loader.exec_module(B)

README = Path(__file__).parents[2] / "README.md"


def readme_block(section: str) -> str:
    """The first ```python block of a README section (by its heading)."""
    text = README.read_text(encoding="utf-8")
    body = text.split(f"## {section}\n", 1)[1].split("\n## ", 1)[0]
    match = re.search(r"```python\n(.*?)```", body, flags=re.DOTALL)
    assert match, f"no python block in the README section {section!r}"
    return match.group(1)


def test_the_readme_saved_model_example_runs(tmp_path: Path, monkeypatch) -> None:
    B.write_data(tmp_path, 250, seed=4)
    B.write_config(tmp_path, name="my_analysis")
    B.write_data(tmp_path / "site_b", 120, seed=8)
    shutil.move(tmp_path / "site_b" / "data", tmp_path / "new")
    monkeypatch.chdir(tmp_path)
    code = readme_block("Using a saved model")
    namespace: dict = {}
    with contextlib.redirect_stdout(io.StringIO()) as shown:
        exec(compile(code, "README.md", "exec"), namespace)  # the README's own example
    risks = namespace["risks"]
    assert len(risks) > 100 and set(risks["horizon_days"]) == {365.25, 730.5}
    assert np.nanmin(risks["risk"]) >= 0 and np.nanmax(risks["risk"]) <= 1
    assert "risk" in shown.getvalue()
    assert (tmp_path / "results" / "run1" / "models" / "imaging_clinical.md").is_file()
