"""Checks of the array-level Cox engine against published fits and against lifelines / scikit-survival."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from lifelines import CoxPHFitter, CoxTimeVaryingFitter
from lifelines.datasets import load_dfcv, load_rossi, load_stanford_heart_transplants

from riskbench.models.cox_engine import (
    CoxInputError,
    MonotoneLikelihoodWarning,
    _evaluate,
    _layout,
    _score_residuals,
    fit_cox,
)

# lifelines stops at |step| < 1e-7 by default; tighter so that 1e-6 comparisons test us, not its stopping rule
TIGHT = {"precision": 1e-11, "r_precision": 1e-14}
ROSSI_COLS = ["fin", "age", "race", "wexp", "mar", "paro", "prio"]


def random_counting_process(n_patients: int, p: int, seed: int, n_strata: int = 1) -> pd.DataFrame:
    """Patients with 1–5 consecutive (start, stop] rows on an integer day grid (many tied times)."""
    rng = np.random.default_rng(seed)
    k = rng.integers(1, 6, n_patients)
    pid = np.repeat(np.arange(n_patients), k)
    n = pid.size
    gaps = rng.integers(1, 30, n).astype(float)
    first = np.r_[0, np.cumsum(k)[:-1]]
    cum = np.cumsum(gaps)
    stop = cum - np.repeat(cum[first] - gaps[first], k)
    last = np.r_[first[1:] - 1, n - 1]
    event = np.zeros(n, dtype=int)
    event[last] = rng.random(n_patients) < 0.5
    df = pd.DataFrame({"id": pid, "start": stop - gaps, "stop": stop, "event": event})
    for j in range(p):
        df[f"x{j}"] = rng.normal(size=n) + 0.3 * j
    df["g"] = pid % n_strata
    return df


# --------------------------------------------------------------------------- published fits


def test_stanford_heart_transplant_efron():
    """Crowley & Hu (1977, J Am Stat Assoc 72:27-36) Stanford heart transplant data fitted with R's survival
    package (``coxph(Surv(start, stop, event) ~ age + year + surgery + transplant, data = heart)``, Efron);
    its printed output (**from memory**): coef 0.0272, -0.1463, -0.6372, -0.0103; SE 0.0137, 0.0705, 0.3672,
    0.3138; "Likelihood ratio test=15.1 on 4 df"."""
    df = load_stanford_heart_transplants()
    fit = fit_cox(df[["age", "year", "surgery", "transplant"]], df["stop"], df["event"], df["start"])
    np.testing.assert_allclose(fit.coef, [0.0272, -0.1463, -0.6372, -0.0103], atol=5e-5)
    np.testing.assert_allclose(fit.se, [0.0137, 0.0705, 0.3672, 0.3138], atol=5e-5)
    assert fit.lr_test.statistic == pytest.approx(15.1, abs=0.05)
    assert fit.lr_test.df == 4 and fit.converged


def test_dfcv_time_varying():
    """R. Xu, survival-analysis course notes (UCSD Math 284), the time-varying Cox example on these data:
    coef 1.826757 (SE 1.229), 0.705963 (SE 1.206) (**from memory**)."""
    df = load_dfcv()
    fit = fit_cox(df[["group", "z"]], df["stop"], df["event"], df["start"])
    np.testing.assert_allclose(fit.coef, [1.826757, 0.705963], atol=5e-7)
    np.testing.assert_allclose(fit.se, [1.229, 1.206], atol=5e-4)


def test_rossi_efron():
    """Fox & Weisberg, 'Cox Proportional-Hazards Regression for Survival Data in R' (appendix to An R Companion
    to Applied Regression, section 3: ``coxph(Surv(week, arrest) ~ fin + age + race + wexp + mar + paro + prio,
    data = Rossi)``, Efron ties): LR 33.27 on 7 df as printed there; the coefficients to 7 digits are that R fit's
    at full print precision (**from memory**; the appendix prints them rounded).
    Wald 32.11 and score (logrank) 33.53 are printed in the same R output (**from memory**)."""
    r = load_rossi()
    fit = fit_cox(r[ROSSI_COLS], r["week"], r["arrest"])
    published = [-0.3794222, -0.0574377, 0.3138998, -0.1497957, -0.4337039, -0.0848711, 0.0914971]
    np.testing.assert_allclose(fit.coef, published, atol=5e-8)
    assert fit.lr_test.statistic == pytest.approx(33.27, abs=0.005)
    assert fit.wald_test.statistic == pytest.approx(32.11, abs=0.005)
    assert fit.score_test.statistic == pytest.approx(33.53, abs=0.005)


def test_veterans_breslow():
    """scikit-survival user guide (introduction notebook), veterans' lung cancer data one-hot encoded,
    Breslow ties: Karnofsky score -0.032622, Treatment=test 0.289936; all coefficients also equal
    scikit-survival's CoxPHSurvivalAnalysis (Breslow) on the same data."""
    from sksurv.datasets import load_veterans_lung_cancer
    from sksurv.linear_model import CoxPHSurvivalAnalysis
    from sksurv.preprocessing import OneHotEncoder

    X, y = load_veterans_lung_cancer()
    Xt = OneHotEncoder().fit_transform(X)
    fit = fit_cox(Xt, y["Survival_in_days"], y["Status"], ties="breslow")
    coef = dict(zip(fit.names, fit.coef))
    assert coef["Karnofsky_score"] == pytest.approx(-0.032622, abs=5e-7)
    assert coef["Treatment=test"] == pytest.approx(0.289936, abs=5e-7)
    peer = CoxPHSurvivalAnalysis().fit(Xt, y)
    np.testing.assert_allclose(fit.coef, peer.coef_, atol=1e-6)


