"""Bootstrap optimism of an update's calibration on the cohort it was estimated on
(riskbench.validation.update_optimism)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from riskbench.metrics.calibration import target_status
from riskbench.metrics.censoring import aalen_johansen
from riskbench.validation.update_optimism import calibration_measures, update_optimism
from riskbench.validation.updating import UpdatingRows, fit_update


@pytest.fixture(scope="module")
def shifted_rows():
    """A fixed risk model on simulated rows whose true risk is 1.6 times higher (cumulative hazard scale)."""
    from riskbench.metrics.pseudo_observations import pseudo_observations

    rng = np.random.default_rng(3)
    n = 1500
    x = rng.normal(size=(n, 2))
    risk = -np.expm1(-np.exp(-2.5 + x @ np.array([0.8, 0.4])))
    true = -np.expm1(-1.6 * np.exp(-2.5 + x @ np.array([0.8, 0.4])))
    event_time = np.where(rng.uniform(size=n) < true, rng.uniform(1, 730, n), np.inf)
    censor = rng.uniform(200, 1500, n)
    time = np.minimum(event_time, censor)
    status = (event_time <= censor).astype(int)
    rows = UpdatingRows(
        730.5,
        "cumulative_incidence",
        risk,
        pseudo_observations(time, status, 730.5),
        np.zeros(n),
        np.arange(n),
        ("x1", "x2"),
        x,
    )
    return rows, time, target_status(status, "cumulative_incidence")


def test_measures_agree_with_an_outside_estimate_of_the_observed_risk(shifted_rows):
    """The observed risk in the O/E is the Aalen–Johansen estimate; lifelines' estimator gives the same
    number (Aalen & Johansen 1978)."""
    from lifelines import AalenJohansenFitter

    rows, time, status = shifted_rows
    measures = calibration_measures(time, status, rows.pseudo, rows.risk, 730.5)
    fitter = AalenJohansenFitter(calculate_variance=False).fit(time, status, event_of_interest=1)
    observed = float(fitter.cumulative_density_.loc[:730.5].iloc[-1, 0])
    assert measures["oe_ratio"] == pytest.approx(observed / rows.risk.mean(), rel=1e-9)
    assert observed == pytest.approx(aalen_johansen(time, status, 1)(730.5), rel=1e-9)


def test_optimism_is_small_for_one_parameter_and_larger_for_a_revision(shifted_rows):
    rows, time, status = shifted_rows
    fits = {m: fit_update(rows, m) for m in ("in_the_large", "revision")}
    table = update_optimism(rows, time, status, fits, n_boot=40, seed=2)
    wide = table.set_index(["method", "metric"])
    assert set(table["method"]) == {"in_the_large", "revision"} and (table["resamples"] == 40).all()
    assert wide.loc[("in_the_large", "oe_ratio"), "apparent"] == pytest.approx(1.0, abs=0.03)
    assert abs(wide.loc[("in_the_large", "oe_ratio"), "optimism"]) < 0.03
    # the revision fits three more parameters to the same rows: its calibration slope is more optimistic
    assert (
        wide.loc[("revision", "calibration_slope"), "optimism"]
        > wide.loc[("in_the_large", "calibration_slope"), "optimism"]
    )
    corrected = wide["apparent"] - wide["optimism"]
    assert np.allclose(corrected, wide["corrected"])
    again = update_optimism(rows, time, status, fits, n_boot=40, seed=2)
    pd.testing.assert_frame_equal(table, again)  # seeded


def test_without_replicates_the_optimism_is_unknown_not_zero(shifted_rows):
    rows, time, status = shifted_rows
    table = update_optimism(rows, time, status, {"slope": fit_update(rows, "slope")}, n_boot=0, seed=0)
    assert table["optimism"].isna().all() and (table["resamples"] == 0).all()


def test_a_revision_of_a_model_whose_risk_is_its_covariates_drops_one_aliased_correction(shifted_rows):
    """z = cloglog(risk) is exactly −2.5 + 0.8·x1 + 0.4·x2 here, as a Cox model's z is its baseline plus its linear
    predictor, so intercept, slope and both corrections cannot all be estimated (the design is singular). The
    last correction is reported aliased (kept at 0, no SE), and the updated risks do not depend on which one
    that is: fitting with the covariates in the other order gives the same risks (the same model space)."""
    from dataclasses import replace

    rows, _, _ = shifted_rows
    forward = fit_update(rows, "revision")
    swapped_rows = replace(rows, covariates=rows.covariates[::-1], x=rows.x[:, ::-1])
    backward = fit_update(swapped_rows, "revision")
    assert forward.aliased == ("correction:x2",) and backward.aliased == ("correction:x1",)
    table = forward.table().set_index("term")
    assert table.loc["correction:x2", "estimate"] == 0.0 and np.isnan(table.loc["correction:x2", "se"])
    np.testing.assert_allclose(
        forward.risk(rows.risk, rows.landmark, rows.x),
        backward.risk(rows.risk, rows.landmark, swapped_rows.x),
        rtol=1e-6,
    )
