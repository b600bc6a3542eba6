"""The Cox model recovers the generator's coefficients on the committed demo cohort."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from riskbench.models import CoxModel

DEMO = Path(__file__).resolve().parents[2] / "demo_data" / "clean"


@pytest.mark.skipif(not (DEMO / "truth.json").exists(), reason="committed demo cohort not present")
def test_true_coefficients_inside_99_percent_intervals():
    """The demo generator's hazard is exp(β·x) times a Weibull baseline with x the six counting-process
    covariates (truth.json), so the Cox model on those columns is correctly specified: each true β lies in
    its 99% robust interval (fixed seed of the committed cohort)."""
    from riskbench.cohort import build_cohort
    from riskbench.demo.cohort_spec import demo_cohort_spec

    cohort = build_cohort(
        *(DEMO / f"{t}.parquet" for t in ("patients", "measurements", "outcomes")), demo_cohort_spec()
    )
    truth = json.loads((DEMO / "truth.json").read_text())["coefficients"]
    model = CoxModel(list(truth)).fit(cohort.counting_process)
    summary = model.summary(alpha=0.01)
    true_hr = np.exp(np.array([truth[c] for c in summary.index]))
    assert np.all(summary["hr_lower_99"].to_numpy() < true_hr)
    assert np.all(true_hr < summary["hr_upper_99"].to_numpy())
    assert model.fit_.converged and model.n_events_ > 100