# --------------------------------------------------------------------------- agreement with lifelines


def test_matches_lifelines_time_varying_with_ties():
    """lifelines' CoxTimeVaryingFitter (Efron) on random counting-process data with tied times:
    coefficients, standard errors and log-likelihood to 1e-6."""
    df = random_counting_process(250, 3, seed=3)
    cols = ["x0", "x1", "x2"]
    fit = fit_cox(df[cols], df["stop"], df["event"], df["start"])
    peer = CoxTimeVaryingFitter().fit(
        df[["id", "start", "stop", "event", *cols]], id_col="id", event_col="event", start_col="start", stop_col="stop"
    )
    np.testing.assert_allclose(fit.coef, peer.params_.values, atol=1e-6)
    np.testing.assert_allclose(fit.se, peer.standard_errors_.values, atol=1e-6)
    assert fit.loglik == pytest.approx(peer.log_likelihood_, abs=1e-6)


def test_strata_match_lifelines():
    """lifelines' CoxTimeVaryingFitter with strata: separate baselines, common coefficients."""
    df = random_counting_process(250, 2, seed=4, n_strata=3)
    cols = ["x0", "x1"]
    fit = fit_cox(df[cols], df["stop"], df["event"], df["start"], strata=df["g"])
    peer = CoxTimeVaryingFitter().fit(
        df[["id", "start", "stop", "event", "g", *cols]],
        id_col="id",
        event_col="event",
        start_col="start",
        stop_col="stop",
        strata=["g"],
    )
    np.testing.assert_allclose(fit.coef, peer.params_.values, atol=1e-6)
    np.testing.assert_allclose(fit.se, peer.standard_errors_.values, atol=1e-6)
    assert set(fit.baseline["stratum"]) == {0, 1, 2}


