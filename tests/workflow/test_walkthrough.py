"""The new user's path: the walkthrough notebook and the guide in docs/own_cohort.md stay true to the code."""

from __future__ import annotations

import re
from pathlib import Path

import nbformat
import pytest

from riskbench.models.family_registry import FAMILIES
from riskbench.workflow.walkthrough_notebook import WALKTHROUGH, write_walkthrough

ROOT = Path(__file__).resolve().parents[2]
GUIDE = ROOT / "docs" / "own_cohort.md"


def test_committed_walkthrough_matches_the_builder(tmp_path):
    built = write_walkthrough(tmp_path)
    committed = ROOT / "notebooks" / WALKTHROUGH
    assert committed.read_bytes() == built.read_bytes(), (
        "run python -m riskbench.workflow.walkthrough_notebook notebooks"
    )


def test_guide_lists_every_family_and_parameter_with_its_default():
    text = GUIDE.read_text(encoding="utf-8")
    for family in FAMILIES.values():
        row = next((line for line in text.splitlines() if line.startswith(f"| `{family.name}` |")), None)
        assert row is not None, f"docs/own_cohort.md has no row for family {family.name!r}"
        for param in family.params:
            assert f"`{param.name}`" in row, f"{family.name}: parameter {param.name!r} missing from the guide"
        for reserved in family.reserved:
            assert f"`{reserved}`" not in row, f"{family.name}: {reserved!r} is set by the run, not the user"


def test_guide_configuration_is_accepted_by_the_schema(tmp_path):
    """The annotated minimal configuration of the guide parses (its files are made up here)."""
    from riskbench.workflow.config import load_config

    text = GUIDE.read_text(encoding="utf-8")
    toml = re.search(r"```toml\n(.*?)```", text, re.DOTALL).group(1)
    for name in ("patients.csv", "labs_and_imaging.csv", "events.csv"):
        (tmp_path / "data").mkdir(exist_ok=True)
        (tmp_path / "data" / name).write_text("x\n", encoding="utf-8")
    path = tmp_path / "my_analysis.toml"
    path.write_text(toml, encoding="utf-8")
    config = load_config(path)  # keys and values only: the made-up files hold no data
    assert [m.name for m in config.models] == ["clinical", "with_creatinine"]
    assert config.comparison == ("with_creatinine", "clinical")
    assert config.landmarks.horizon_days == pytest.approx(730.5)


def test_walkthrough_checks_the_messy_demo_and_accounts_for_every_row(tmp_path):
    """The walkthrough's checks on the messy demo, executed with papermill (the analysis itself is run by
    tests/workflow/test_end_to_end.py)."""
    import papermill as pm

    from riskbench.workflow.kernel import ensure_kernel

    executed = tmp_path / "walkthrough.ipynb"
    pm.execute_notebook(
        str(ROOT / "notebooks" / WALKTHROUGH),
        str(executed),
        kernel_name=ensure_kernel(),
        parameters={
            "config_path": str(ROOT / "configs" / "messy_demo.toml"),
            "out": str(tmp_path / "run"),
            "run": False,
        },
        cwd=str(tmp_path),
        progress_bar=False,
    )
    nb = nbformat.read(str(executed), as_version=4)
    text = "\n".join(
        str(o.get("data", {}).get("text/plain", "")) + str(o.get("text", ""))
        for c in nb.cells
        if c.cell_type == "code"
        for o in c.get("outputs", [])
    )
    assert "log_nodule_volume_change" in text and "imaging_clinical" in text
    assert "later_event" in text and "exact_duplicate" in text
    assert not (tmp_path / "run").exists()
