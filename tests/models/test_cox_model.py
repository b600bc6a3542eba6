"""CoxModel (DataFrame estimator): summaries, predictions and concordance against outside references."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from lifelines import CoxPHFitter, CoxTimeVaryingFitter
from lifelines.datasets import load_rossi
from lifelines.utils import concordance_index

from riskbench.models import CoxModel, ModelInputError

ROSSI_COLS = ["fin", "age", "race", "wexp", "mar", "paro", "prio"]
TIGHT = {"precision": 1e-11, "r_precision": 1e-14}


@pytest.fixture(scope="module")
def rossi() -> pd.DataFrame:
    r = load_rossi().rename(columns={"week": "stop", "arrest": "status"})
    r["patient_id"] = [f"P{i:04d}" for i in range(len(r))]
    return r


def _untied(seed: int, n: int = 250) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    df = pd.DataFrame(rng.normal(size=(n, 2)), columns=["a", "b"])
    df["stop"] = rng.exponential(size=n) * 365 * np.exp(-(0.6 * df["a"] - 0.4 * df["b"]))
    df["status"] = np.where(rng.random(n) < 0.7, 1, 0)
    return df


def test_rossi_summary_and_concordance(rossi):
    """Fox & Weisberg (appendix to An R Companion to Applied Regression): coefficients and
    exp(coef) 0.6843 for fin; Harrell's C 0.64 (here computed with lifelines' concordance_index)."""
    model = CoxModel(ROSSI_COLS, variance="robust").fit(rossi)
    s = model.summary()
    assert s.loc["fin", "coef"] == pytest.approx(-0.3794222, abs=5e-8)
    assert s.loc["fin", "hazard_ratio"] == pytest.approx(0.6843, abs=5e-5)
    assert (s["se_used"] == "robust").all() and model.robust_se_ is not None
    lo, hi = s["hr_lower_95"], s["hr_upper_95"]
    assert ((lo < s["hazard_ratio"]) & (s["hazard_ratio"] < hi)).all()
    z = s["coef"] / s["robust_se"]
    np.testing.assert_allclose(s["p_value"], 2 * (1 - __import__("scipy").stats.norm.cdf(np.abs(z))), rtol=1e-10)
    risk = model.predict_risk(rossi.assign(start=0.0), 52.0)
    c = concordance_index(rossi["stop"], -risk, rossi["status"])
    assert round(c, 2) == 0.64


def test_rossi_model_based_se_equals_lifelines(rossi):
    """Model-based standard errors on Rossi (Efron ties) equal lifelines' CoxPHFitter."""
    model = CoxModel(ROSSI_COLS).fit(rossi)
    peer = CoxPHFitter().fit(rossi[[*ROSSI_COLS, "stop", "status"]], "stop", "status", fit_options=TIGHT)
    np.testing.assert_allclose(model.se_.to_numpy(), peer.standard_errors_.to_numpy(), atol=1e-6)


def test_predictions_match_lifelines_without_ties():
    """Survival curve 1 - risk from a fit on untied data equals lifelines' predict_survival_function
    (Breslow baseline at the covariate means; Efron = Breslow without ties)."""
    df = _untied(1)
    model = CoxModel(["a", "b"]).fit(df)
    peer = CoxPHFitter().fit(df, "stop", "status", fit_options=TIGHT)
    # at event times (lifelines interpolates linearly between them; our curve is a step function)
    times = np.sort(df.loc[df["status"] == 1, "stop"].to_numpy())[[3, 50, 120]]
    expected = peer.predict_survival_function(df.iloc[:20], times=times).to_numpy().T
    np.testing.assert_allclose(model.predict_survival(df.iloc[:20], times), expected, atol=1e-6)
    np.testing.assert_allclose(model.predict_curve(df.iloc[:20], times), 1 - expected, atol=1e-6)


def test_risk_from_landmark_is_conditional():
    """Risk in (s, s+w] = 1 - S(s+w)/S(s) for time-fixed covariates (definition of conditional risk)."""
    df = _untied(2)
    model = CoxModel(["a", "b"]).fit(df)
    rows = df.iloc[:10]
    surv = model.predict_survival(rows, [100.0, 300.0])
    conditional = model.predict_risk(rows.assign(landmark=100.0), 200.0)
    np.testing.assert_allclose(conditional, 1 - surv[:, 1] / surv[:, 0], rtol=1e-12)
    # start is used when there is no landmark column
    np.testing.assert_allclose(model.predict_risk(rows.assign(start=100.0), 200.0), conditional, rtol=1e-12)


