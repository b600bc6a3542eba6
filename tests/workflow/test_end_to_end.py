"""The demo analysis end to end through papermill (the one slow test of this folder, budget 3 minutes).

One module-scoped run of configs/demo.toml, on its first 800 patients and with a small bootstrap (make demo
runs the whole cohort), feeds every check: the report has every
section and renders in headless chromium with every figure loaded; no input patient id appears in any
output; the stage functions run again in-process give byte-identical tables (same configuration and data,
same tables); the comparison stage, reading the paired replicates the validation stage measured from its
own refits, writes the tables it writes when it refits them itself; changing the horizon changes the outputs
that depend on it.
"""

from __future__ import annotations

import json
import re
import shutil
from pathlib import Path

import pandas as pd
import pytest

from riskbench.report.html_report import SECTIONS
from riskbench.report.render_check import check_report_renders
from riskbench.validation import comparison as comparison_module
from riskbench.workflow.config import load_config
from riskbench.workflow.runner import run_analysis
from riskbench.workflow.stages import STAGE_FUNCTIONS

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "configs" / "demo.toml"
DATA = ROOT / "demo_data" / "clean"


N_PATIENTS = 800


def demo_slice(folder: Path) -> Path:
    """The first ``N_PATIENTS`` patients of the demo cohort (all their rows), as CSV files in ``folder``."""
    folder.mkdir(parents=True, exist_ok=True)
    patients = pd.read_csv(DATA / "patients.csv", dtype=str)
    keep = set(sorted(patients["patient_id"])[:N_PATIENTS])
    for name in ("patients", "measurements", "outcomes"):
        table = patients if name == "patients" else pd.read_csv(DATA / f"{name}.csv", dtype=str)
        table[table["patient_id"].isin(keep)].to_csv(folder / f"{name}.csv", index=False)
    return folder


def small_config(folder: Path, data: Path, *, horizon_years: float = 2.0) -> Path:
    """configs/demo.toml reading ``data``, with 3 folds, 2 bootstrap resamples, one process."""
    text = DEMO.read_text().replace("../demo_data/clean/", f"{data}/")
    text = re.sub(r"(?m)^bootstrap_resamples = \d+", "bootstrap_resamples = 2", text)
    text = re.sub(r"(?m)^folds = \d+", "folds = 3", text)
    text = re.sub(r"(?m)^workers = \d+", "workers = 1", text)  # worker start-up would cost more than it saves
    if horizon_years != 2.0:
        text = re.sub(r"(?m)^prediction_window = .*", f'prediction_window = "{horizon_years} years"', text)
        text = re.sub(r"(?m)^report_horizons = \[.*\]", f'report_horizons = ["1 year", "{horizon_years} years"]', text)
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / "analysis.toml"
    path.write_text(text)
    return path


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    if not (DATA / "patients.csv").is_file():
        pytest.skip("the committed demo cohort (demo_data/clean) is not in this checkout")
    base = tmp_path_factory.mktemp("e2e")
    data = demo_slice(base / "data")
    config = small_config(base, data)
    result = run_analysis(config, base / "results" / "demo", log=None)
    return {"base": base, "data": data, "config": config, "result": result, "run": result.run_dir}


def test_report_has_every_section_and_the_run_folder_is_complete(demo_run):
    run = demo_run["run"]
    page = (run / "report.html").read_text()
    for section in SECTIONS:  # the joint-model section is left out: this run has no joint model
        assert (f'id="{section.anchor}"' in page) is not section.optional, section.anchor
    assert "Not produced in this run" not in page
    assert "not a medical device" in page
    for name in ("01_cohort", "02_models", "03_validation", "04_comparison"):
        assert (run / "notebooks" / f"{name}.ipynb").is_file() and (run / "notebooks" / f"{name}.html").is_file()
    for png in (run / "figures").glob("*.png"):
        assert png.with_suffix(".svg").is_file()
    manifest = json.loads((run / "manifest.json").read_text())
    assert manifest["status"] == "complete"
    assert list(manifest["stage_seconds"]) == ["cohort", "models", "validation", "comparison"]
    assert set(manifest["input_sha256"]) == {"configuration", "patients", "measurements", "outcomes"}


def test_no_input_patient_id_appears_in_any_output(demo_run):
    data = demo_run["data"]
    ids = set(pd.read_csv(data / "patients.csv", dtype=str)["patient_id"])
    ids |= set(pd.read_csv(data / "outcomes.csv", dtype=str)["patient_id"])
    pattern = re.compile("|".join(sorted(map(re.escape, ids), key=len, reverse=True)).encode())
    run = demo_run["run"]
    files = [p for p in run.rglob("*") if p.is_file()]
    assert len(files) > 20
    for path in files:
        found = pattern.search(path.read_bytes())
        assert found is None, f"{path.relative_to(run)} contains input id {found.group().decode()}"
    for parquet in (run / "data").glob("*.parquet"):  # compressed pages: check the decoded ids too
        table = pd.read_parquet(parquet)
        if "patient_id" in table.columns:
            assert not ids & set(table["patient_id"].astype(str)), parquet.name


