"""CoxModel.fit_summary: sizes, −2 log L, global tests and concordance against outside references.

Data: the recidivism data of Rossi, Berk & Lenihan (1980, *Money, Work and Crime*, Academic Press) as shipped
with lifelines (``lifelines.datasets.load_rossi``: 432 released prisoners, 114 re-arrests within 52 weeks).
References: lifelines' ``CoxPHFitter`` (Efron ties, the usual default) for −2 log L, the likelihood-ratio
statistic, the Wald statistic β'V⁻¹β and Harrell's C; statsmodels' ``PHReg`` score and Hessian at β = 0 for
the score test (lifelines has no public score test).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st
from lifelines import CoxPHFitter
from lifelines.datasets import load_rossi
from statsmodels.duration.hazard_regression import PHReg

from riskbench.models import CoxModel, CoxSummary, ModelInputError

ROSSI_COLS = ["fin", "age", "race", "wexp", "mar", "paro", "prio"]
TIGHT = {"precision": 1e-11, "r_precision": 1e-14}


@pytest.fixture(scope="module")
def rossi() -> pd.DataFrame:
    return load_rossi()


@pytest.fixture(scope="module")
def summary(rossi) -> CoxSummary:
    model = CoxModel(ROSSI_COLS, stop_column="week", status_column="arrest").fit(rossi)
    return model.fit_summary(rossi)


@pytest.fixture(scope="module")
def peer(rossi) -> CoxPHFitter:
    return CoxPHFitter().fit(rossi, "week", "arrest", fit_options=TIGHT)


def test_likelihoods_and_tests_equal_lifelines(summary, peer):
    assert summary.minus2_loglik == pytest.approx(-2 * peer.log_likelihood_, abs=1e-6)
    lr = peer.log_likelihood_ratio_test()
    assert summary.likelihood_ratio.statistic == pytest.approx(lr.test_statistic, abs=1e-6)
    assert summary.likelihood_ratio.df == lr.degrees_freedom == 7
    assert summary.minus2_loglik_null - summary.minus2_loglik == pytest.approx(lr.test_statistic, abs=1e-6)
    beta, var = peer.params_.to_numpy(), peer.variance_matrix_.to_numpy()
    assert summary.wald.statistic == pytest.approx(float(beta @ np.linalg.solve(var, beta)), abs=1e-6)
    assert summary.concordance == pytest.approx(peer.concordance_index_, abs=1e-10)
    assert (summary.n_rows, summary.n_events, summary.n_patients) == (432, 114, None)
    assert summary.variance == "model" and summary.ties == "efron"


def test_null_likelihood_and_score_test_equal_statsmodels(rossi, summary):
    ph = PHReg(rossi["week"], rossi[ROSSI_COLS], status=rossi["arrest"], ties="efron")
    zero = np.zeros(len(ROSSI_COLS))
    score, info = ph.score(zero), -ph.hessian(zero)
    assert summary.score.statistic == pytest.approx(float(score @ np.linalg.solve(info, score)), abs=1e-6)
    assert summary.minus2_loglik_null == pytest.approx(-2 * ph.loglike(zero), abs=1e-6)


def test_rossi_global_tests_as_published(summary):
    """Fox & Weisberg, "Cox Proportional-Hazards Regression for Survival Data in R" (appendix to An R Companion
    to Applied Regression, 2nd ed., 2011), the coxph printout for this model: likelihood ratio 33.27, Wald 32.11,
    score (logrank) 33.53, all on 7 df (**from memory**)."""
    tests = summary.tests()
    assert tests["statistic"].round(2).tolist() == [33.27, 33.53, 32.11]
    assert (tests["df"] == 7).all()


def test_named_columns_and_renamed_columns_give_identical_results(rossi, summary):
    renamed = rossi.rename(columns={"week": "stop", "arrest": "status"})
    default_names = CoxModel(ROSSI_COLS).fit(renamed)
    again = default_names.fit_summary(renamed)
    pd.testing.assert_frame_equal(again.coefficients, summary.coefficients, check_exact=True)
    assert again.tests().equals(summary.tests()) and again.facts().equals(summary.facts())
    odd = rossi.rename(columns={"week": "weeks to arrest", "arrest": "re-arrested"})
    odd_fit = CoxModel(ROSSI_COLS, stop_column="weeks to arrest", status_column="re-arrested").fit(odd)
    np.testing.assert_array_equal(odd_fit.coef_.to_numpy(), default_names.coef_.to_numpy())


def _two_rows_per_patient(rossi: pd.DataFrame) -> pd.DataFrame:
    """Each Rossi subject split at week 20 into two (start, stop] rows: the same partial likelihood."""
    first = rossi.assign(
        start=0.0, stop=np.minimum(rossi["week"], 20.0), status=np.where(rossi["week"] <= 20, rossi["arrest"], 0)
    )
    second = rossi[rossi["week"] > 20].assign(start=20.0, stop=lambda d: d["week"], status=lambda d: d["arrest"])
    rows = pd.concat([first.assign(pid=rossi.index), second.assign(pid=second.index)], ignore_index=True)
    return rows.drop(columns=["week", "arrest"])


def test_counting_process_rows_with_named_start_and_id(rossi, summary):
    rows = _two_rows_per_patient(rossi).rename(columns={"start": "entry", "stop": "exit", "status": "ended"})
    model = CoxModel(ROSSI_COLS, start_column="entry", stop_column="exit", status_column="ended", cluster="pid")
    split = model.fit(rows).fit_summary(rows)
    assert split.n_patients == 432 and split.n_rows == len(rows) > 432 and split.n_events == 114
    np.testing.assert_allclose(split.coefficients["coef"], summary.coefficients["coef"], atol=1e-9)
    assert split.likelihood_ratio.statistic == pytest.approx(summary.likelihood_ratio.statistic, abs=1e-8)
    assert split.concordance == pytest.approx(summary.concordance, abs=1e-12)  # same risk sets, same pairs
    plain = CoxModel(ROSSI_COLS, cluster="pid").fit(_two_rows_per_patient(rossi))
    np.testing.assert_allclose(
        model.predict_risk(rows, 20.0), plain.predict_risk(_two_rows_per_patient(rossi), 20.0), rtol=1e-10
    )  # predicted from the named start column, as from 'start'


def test_robust_variance_only_when_asked(rossi):
    """A patient id column no longer switches the standard errors; variance="robust" gives lifelines'
    cluster-robust ones (CoxPHFitter with cluster_col) and the robust Wald test. lifelines' score residuals
    ignore ties, so the weeks are made distinct (a deterministic shift of at most 0.00432 week)."""
    table = rossi.assign(patient_id=np.arange(len(rossi)) // 2, week=rossi["week"] + np.arange(len(rossi)) * 1e-5)
    plain = CoxModel(ROSSI_COLS, stop_column="week", status_column="arrest").fit(table)
    assert plain.robust_se_ is None and (plain.summary()["se_used"] == "model").all()
    robust = CoxModel(ROSSI_COLS, stop_column="week", status_column="arrest", variance="robust").fit(table)
    peer = CoxPHFitter().fit(table, "week", "arrest", cluster_col="patient_id", fit_options=TIGHT)
    s = robust.fit_summary(table)
    np.testing.assert_allclose(s.coefficients["robust_se"], peer.standard_errors_, atol=1e-6)
    assert (s.coefficients["se_used"] == "robust").all() and s.variance == "robust" and s.n_patients == 216
    beta, var = robust.coef_.to_numpy(), robust.fit_.robust_var  # its diagonal is lifelines' (checked above)
    assert s.wald.statistic == pytest.approx(float(beta @ np.linalg.solve(var, beta)), rel=1e-10)
    assert s.wald.statistic != pytest.approx(plain.fit_summary(table).wald.statistic, rel=1e-3)
    assert "Wald (robust)" in s.tests().index


def test_stratified_concordance_counts_pairs_within_strata():
    """Brute force (every pair within a stratum whose earlier time is an event, ties in risk one half)."""
    rng = np.random.default_rng(11)
    n = 160
    df = pd.DataFrame({"x": rng.normal(size=n), "site": np.where(rng.random(n) < 0.5, "n", "s")})
    df["stop"] = np.round(rng.exponential(size=n) * 100 * np.exp(-0.7 * df["x"])) + 1
    df["status"] = (rng.random(n) < 0.7).astype(int)
    model = CoxModel(["x"], strata="site").fit(df)
    s = model.fit_summary(df)
    lp, t, e, g = df["x"].to_numpy() * model.coef_["x"], df["stop"].to_numpy(), df["status"].to_numpy(), df["site"]
    num = den = 0.0
    for i in range(n):
        if not e[i]:
            continue
        later = (g.to_numpy() == g.iloc[i]) & ((t > t[i]) | ((t == t[i]) & (e == 0)))
        den += later.sum()
        num += (lp[i] > lp[later]).sum() + 0.5 * (lp[i] == lp[later]).sum()
    assert s.concordance == pytest.approx(num / den, abs=1e-12)
    assert np.isnan(s.concordance_se)


def test_html_display_escapes_names():
    rng = np.random.default_rng(2)
    df = pd.DataFrame(
        {
            "<script>alert(1)</script>": rng.normal(size=80),
            "stop": rng.exponential(size=80) + 0.1,
            "status": rng.integers(0, 2, 80),
        }
    )
    model = CoxModel(["<script>alert(1)</script>"]).fit(df)
    page = model.fit_summary(df)._repr_html_()
    assert "<script>" not in page and "&lt;script&gt;alert(1)&lt;/script&gt;" in page
    assert "not a medical device" in page and "-2 log L (model)" in page


def test_summary_refuses_another_table(rossi):
    model = CoxModel(ROSSI_COLS, stop_column="week", status_column="arrest").fit(rossi)
    with pytest.raises(ModelInputError, match="fitted on 432 rows"):
        model.fit_summary(rossi.iloc[:100])
    with pytest.raises(ModelInputError, match="stop_column="):
        CoxModel(ROSSI_COLS).fit(rossi)


@settings(max_examples=8, deadline=None)
@given(scale=st.floats(0.01, 100.0), shift=st.floats(-1000.0, 1000.0), seed=st.integers(0, 10_000))
def test_global_tests_do_not_depend_on_units_or_row_order(rossi, summary, scale, shift, seed):
    """The global tests of β = 0 are invariant under a change of a covariate's units and origin (a non-singular
    linear reparametrisation), and under reordering rows (definition of the partial likelihood)."""
    assume(abs(scale - 1.0) > 1e-3)
    changed = rossi.assign(age=rossi["age"] * scale + shift).sample(frac=1.0, random_state=seed)
    again = CoxModel(ROSSI_COLS, stop_column="week", status_column="arrest").fit(changed).fit_summary(changed)
    for name in ("likelihood_ratio", "score", "wald"):
        assert getattr(again, name).statistic == pytest.approx(getattr(summary, name).statistic, rel=1e-7), name
    assert again.minus2_loglik == pytest.approx(summary.minus2_loglik, rel=1e-10)
    assert again.concordance == pytest.approx(summary.concordance, abs=1e-12)
    assert again.coefficients.loc["age", "coef"] == pytest.approx(
        summary.coefficients.loc["age", "coef"] / scale, rel=1e-6
    )