def test_ridge_penalty_matches_lifelines_penalizer():
    """lifelines' penalizer λ (l1_ratio=0) maximises loglik - λ·n/2·‖β·sd‖² with sd the ddof=1 standard
    deviation of each covariate; our ``penalty`` uses the same parameterisation."""
    df = random_counting_process(200, 3, seed=5)
    cols = ["x0", "x1", "x2"]
    fit = fit_cox(df[cols], df["stop"], df["event"], df["start"], penalty=0.05)
    peer = CoxTimeVaryingFitter(penalizer=0.05).fit(
        df[["id", "start", "stop", "event", *cols]], id_col="id", event_col="event", start_col="start", stop_col="stop"
    )
    np.testing.assert_allclose(fit.coef, peer.params_.values, atol=1e-6)
    np.testing.assert_allclose(fit.se, peer.standard_errors_.values, atol=1e-6)
    unpenalised = fit_cox(df[cols], df["stop"], df["event"], df["start"])
    assert np.linalg.norm(fit.coef * fit.scale) < np.linalg.norm(unpenalised.coef * unpenalised.scale)


def _untied_time_fixed(seed: int) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    n = 300
    X = rng.normal(size=(n, 3))
    df = pd.DataFrame(X, columns=["a", "b", "c"])
    df["T"] = rng.exponential(size=n) * np.exp(-X @ np.array([0.5, -0.3, 0.2]))
    df["E"] = (rng.random(n) < 0.7).astype(int)
    df["cl"] = rng.integers(0, 60, n)
    df["w"] = rng.integers(1, 4, n).astype(float)
    return df


@pytest.mark.parametrize("weighted", [False, True])
def test_cluster_robust_matches_lifelines(weighted):
    """lifelines' CoxPHFitter(cluster_col=...) sandwich variance on time-fixed data without ties
    (lifelines' score residuals ignore ties, so the comparison uses distinct times)."""
    df = _untied_time_fixed(6)
    fit = fit_cox(df[["a", "b", "c"]], df["T"], df["E"], cluster=df["cl"], weights=df["w"] if weighted else None)
    cols = ["a", "b", "c", "T", "E", "cl"] + (["w"] if weighted else [])
    peer = CoxPHFitter().fit(
        df[cols], "T", "E", cluster_col="cl", weights_col="w" if weighted else None, fit_options=TIGHT
    )
    np.testing.assert_allclose(fit.coef, peer.params_.values, atol=1e-6)
    np.testing.assert_allclose(fit.robust_se, peer.standard_errors_.values, atol=1e-6)
    assert fit.n_clusters == df["cl"].nunique() and fit.robust_wald_test is not None


def test_baseline_matches_lifelines_without_ties():
    """Breslow baseline cumulative hazard at the covariate means equals lifelines' CoxPHFitter
    ``baseline_cumulative_hazard_`` (also at the means) when no times are tied."""
    df = _untied_time_fixed(7)
    fit = fit_cox(df[["a", "b", "c"]], df["T"], df["E"], ties="breslow")
    peer = CoxPHFitter().fit(df[["a", "b", "c", "T", "E"]], "T", "E", fit_options=TIGHT)
    ref = peer.baseline_cumulative_hazard_.iloc[:, 0]
    ref = ref.loc[np.sort(df.loc[df["E"] == 1, "T"].to_numpy())]
    np.testing.assert_allclose(fit.baseline["cumhaz"].to_numpy(), ref.to_numpy(), rtol=1e-6)


def test_efron_baseline_increments_follow_definition():
    """Efron-consistent baseline hazard increment at a tied time (Therneau & Grambsch 2000, sec. 3.3;
    R's survfit for an Efron fit): sum over l of mean_weight / (S0 - l/m · E0), evaluated here by an
    explicit loop over event times at the fitted coefficients."""
    df = random_counting_process(120, 2, seed=8)
    cols = ["x0", "x1"]
    fit = fit_cox(df[cols], df["stop"], df["event"], df["start"])
    risk = np.exp(fit.linear_predictor(df[cols].to_numpy()))
    expected = []
    for t in np.unique(df.loc[df["event"] == 1, "stop"]):
        at_risk = (df["start"] < t) & (df["stop"] >= t)
        died = at_risk & (df["stop"] == t) & (df["event"] == 1)
        s0, e0, m = risk[at_risk].sum(), risk[died].sum(), int(died.sum())
        expected.append(sum(1.0 / (s0 - k / m * e0) for k in range(m)))
    np.testing.assert_allclose(fit.baseline["cumhaz"].to_numpy(), np.cumsum(expected), rtol=1e-9)


