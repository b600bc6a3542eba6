"""Missing values completely at random in the demo cohort: complete cases and multiple imputation against the
generator's known coefficients.

This is the slow test of the missing-data methods (about 20-40 s on 2 shared cores): 2 500 demo patients
(about 46 000 counting-process rows), 10 imputations, once for a roughly normal imaging variable (log nodule
volume) and once for a bounded one with a strong effect (the suspicion score in [0, 1], log hazard ratio 3.5).

The outside reference is the generator's true hazard (``riskbench.demo.TRUE_COEFFICIENTS``: the log hazard
ratios of the six covariates of a correctly specified time-varying Cox model; see
tests/demo/test_hazard_recovery.py and tests/models/test_demo_truth.py for the same truth used without
missing values). Missing completely at random, complete cases are unbiased but discard the other covariates of
every incomplete row; multiple imputation keeps them, so its intervals are narrower (Little & Rubin 2002,
ch. 3 and 10; White & Royston 2009, Stat Med 28:1982-1998, for the imputation model with the event indicator
and the Nelson–Aalen hazard).
"""

from __future__ import annotations

import numpy as np
import pytest

from riskbench.cohort import build_cohort
from riskbench.demo import COVARIATES, TRUE_COEFFICIENTS, generate_cohort
from riskbench.demo.cohort_spec import demo_cohort_spec
from riskbench.models import CoxModel
from riskbench.models.missing_data import MissingDataModel

REMOVED = ("log_nodule_volume", "suspicion_score")  # each in turn: 30% of its values removed at random


@pytest.fixture(scope="module")
def rows():
    demo = generate_cohort(2500, 11, n_risk_paths=0)
    cohort = build_cohort(demo.patients, demo.measurements, demo.outcomes, demo_cohort_spec())
    return cohort.counting_process.dropna(subset=list(COVARIATES)).reset_index(drop=True)


@pytest.fixture(scope="module", params=REMOVED)
def fits(rows, request):
    rows = rows.copy()
    removed = np.random.default_rng(1).uniform(size=len(rows)) < 0.3
    rows.loc[removed, request.param] = np.nan
    out = {}
    for method in ("complete_cases", "multiple_imputation"):
        model = MissingDataModel(CoxModel(list(COVARIATES)), method=method, imputations=10, random_state=5)
        summary = model.fit(rows).summary()
        out[method] = summary.assign(lower=np.log(summary["hr_lower_95"]), upper=np.log(summary["hr_upper_95"]))
    return out, int(removed.sum()), len(rows), request.param


@pytest.mark.parametrize("method", ["complete_cases", "multiple_imputation"])
def test_true_coefficients_inside_95_percent_intervals(fits, method: str) -> None:
    """Each true β lies inside the method's 95% interval (cluster-robust SE; Rubin's rules with the t reference
    for multiple imputation). Fixed seeds (cohort 11, removal 1, imputations 5)."""
    summary = fits[0][method]
    for name in COVARIATES:
        true = TRUE_COEFFICIENTS[name]
        assert summary.loc[name, "lower"] <= true <= summary.loc[name, "upper"], (method, name, summary.loc[name])


def test_multiple_imputation_intervals_are_narrower_than_complete_cases(fits) -> None:
    """Every fully observed covariate's interval is narrower with multiple imputation (it keeps the 30% of
    rows complete cases drop); the imputed covariate's own interval is not wider (its information comes
    mostly from the rows where it is observed), and the fraction of missing information is largest for it."""
    by_method, n_removed, n_rows, removed = fits
    assert 0.25 < n_removed / n_rows < 0.35
    width = {m: s["upper"] - s["lower"] for m, s in by_method.items()}
    ratio = width["multiple_imputation"] / width["complete_cases"]
    observed = [c for c in COVARIATES if c != removed]
    assert (ratio[observed] < 1).all(), ratio
    assert ratio[removed] <= 1.0, ratio
    fmi = by_method["multiple_imputation"]["fraction_missing_info"]
    assert fmi.idxmax() == removed and fmi[removed] > 0.1
