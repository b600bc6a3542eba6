"""The cohort stage on the synthetic demo cohort, checked against what the generator recorded.

The generator (``riskbench.demo``, written independently of this stage) returns its own counting-process
rows (the truth's ``intervals``) and, for the messy variant, the number of input rows it spoiled per ledger
state (``defects``). The two sides share only the file contract and the state codes.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from riskbench.cohort import build_cohort
from riskbench.demo import COVARIATES, generate_cohort
from riskbench.demo.cohort_spec import demo_cohort_spec

DEMO_DATA = Path(__file__).resolve().parents[2] / "demo_data"


def _state_counts(cohort) -> dict[str, dict[str, int]]:
    counts: dict[str, dict[str, int]] = {}
    for (table, state), n in cohort.ledger.groupby(["table", "state"]).size().items():
        counts.setdefault(table, {})[state] = int(n)
    return counts


def test_clean_cohort_reproduces_the_generator_intervals() -> None:
    """Same rows, statuses and true-hazard covariates as the generator's own intervals.

    The carry-forward limit of the demo spec (1095 days) is longer than any gap between the generator's
    visits, so it never makes a covariate missing here; otherwise rows would differ by that rule only.
    """
    demo = generate_cohort(300, seed=11, n_risk_paths=0)
    cohort = build_cohort(demo.patients, demo.measurements, demo.outcomes, demo_cohort_spec())
    ours = cohort.counting_process.sort_values(["patient_id", "start"], ignore_index=True)
    truth = demo.truth.intervals.sort_values(["patient_id", "start"], ignore_index=True)
    assert ours.patient_id.tolist() == truth.patient_id.tolist()
    for col in ["start", "stop", "status"]:
        np.testing.assert_array_equal(ours[col].to_numpy(float), truth[col].to_numpy(float), err_msg=col)
    for col in COVARIATES:
        np.testing.assert_allclose(
            ours[col].to_numpy(float), truth[col].to_numpy(float), rtol=0, atol=1e-12, err_msg=col
        )


def test_messy_cohort_ledger_matches_recorded_defects() -> None:
    demo = generate_cohort(250, seed=5, variant="messy", n_risk_paths=0)
    cohort = build_cohort(demo.patients, demo.measurements, demo.outcomes, demo_cohort_spec())
    counts = _state_counts(cohort)
    for table in ("patients", "measurements", "outcomes"):
        assert counts[table] == demo.defects[table], table
    assumed = demo.defects["assumptions"]
    spec = demo_cohort_spec()
    assert (spec.lookback_days, spec.max_carry_days, spec.same_day_rule) == (
        assumed["lookback_days"],
        assumed["max_carry_days"],
        assumed["same_day_rule"],
    )
    for v in spec.variables:
        assert [v.plausible_min, v.plausible_max] == assumed["plausible_ranges"][v.name]
        assert v.factors == assumed["unit_conversions"][v.name]


@pytest.mark.skipif(not (DEMO_DATA / "messy" / "defects.json").exists(), reason="demo_data/messy not generated")
def test_committed_messy_files_through_csv() -> None:
    folder = DEMO_DATA / "messy"
    cohort = build_cohort(
        folder / "patients.csv", folder / "measurements.csv", folder / "outcomes.csv", demo_cohort_spec()
    )
    recorded = json.loads((folder / "defects.json").read_text())
    counts = _state_counts(cohort)
    for table in ("patients", "measurements", "outcomes"):
        assert counts[table] == recorded[table], table
