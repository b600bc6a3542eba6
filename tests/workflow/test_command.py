"""The workflow subcommands: check-config reports a valid file, errors come back as one line and exit 2."""

from __future__ import annotations

from pathlib import Path

import pytest

from riskbench.workflow.cli import main

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "configs" / "demo.toml"


@pytest.fixture(autouse=True)
def _demo_files_exist():
    if not (ROOT / "demo_data" / "clean" / "patients.csv").is_file():
        pytest.skip("the committed demo cohort (demo_data/clean) is not in this checkout")


def test_check_config_names_the_models(capsys):
    assert main(["check-config", str(DEMO)]) == 0
    out = capsys.readouterr().out
    assert "valid" in out and "imaging_clinical (landmark_cox)" in out


def test_bad_configuration_and_existing_run_folder_are_one_line_errors(tmp_path, capsys):
    bad = tmp_path / "bad.toml"
    bad.write_text(DEMO.read_text().replace("folds = 5", "folds = 1").replace("../demo_data/", f"{ROOT}/demo_data/"))
    assert main(["check-config", str(bad)]) == 2
    err = capsys.readouterr().err.strip()
    assert err.count("\n") == 0 and "[validation] folds = 1 is not allowed: expected an integer from 2 to 100" in err
    (tmp_path / "run").mkdir()
    assert main(["run-analysis", str(DEMO), "--out", str(tmp_path / "run")]) == 2
    err = capsys.readouterr().err.strip()
    assert err.count("\n") == 0 and "already exists" in err and "--overwrite" in err
