"""The run-folder protocol of the notebook runner, with tiny stand-in notebooks (fast).

The real stages run in tests/workflow/test_end_to_end.py; here the notebooks only write a file, so these
tests check the protocol: refusal to overwrite, staging folder, one-line failure with the partial notebook
kept, restart after an interruption, manifest contents.
"""

from __future__ import annotations

import json
from pathlib import Path

import nbformat
import pytest
from nbformat.v4 import new_code_cell, new_notebook

from riskbench.demo.subset import write_subset
from riskbench.workflow.config import file_sha256
from riskbench.workflow.run_folder import write_marker
from riskbench.workflow.runner import RunFolderExists, StageFailed, run_analysis

ROOT = Path(__file__).resolve().parents[2]
DEMO_DATA = ROOT / "demo_data" / "clean"


def demo_project(folder: Path, n_patients: int = 120) -> Path:
    """The first ``n_patients`` demo patients as CSV files in ``folder`` and configs/demo.toml reading them;
    returns the configuration path."""
    if not (DEMO_DATA / "patients.csv").is_file():
        pytest.skip("the committed demo cohort (demo_data/clean) is not in this checkout")
    write_subset(DEMO_DATA, folder, n_patients)
    config = folder / "analysis.toml"
    config.write_text((ROOT / "configs" / "demo.toml").read_text().replace("../demo_data/clean/", ""))
    return config


def _notebook(code: str) -> nbformat.NotebookNode:
    params = new_code_cell('config_path = ""\nrun_dir = ""')
    params.metadata["tags"] = ["parameters"]
    return new_notebook(cells=[params, new_code_cell(code)])


WRITE = (
    "from pathlib import Path\n"
    "from riskbench.workflow.config import load_config\n"
    "c = load_config(config_path)\n"
    "(Path(run_dir) / 'tables').mkdir(exist_ok=True)\n"
    "(Path(run_dir) / 'tables' / '{name}.csv').write_text(f'seed,{{c.seed}}\\n')\n"
)


@pytest.fixture()
def project(tmp_path: Path) -> dict:
    config = demo_project(tmp_path)
    books = tmp_path / "books"
    books.mkdir()
    nbformat.write(_notebook(WRITE.format(name="one")), str(books / "one.ipynb"))
    nbformat.write(_notebook(WRITE.format(name="two")), str(books / "two.ipynb"))
    nbformat.write(_notebook("x = 1\nraise KeyError('no such column: volume')"), str(books / "bad.ipynb"))
    return {"config": config, "books": books, "out": tmp_path / "results" / "run"}


def _run(project: dict, stages, **kw):
    return run_analysis(
        project["config"], project["out"], notebooks_dir=project["books"], stages=stages, log=None, **kw
    )


def test_run_writes_outputs_html_and_manifest_then_refuses_to_overwrite(project):
    result = _run(project, [("first", "one.ipynb"), ("second", "two.ipynb")])
    out = project["out"]
    assert result.run_dir == out.resolve()
    assert (out / "tables" / "one.csv").read_text() == "seed,20240611\n"
    assert (out / "notebooks" / "two.html").is_file()
    html = (out / "notebooks" / "two.html").read_text()
    assert "cdnjs" not in html and 'src="http' not in html  # the exported page loads nothing from the web
    manifest = json.loads((out / "manifest.json").read_text())
    assert manifest["status"] == "complete"
    assert set(manifest["stage_seconds"]) == {"first", "second"}
    assert manifest["input_sha256"]["patients"] == file_sha256(project["config"].parent / "patients.csv")
    assert manifest["input_sha256"]["configuration"] == file_sha256(project["config"])
    assert manifest["configuration"]["seed"] == 20240611 and manifest["seeds"]["analysis"] == 20240611
    assert manifest["versions"]["numpy"] != "not installed"
    assert manifest["outputs_sha256"]["tables/one.csv"] == file_sha256(out / "tables" / "one.csv")
    assert not list(out.parent.glob(".*partial"))
    with pytest.raises(RunFolderExists, match="--overwrite"):
        _run(project, [("first", "one.ipynb")])
    _run(project, [("first", "one.ipynb")], overwrite=True)
    assert not (out / "tables" / "two.csv").exists()  # the old run was replaced as a whole


def test_failing_stage_gives_one_line_and_keeps_the_partial_notebook(project):
    with pytest.raises(StageFailed) as err:
        _run(project, [("first", "one.ipynb"), ("broken", "bad.ipynb"), ("second", "two.ipynb")])
    message = str(err.value)
    assert "\n" not in message
    # cells are counted in the executed notebook, where papermill added the injected-parameters cell
    assert message.startswith("stage broken failed in cell 3: KeyError:")
    assert "no such column: volume" in message
    failed = project["out"].parent / "run.failed"
    kept = nbformat.read(str(failed / "notebooks" / "bad.ipynb"), as_version=4)
    assert any(o.get("output_type") == "error" for c in kept.cells for o in c.get("outputs", []))
    assert (failed / "tables" / "one.csv").is_file() and not (failed / "tables" / "two.csv").exists()
    assert json.loads((failed / "manifest.json").read_text())["status"] == "failed"
    assert not project["out"].exists()  # no half run under the real name


def test_restart_after_an_interruption_gives_the_same_outputs(project):
    stages = [("first", "one.ipynb")]
    # an interrupted run leaves only its hidden staging folder, with stale or half-written files
    staging = project["out"].parent / ".run.partial"
    (staging / "tables").mkdir(parents=True)
    write_marker(staging, "partial")  # what the runner writes first into every folder it creates
    (staging / "tables" / "one.csv").write_text("half a fi")
    (staging / "tables" / "stale.csv").write_text("left over\n")
    _run(project, stages)
    restarted = {p.name: p.read_bytes() for p in (project["out"] / "tables").iterdir()}
    clean = project["out"].parent / "clean"
    run_analysis(project["config"], clean, notebooks_dir=project["books"], stages=stages, log=None)
    assert restarted == {p.name: p.read_bytes() for p in (clean / "tables").iterdir()}


def test_executed_notebooks_name_the_run_folder_never_the_staging_folder(project):
    """papermill records the folder a notebook ran in, its paths and parameters, and cells print paths: after
    the run is moved into place none of them names the staging folder (which no longer exists)."""
    books = project["books"]
    nbformat.write(
        _notebook(WRITE.format(name="three") + "print(Path(run_dir) / 'tables')\n"), str(books / "three.ipynb")
    )
    _run(project, [("third", "three.ipynb")])
    out = project["out"].resolve()
    staging_name = f".{out.name}.partial"
    executed = out / "notebooks" / "three.ipynb"
    for path in (executed, executed.with_suffix(".html")):
        assert staging_name not in path.read_text(), path.name
    nb = nbformat.read(str(executed), as_version=4)
    assert nb.metadata["papermill"]["output_path"] == str(executed)
    assert nb.metadata["papermill"]["parameters"]["run_dir"] == str(out)
    assert str(out / "tables") in "".join(o.get("text", "") for c in nb.cells for o in c.get("outputs", []))
    with pytest.raises(StageFailed):
        _run(project, [("broken", "bad.ipynb")], overwrite=True)
    kept = (out.parent / f"{out.name}.failed" / "notebooks" / "bad.ipynb").read_text()
    assert staging_name not in kept and str(out.parent / f"{out.name}.failed") in kept