def test_time_varying_fit_matches_lifelines_and_predicts_per_stratum():
    """Counting-process rows with strata: coefficients equal lifelines' CoxTimeVaryingFitter; each row
    is predicted from its own stratum's baseline."""
    rng = np.random.default_rng(3)
    n = 400
    df = pd.DataFrame({"patient_id": np.repeat(np.arange(n // 2), 2)})
    df["start"] = np.tile([0.0, 100.0], n // 2)
    df["stop"] = df["start"] + rng.integers(20, 100, n)
    df.loc[df["start"] == 0, "stop"] = 100.0
    df["x"] = rng.normal(size=n)
    df["status"] = np.where((df["start"] > 0) & (rng.random(n) < 0.5), 1, 0)
    df["site"] = np.where(df["patient_id"] % 2 == 0, "north", "south")
    model = CoxModel(["x"], strata="site").fit(df)
    peer = CoxTimeVaryingFitter().fit(
        df[["patient_id", "start", "stop", "status", "x", "site"]],
        id_col="patient_id",
        event_col="status",
        start_col="start",
        stop_col="stop",
        strata=["site"],
    )
    np.testing.assert_allclose(model.coef_.to_numpy(), peer.params_.to_numpy(), atol=1e-6)
    probe = pd.DataFrame({"x": [0.0, 0.0], "site": ["north", "south"], "landmark": [100.0, 100.0]})
    risk = model.predict_risk(probe, 50.0)
    lrh = model.predict_log_relative_hazard(probe)
    for i, site in enumerate(["north", "south"]):
        base = model.baseline_cumhaz_[model.baseline_cumhaz_["stratum"] == site]
        cumhaz = np.r_[0.0, base["cumhaz"].to_numpy()]  # 0 before the stratum's first event
        step = cumhaz[np.searchsorted(base["time"].to_numpy(), [100.0, 150.0], side="right")]
        # Risk in (100, 150] from the row's own stratum: 1 - exp(-(H0(150) - H0(100)) exp(lp)).
        assert risk[i] == pytest.approx(1 - np.exp(-(step[1] - step[0]) * np.exp(lrh[i])), rel=1e-12)
    assert risk[0] != risk[1]
    with pytest.raises(ModelInputError, match="not seen in fitting"):
        model.predict_risk(probe.assign(site=["east", "north"]), 50.0)


def test_competing_status_is_censored():
    """Cause-specific fit: status 2 rows count as censored for event_code=1 and as events for event_code=2."""
    df = _untied(4)
    df.loc[df.index[::5], "status"] = 2
    one = CoxModel(["a", "b"]).fit(df)
    as_censored = CoxModel(["a", "b"]).fit(df.assign(status=df["status"].replace(2, 0)))
    np.testing.assert_allclose(one.coef_, as_censored.coef_, atol=1e-12)
    two = CoxModel(["a", "b"], event_code=2).fit(df)
    assert two.n_events_ == int((df["status"] == 2).sum())


def test_errors_name_the_problem():
    df = _untied(5)
    with pytest.raises(ModelInputError, match="'c'"):
        CoxModel(["a", "c"]).fit(df)
    with pytest.raises(ModelInputError, match="status"):
        CoxModel(["a"]).fit(df.drop(columns="status"))
    with pytest.raises(ModelInputError, match="not fitted"):
        CoxModel(["a"]).predict_risk(df, 30)
    with pytest.raises(ModelInputError, match="cluster='site'"):
        CoxModel(["a"], cluster="site", variance="robust").fit(df)
    with pytest.raises(ModelInputError, match="variance='sandwich'"):
        CoxModel(["a"], variance="sandwich").fit(df)
    model = CoxModel(["a", "b"]).fit(df)
    with pytest.raises(ModelInputError, match="horizon"):
        model.predict_risk(df, -1)
    assert model.get_params()["ties"] == "efron"
    assert model.set_params(penalty=0.1).penalty == 0.1
    from sklearn.base import clone

    assert clone(model).get_params() == model.get_params() and not hasattr(clone(model), "fit_")


def test_veterans_breslow_concordance():
    """scikit-survival user guide (introduction notebook): Breslow Cox fit on the one-hot encoded
    veterans' lung cancer data has Harrell's C 0.73626 (concordance_index_censored on the risk score)."""
    from sksurv.datasets import load_veterans_lung_cancer
    from sksurv.metrics import concordance_index_censored
    from sksurv.preprocessing import OneHotEncoder

    X, y = load_veterans_lung_cancer()
    table = OneHotEncoder().fit_transform(X)
    covariates = list(table.columns)
    table["stop"], table["status"] = y["Survival_in_days"], y["Status"].astype(int)
    model = CoxModel(covariates, ties="breslow", cluster=None).fit(table)
    assert model.robust_se_ is None and (model.summary()["se_used"] == "model").all()
    c = concordance_index_censored(y["Status"], y["Survival_in_days"], model.predict_log_relative_hazard(table))[0]
    assert c == pytest.approx(0.73626, abs=5e-6)


def test_landmark_stack_time_scale_and_event_free_stratum():
    """Fitted on a stack's ``time`` (days from the landmark), risk over w is 1 - exp(-H0(w)·exp(lp)),
    whatever the row's landmark; a stratum without events has zero predicted risk."""
    df = _untied(6).rename(columns={"stop": "time"})
    df["landmark"] = np.where(np.arange(len(df)) % 2 == 0, 0.0, 180.0)
    df["grp"] = np.where(np.arange(len(df)) < 20, "quiet", "busy")
    df.loc[df["grp"] == "quiet", "status"] = 0
    model = CoxModel(["a", "b"], strata="grp", cluster=None).fit(df)
    assert model.time_scale_ == "since_landmark"
    busy = df[df["grp"] == "busy"].iloc[:5]
    base = model.baseline_cumhaz_.query("stratum == 'busy'")
    h0 = base["cumhaz"].to_numpy()[np.searchsorted(base["time"].to_numpy(), 200.0, side="right") - 1]
    expected = 1 - np.exp(-h0 * np.exp(model.predict_log_relative_hazard(busy)))
    np.testing.assert_allclose(model.predict_risk(busy, 200.0), expected, rtol=1e-12)
    np.testing.assert_array_equal(model.predict_risk(df[df["grp"] == "quiet"], 200.0), 0.0)
