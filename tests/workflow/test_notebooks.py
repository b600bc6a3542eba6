"""The committed stage notebooks are the builder's output, tagged for papermill, and do no statistics."""

from __future__ import annotations

from pathlib import Path

import nbformat

from riskbench.workflow.notebook_builder import STAGE_NOTEBOOKS, write_notebooks
from riskbench.workflow.stages import STAGE_FUNCTIONS

ROOT = Path(__file__).resolve().parents[2]


def test_committed_notebooks_match_the_builder(tmp_path):
    for path in write_notebooks(tmp_path):
        committed = ROOT / "notebooks" / path.name
        assert committed.read_bytes() == path.read_bytes(), (
            f"{committed} differs from the builder; run python -m riskbench.workflow.notebook_builder notebooks"
        )


def test_each_notebook_has_a_parameters_cell_and_only_calls_its_stage():
    assert [s for s, _ in STAGE_NOTEBOOKS] == list(STAGE_FUNCTIONS)
    for stage, filename in STAGE_NOTEBOOKS:
        nb = nbformat.read(str(ROOT / "notebooks" / filename), as_version=4)
        code = [c for c in nb.cells if c.cell_type == "code"]
        tagged = [c for c in code if "parameters" in c.metadata.get("tags", [])]
        assert len(tagged) == 1 and "config_path" in tagged[0].source and "run_dir" in tagged[0].source
        body = "\n".join(c.source for c in code if c is not tagged[0])
        assert f"stages.{STAGE_FUNCTIONS[stage].__name__}(config, run_dir)" in body
        # no statistics here: the only imports are the workflow's stage functions
        imports = [line for line in body.splitlines() if line.startswith(("import ", "from "))]
        assert imports == ["from riskbench.workflow import stages"], imports