# --------------------------------------------------------------------------- internal consistency


@pytest.mark.parametrize("ties", ["efron", "breslow"])
def test_score_information_and_residuals_consistent(ties):
    """Score = numerical gradient of the log-likelihood, information = minus numerical Hessian, and the
    weighted score residuals sum to the score (at a coefficient vector away from the optimum)."""
    df = random_counting_process(150, 3, seed=9)
    X = df[["x0", "x1", "x2"]].to_numpy()
    Xs = (X - X.mean(0)) / X.std(0, ddof=1)
    w = np.random.default_rng(0).uniform(0.5, 2.0, len(df))
    L = _layout(
        df["start"].to_numpy(float),
        df["stop"].to_numpy(float),
        df["event"].to_numpy(float),
        np.zeros(len(df), dtype=np.int64),
        ties,
    )
    Xa, wa = Xs[L.active], w[L.active]
    b = np.array([0.3, -0.2, 0.1])
    s = _evaluate(b, Xa, wa, L)
    eps = 1e-6
    eye = np.eye(3)
    grad = [
        (_evaluate(b + eps * eye[j], Xa, wa, L).loglik - _evaluate(b - eps * eye[j], Xa, wa, L).loglik) / (2 * eps)
        for j in range(3)
    ]
    hess = [
        (_evaluate(b + eps * eye[j], Xa, wa, L).score - _evaluate(b - eps * eye[j], Xa, wa, L).score) / (2 * eps)
        for j in range(3)
    ]
    np.testing.assert_allclose(grad, s.score, atol=1e-5)
    np.testing.assert_allclose(-np.array(hess), s.info, atol=1e-5)
    np.testing.assert_allclose((_score_residuals(Xa, L, s) * wa[:, None]).sum(0), s.score, atol=1e-9)


def test_weights_equal_replicated_rows():
    """Integer case weights give the same fit as replicating the rows (Breslow ties)."""
    df = random_counting_process(100, 2, seed=10)
    w = np.random.default_rng(1).integers(1, 4, len(df))
    rep = df.loc[df.index.repeat(w)]
    a = fit_cox(df[["x0", "x1"]], df["stop"], df["event"], df["start"], weights=w, ties="breslow")
    b = fit_cox(rep[["x0", "x1"]], rep["stop"], rep["event"], rep["start"], ties="breslow")
    np.testing.assert_allclose(a.coef, b.coef, atol=1e-8)
    # the centres differ (unweighted means), so compare the baseline at covariates zero
    at_zero = [f.baseline["cumhaz"] * np.exp(-f.center @ f.coef) for f in (a, b)]
    np.testing.assert_allclose(at_zero[0], at_zero[1], rtol=1e-8)


@settings(max_examples=15, deadline=None)
@given(seed=st.integers(0, 10_000), shift=st.floats(-50, 50))
def test_invariant_to_row_order_and_covariate_shift(seed, shift):
    """The fit does not depend on row order, and shifting a covariate changes only the centre."""
    df = random_counting_process(60, 2, seed=seed)
    base = fit_cox(df[["x0", "x1"]], df["stop"], df["event"], df["start"], cluster=df["id"])
    perm = df.sample(frac=1.0, random_state=seed)
    perm = perm.assign(x0=perm["x0"] + shift)
    other = fit_cox(perm[["x0", "x1"]], perm["stop"], perm["event"], perm["start"], cluster=perm["id"])
    np.testing.assert_allclose(other.coef, base.coef, atol=1e-8)
    np.testing.assert_allclose(other.se, base.se, rtol=1e-6)
    np.testing.assert_allclose(other.robust_se, base.robust_se, rtol=1e-6)
    np.testing.assert_allclose(other.baseline["cumhaz"], base.baseline["cumhaz"], rtol=1e-6)


