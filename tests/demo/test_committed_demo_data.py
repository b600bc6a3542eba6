"""The committed demo cohort is exactly what its documented command makes.

demo_data/README.md: ``riskbench simulate-cohort --patients 3000 --seed 2026 --variant clean|messy``.
Regenerate both variants and compare DataFrames (not Parquet bytes) with the committed files.
"""

from __future__ import annotations

import json
from pathlib import Path

import pandas as pd
import pytest

from riskbench.demo import generate_cohort, read_tables, write_cohort

DEMO = Path(__file__).resolve().parents[2] / "demo_data"
N_PATIENTS, SEED = 3000, 2026


def _compare_folders(fresh: Path, committed: Path) -> None:
    for fmt in ("parquet", "csv"):
        ours, theirs = read_tables(fresh, fmt), read_tables(committed, fmt)
        for name, frame in ours.items():
            pd.testing.assert_frame_equal(frame, theirs[name], check_exact=False, rtol=1e-12, obj=f"{name}.{fmt}")


@pytest.mark.parametrize("variant", ["clean", "messy"])
def test_committed_demo_cohort_regenerates(variant, tmp_path):
    cohort = generate_cohort(N_PATIENTS, SEED, variant)
    write_cohort(cohort, tmp_path)
    committed = DEMO / variant
    _compare_folders(tmp_path, committed)
    if variant == "messy":
        assert json.loads((committed / "defects.json").read_text()) == json.loads(
            (tmp_path / "defects.json").read_text()
        )
        return
    assert json.loads((committed / "truth.json").read_text()) == json.loads((tmp_path / "truth.json").read_text())
    for name in ("true_intervals", "true_risk"):
        pd.testing.assert_frame_equal(
            pd.read_parquet(tmp_path / f"{name}.parquet"),
            pd.read_parquet(committed / f"{name}.parquet"),
            check_exact=False,
            rtol=1e-12,
            obj=name,
        )


def test_demo_readme_states_the_command_and_the_coefficients():
    text = (DEMO / "README.md").read_text()
    assert f"--patients {N_PATIENTS} --seed {SEED}" in text
    truth = json.loads((DEMO / "clean" / "truth.json").read_text())
    for name, beta in truth["coefficients"].items():
        assert f"`{name}`" in text and f"| {beta} |" in text, name
