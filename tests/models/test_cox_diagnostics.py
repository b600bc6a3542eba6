"""Schoenfeld residuals and the Grambsch–Therneau proportional-hazards test."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from lifelines import CoxPHFitter
from lifelines.datasets import load_rossi
from lifelines.statistics import proportional_hazard_test
from scipy.stats import chi2

from riskbench.models import CoxModel, ModelInputError, proportional_hazards_test, schoenfeld_residuals

ROSSI_COLS = ["fin", "age", "race", "wexp", "mar", "paro", "prio"]


@pytest.fixture(scope="module")
def rossi_fit():
    r = load_rossi()
    table = r.rename(columns={"week": "stop", "arrest": "status"})
    model = CoxModel(ROSSI_COLS).fit(table)
    peer = CoxPHFitter().fit(r, "week", "arrest", fit_options={"precision": 1e-11, "r_precision": 1e-14})
    return r, table, model, peer


@pytest.mark.parametrize("transform", ["km", "identity", "log"])
def test_ph_test_matches_lifelines_on_rossi(rossi_fit, transform):
    """lifelines' proportional_hazard_test (Grambsch & Therneau 1994 approximation, as R's cox.zph before
    survival 3.0) on Rossi: same per-covariate statistics for the km, identity and log transforms."""
    r, table, model, peer = rossi_fit
    ours = proportional_hazards_test(model, table, transform=transform)
    summary = proportional_hazard_test(peer, r, time_transform=transform).summary
    np.testing.assert_allclose(ours.loc[ROSSI_COLS, "statistic"], summary["test_statistic"].loc[ROSSI_COLS], rtol=1e-6)
    np.testing.assert_allclose(ours.loc[ROSSI_COLS, "p_value"], summary["p"].loc[ROSSI_COLS], rtol=1e-5)
    assert ours.attrs["transform"] == transform
    # The global test is chi-squared on one degree of freedom per covariate (Grambsch & Therneau 1994, section 3).
    assert ours.loc["GLOBAL", "df"] == len(ROSSI_COLS)
    np.testing.assert_allclose(ours["p_value"], chi2.sf(ours["statistic"], ours["df"]), rtol=1e-10)


def test_scaled_residuals_match_lifelines(rossi_fit):
    """Scaled Schoenfeld residuals d·V·r (+β here, as R adds it) equal lifelines' (which omits β)."""
    r, table, model, peer = rossi_fit
    ours = schoenfeld_residuals(model, table, scaled=True)
    theirs = peer.compute_residuals(r, kind="scaled_schoenfeld")
    ours_sorted = ours.set_index("row").loc[theirs.index, ROSSI_COLS].to_numpy() - model.coef_.to_numpy()
    np.testing.assert_allclose(ours_sorted, theirs[ROSSI_COLS].to_numpy(), atol=1e-6)
    unscaled = schoenfeld_residuals(model, table)
    np.testing.assert_allclose(unscaled[ROSSI_COLS].sum().to_numpy(), 0.0, atol=1e-6)  # score at the MLE


def _simulate(beta_late: float, seed: int, n: int = 1500) -> pd.DataFrame:
    """x has log hazard ratio 0.8 before day 200 and ``beta_late`` after (piecewise exponential)."""
    rng = np.random.default_rng(seed)
    x = rng.normal(size=n)
    t1 = rng.exponential(200 / np.exp(0.8 * x))
    t2 = 200 + rng.exponential(200 / np.exp(beta_late * x))
    t = np.where(t1 < 200, t1, t2)
    cens = rng.uniform(100, 800, n)
    return pd.DataFrame({"x": x, "stop": np.minimum(t, cens), "status": (t <= cens).astype(int)})