# --------------------------------------------------------------------------- errors and warnings


def test_input_errors_are_clear():
    df = random_counting_process(50, 2, seed=11)
    X, stop, ev, start = df[["x0", "x1"]], df["stop"], df["event"], df["start"]
    with pytest.raises(CoxInputError, match="no events"):
        fit_cox(X, stop, np.zeros(len(df)), start)
    bad = X.copy()
    bad.iloc[3, 1] = np.nan
    with pytest.raises(CoxInputError, match=r"'x1'.*rows 3"):
        fit_cox(bad, stop, ev, start)
    with pytest.raises(CoxInputError, match="start >= stop"):
        fit_cox(X, stop, ev, stop)
    with pytest.raises(CoxInputError, match="constant"):
        fit_cox(X.assign(k=1.0), stop, ev, start)
    with pytest.raises(CoxInputError, match=r"'x2' = linear combination of \['x0', 'x1'\]"):
        fit_cox(X.assign(x2=2 * X["x0"] - X["x1"]), stop, ev, start)
    with pytest.raises(CoxInputError, match="ties"):
        fit_cox(X, stop, ev, start, ties="exact")
    with pytest.raises(CoxInputError, match="weights"):
        fit_cox(X, stop, ev, start, weights=np.zeros(len(df)))


def test_monotone_likelihood_names_the_coefficient():
    """A covariate that is 1 for every event and 0 for every censored row separates them perfectly."""
    df = random_counting_process(80, 1, seed=12)
    df["sep"] = df["event"] + 0.0
    with pytest.warns(MonotoneLikelihoodWarning, match="'sep'"):
        fit_cox(df[["x0", "sep"]], df["stop"], df["event"], df["start"])


def test_no_warning_on_regular_fit():
    df = random_counting_process(80, 2, seed=13)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        fit = fit_cox(df[["x0", "x1"]], df["stop"], df["event"], df["start"])
    assert fit.converged and fit.n_iter <= 10


def test_efron_score_residuals_equal_explicit_loop():
    """Per-row Efron score residuals for counting-process rows with ties, against an explicit loop over
    event times written from the definition (Therneau & Grambsch 2000, sec. 3.7; each tied event is at
    risk with weight 1 - l/m in the l-th Efron term and compared with the average of the m means)."""
    df = random_counting_process(40, 2, seed=14)
    X = df[["x0", "x1"]].to_numpy()
    Xs = (X - X.mean(0)) / X.std(0, ddof=1)
    start, stop, ev = (df[c].to_numpy(float) for c in ("start", "stop", "event"))
    w = np.ones(len(df))
    L = _layout(start, stop, ev, np.zeros(len(df), dtype=np.int64), "efron")
    b = np.array([0.4, -0.3])
    s = _evaluate(b, Xs[L.active], w[L.active], L)
    fast = np.zeros_like(Xs)
    fast[L.active] = _score_residuals(Xs[L.active], L, s)

    r = np.exp(Xs @ b)
    slow = np.zeros_like(Xs)
    for t in np.unique(stop[ev == 1]):
        at_risk = (start < t) & (stop >= t)
        dead = at_risk & (stop == t) & (ev == 1)
        m = int(dead.sum())
        means = []
        for k in range(m):
            c = np.where(dead, 1.0 - k / m, 1.0) * at_risk
            denom = (r * c).sum()
            xbar = (r * c) @ Xs / denom
            means.append(xbar)
            slow -= (1.0 / denom) * (r * c)[:, None] * (Xs - xbar)
        slow[dead] += Xs[dead] - np.mean(means, axis=0)
    np.testing.assert_allclose(fast, slow, atol=1e-10)