def test_executed_notebooks_name_no_staging_folder(demo_run):
    """papermill records where a notebook ran and with which run_dir; the run is built in a hidden staging
    folder and moved into place, so every executed notebook (and its HTML copy) must name the final folder."""
    run = demo_run["run"]
    staging = f".{run.name}.partial"
    for path in sorted((run / "notebooks").glob("0*_*.*")):
        text = path.read_text(encoding="utf-8")
        assert staging not in text, path.name
        if path.suffix == ".ipynb":
            assert json.loads(text)["metadata"]["papermill"]["parameters"]["run_dir"] == str(run)


def test_every_figure_of_the_report_loads_in_headless_chromium(demo_run, chromium):
    check = check_report_renders(demo_run["run"] / "report.html", chromium)
    assert check.images >= 8 and check.broken == 0


def test_same_configuration_and_data_give_identical_tables(demo_run):
    """The stage functions run in-process reproduce the papermill run's tables byte for byte."""
    config = load_config(demo_run["config"])
    again = demo_run["base"] / "again"
    for stage in STAGE_FUNCTIONS.values():
        stage(config, again)
    first = {p.name: p.read_bytes() for p in (demo_run["run"] / "tables").glob("*.csv")}
    second = {p.name: p.read_bytes() for p in (again / "tables").glob("*.csv")}
    assert first.keys() == second.keys() and len(first) >= 10
    for name in first:
        assert first[name] == second[name], name


def test_comparison_reads_the_validation_refits_and_writes_what_its_own_refits_give(demo_run, monkeypatch, tmp_path):
    config = load_config(demo_run["config"])
    saved = json.loads((demo_run["run"] / "data" / "paired_replicates.json").read_text())
    assert saved["key"]["n_boot"] == 2 and sorted(saved["replicates"]) == ["0", "1"]
    reused, own = tmp_path / "reused", tmp_path / "own"
    for copy in (reused, own):
        shutil.copytree(demo_run["run"], copy)
    for path in (own / "data").glob("paired_replicates*"):
        path.unlink()
    STAGE_FUNCTIONS["comparison"](config, own)  # refits every replicate itself

    def refit(*_args):
        raise AssertionError("the comparison refitted a replicate the validation stage had measured")

    monkeypatch.setattr(comparison_module, "_comparison_replicate", refit)
    STAGE_FUNCTIONS["comparison"](config, reused)
    tables = sorted(p.name for p in (own / "tables").glob("*.csv"))
    assert "model_comparison.csv" in tables
    for name in tables + ["../notes/comparison.json"]:
        assert (reused / "tables" / name).read_bytes() == (own / "tables" / name).read_bytes(), name


def test_changing_the_horizon_changes_the_outputs_that_depend_on_it(demo_run):
    config = load_config(small_config(demo_run["base"] / "h15", demo_run["data"], horizon_years=1.5))
    out = demo_run["base"] / "h15" / "run"
    STAGE_FUNCTIONS["cohort"](config, out)
    STAGE_FUNCTIONS["models"](config, out)
    run = demo_run["run"]
    for table in ("landmark_summary.csv", "coefficients_imaging_clinical.csv"):
        assert (out / "tables" / table).read_bytes() != (run / "tables" / table).read_bytes(), table
    stack = pd.read_parquet(out / "data" / "landmark_stack.parquet")
    assert stack["time"].max() <= 1.5 * 365.25 + 1e-9
    assert pd.read_parquet(run / "data" / "landmark_stack.parquet")["time"].max() > 1.5 * 365.25
    # what does not depend on the horizon stays the same
    assert (out / "tables" / "baseline_characteristics.csv").read_bytes() == (
        run / "tables" / "baseline_characteristics.csv"
    ).read_bytes()


COUNT_COLUMNS = {
    "cohort_flow.csv": ("n_patients", "n_excluded"),
    "ledger_summary.csv": ("rows_remaining", "rows_excluded"),
    "landmark_summary.csv": ("at_risk", "outcomes", "competing_events"),
}


def test_small_counts_are_hidden_and_pages_load_nothing_from_the_web(demo_run):
    """Counts 1-9 never appear (threshold 10, common practice); no page refers to a remote script or image."""
    tables = demo_run["run"] / "tables"
    for name, columns in COUNT_COLUMNS.items():
        table = pd.read_csv(tables / name, dtype=str)
        for column in columns:
            for value in table[column]:
                assert value.startswith("<") or not 0 < int(value.lstrip("~")) < 10, (name, column, value)
    baseline = pd.read_csv(tables / "baseline_characteristics.csv", dtype=str, keep_default_na=False)
    for value in baseline.iloc[0, 1:]:
        assert value in ("<10", "suppressed") or int(value) >= 10
    for page in demo_run["run"].rglob("*.html"):
        assert not re.search(r"""(src|href)\s*=\s*["']?(https?:)?//""", page.read_text()), page.name