def test_ph_test_detects_a_changing_effect_and_global_equals_single():
    """Simulation (fixed seeds): a log hazard ratio that drops from 0.8 to -0.4 is flagged; a constant one
    is not. With one covariate the global statistic equals the per-covariate one."""
    changing = _simulate(-0.4, seed=1)
    constant = _simulate(0.8, seed=2)
    res_changing = proportional_hazards_test(CoxModel(["x"]).fit(changing), changing, "km")
    res_constant = proportional_hazards_test(CoxModel(["x"]).fit(constant), constant, "km")
    assert res_changing.loc["x", "p_value"] < 1e-6
    assert res_constant.loc["x", "p_value"] > 0.01
    assert res_changing.loc["GLOBAL", "statistic"] == pytest.approx(res_changing.loc["x", "statistic"], rel=1e-10)
    rank = proportional_hazards_test(CoxModel(["x"]).fit(changing), changing, "rank")
    assert rank.loc["x", "p_value"] < 1e-6


def test_ph_test_errors(rossi_fit):
    _, table, model, _ = rossi_fit
    with pytest.raises(ModelInputError, match="transform"):
        proportional_hazards_test(model, table, transform="sqrt")
    with pytest.raises(ModelInputError, match="events"):
        proportional_hazards_test(model, table.iloc[:200], transform="km")


def _stack(seed: int = 4, n: int = 400) -> pd.DataFrame:
    """A small landmark stack (two landmarks, rows of one patient share x2) with an outcome depending on x1, x2."""
    rng = np.random.default_rng(seed)
    x1, x2 = rng.normal(size=n), rng.binomial(1, 0.4, n).astype(float)
    t = rng.exponential(500 / np.exp(0.7 * x1 + 0.5 * x2))
    cens = rng.uniform(100, 730, n)
    return pd.DataFrame(
        {
            "patient_id": np.arange(n) % 250,
            "landmark": np.where(np.arange(n) < 250, 0.0, 182.625),
            "time": np.maximum(np.round(np.minimum(t, cens)), 1.0),
            "status": (t <= cens).astype(int),
            "x1": x1,
            "x2": np.where(rng.uniform(size=n) < 0.05, np.nan, x2),
        }
    )


@pytest.mark.parametrize("baseline", ["stratified", "smooth"])
def test_landmark_refit_is_the_supermodels_outcome_model(baseline):
    """The plain Cox refit of a landmark super-model's design has the super-model's outcome coefficients."""
    from riskbench.models import LandmarkSupermodel
    from riskbench.models.cox_diagnostics import cox_refit

    stack = _stack()
    params = {"landmark_effects": "linear", "baseline": baseline}
    refit = cox_refit("landmark_cox", ["x1", "x2"], params, stack)
    direct = LandmarkSupermodel(["x1", "x2"], competing=False, **params).fit(stack.dropna())
    np.testing.assert_allclose(refit.model.coef_.to_numpy(), direct.coef_, rtol=1e-9, atol=1e-12)
    assert refit.rows_left_out == int(stack["x2"].isna().sum()) and refit.time_origin == "landmark"


def test_nested_refits_give_lifelines_likelihood_ratio():
    """Nested refits on the same complete rows: the LR statistic equals 2 x the difference of lifelines'
    CoxPHFitter log partial likelihoods (Efron ties, strata = landmark) on the same design."""
    from riskbench.models.cox_diagnostics import cox_refit
    from riskbench.validation.likelihood_ratio import nested_cox_lr_test

    stack = _stack(seed=9)
    params = {"landmark_effects": "linear", "baseline": "stratified"}
    small, large = (
        cox_refit("landmark_cox", c, params, stack, complete_on=["x1", "x2"]) for c in (["x1"], ["x1", "x2"])
    )
    ours = nested_cox_lr_test(small.model, large.model)
    lls = []
    for refit in (small, large):
        peer = CoxPHFitter().fit(
            refit.table, "time", "status", strata=["landmark"], fit_options={"precision": 1e-11, "r_precision": 1e-14}
        )
        lls.append(peer.log_likelihood_)
    assert ours.df == 2 and ours.statistic == pytest.approx(2 * (lls[1] - lls[0]), rel=1e-6)


def test_refit_refuses_a_forest():
    from riskbench.models.cox_diagnostics import cox_refit

    with pytest.raises(ModelInputError, match="not a Cox model"):
        cox_refit("forest", ["x1"], {}, _stack())
