"""Harrell's, Uno's and the counting-process concordance.

Outside checks: scikit-survival's ``concordance_index_censored`` / ``concordance_index_ipcw`` and lifelines'
``concordance_index`` on the same inputs (agreement to 1e-6, peer libraries run live in the test);
McLernon et al. (2023), Ann Intern Med, GBSG2 validation: Harrell's C 0.65 and Uno's C 0.64 (2 decimals as printed).
"""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from lifelines.utils import concordance_index
from sksurv.metrics import concordance_index_censored, concordance_index_ipcw
from sksurv.util import Surv

from riskbench.metrics import (
    MetricInputError,
    concordance_counting_process,
    concordance_harrell,
    concordance_uno,
)


def test_harrell_agrees_with_scikit_survival_and_lifelines(shipped):
    ours = concordance_harrell(shipped.time, shipped.event, shipped.risk)
    ref = concordance_index_censored(shipped.event, shipped.time, shipped.risk)
    assert ours.estimate == pytest.approx(ref[0], abs=1e-6)
    assert (ours.concordant, ours.discordant, ours.tied_risk, ours.tied_time) == tuple(int(v) for v in ref[1:])
    # lifelines takes a predicted survival time (higher = better): negate the risk
    assert ours.estimate == pytest.approx(concordance_index(shipped.time, -shipped.risk, shipped.event), abs=1e-6)


def test_uno_agrees_with_scikit_survival(shipped):
    y = Surv.from_arrays(shipped.event, shipped.time)
    tau = float(shipped.horizons[-1])
    ours = concordance_uno(shipped.time, shipped.event, shipped.risk, tau)
    assert ours.estimate == pytest.approx(concordance_index_ipcw(y, y, shipped.risk, tau)[0], abs=1e-6)


def test_uno_with_separate_training_data_agrees_with_scikit_survival(shipped):
    half = np.arange(shipped.time.size) % 2 == 0
    train = Surv.from_arrays(shipped.event, shipped.time)  # full data covers every test time
    test = Surv.from_arrays(shipped.event[half], shipped.time[half])
    tau = float(shipped.horizons[-1])
    ours = concordance_uno(
        shipped.time[half],
        shipped.event[half],
        shipped.risk[half],
        tau,
        train_time=shipped.time,
        train_event=shipped.event,
    )
    assert ours.estimate == pytest.approx(concordance_index_ipcw(train, test, shipped.risk[half], tau)[0], abs=1e-6)


@settings(max_examples=40, deadline=None)
@given(seed=st.integers(0, 10_000), n=st.integers(5, 120), n_times=st.integers(2, 8), n_scores=st.integers(1, 5))
def test_heavy_ties_agree_with_scikit_survival(seed, n, n_times, n_scores):
    rng = np.random.default_rng(seed)
    t = rng.integers(1, n_times + 1, n).astype(float)
    e = rng.random(n) < 0.6
    e[0] = True
    t[0] = 1.0  # at least one outcome with someone after it
    t[1] = n_times + 1.0
    r = rng.integers(0, n_scores, n).astype(float)
    ours = concordance_harrell(t, e, r, with_se=False)
    ref = concordance_index_censored(e, t, r)
    assert ours.estimate == pytest.approx(ref[0], abs=1e-9)
    assert (ours.concordant, ours.discordant, ours.tied_risk) == tuple(int(v) for v in ref[1:4])


def test_mclernon_gbsg2_published_c(gbsg2_five_years):
    """McLernon et al. (2023), GBSG2 with administrative censoring at 5 y: Harrell 0.65, Uno 0.64."""
    t, e, risk = gbsg2_five_years
    assert round(concordance_harrell(t, e, risk).estimate, 2) == 0.65
    assert round(concordance_uno(t, e, risk, 4.99).estimate, 2) == 0.64


def _simulated(n, seed):
    rng = np.random.default_rng(seed)
    x = rng.normal(size=n)
    t_event = rng.exponential(np.exp(-x))
    t_cens = rng.exponential(1.5, n)
    return np.minimum(t_event, t_cens), (t_event <= t_cens).astype(int), x


@pytest.mark.parametrize("which", ["harrell", "uno"])
def test_standard_error_matches_bootstrap(which):
    """Infinitesimal jackknife vs 200 bootstrap replicates; loose tolerance (±30%) for bootstrap noise."""
    t, e, x = _simulated(400, 11)
    fn = (
        (lambda a, b, c, **k: concordance_harrell(a, b, c, **k))
        if which == "harrell"
        else (lambda a, b, c, **k: concordance_uno(a, b, c, 1.5, **k))
    )
    se = fn(t, e, x).se
    rng = np.random.default_rng(0)
    boots = [fn(t[i], e[i], x[i], with_se=False).estimate for i in (rng.integers(0, 400, 400) for _ in range(200))]
    assert se == pytest.approx(np.std(boots), rel=0.3)


def _brute_counting_process(start, stop, event, risk):
    num = den = 0.0
    for i in np.flatnonzero(event == 1):
        at_risk = (start < stop[i]) & ((stop > stop[i]) | ((stop == stop[i]) & (event != 1)))
        at_risk[i] = False
        den += at_risk.sum()
        num += (risk[at_risk] < risk[i]).sum() + 0.5 * (risk[at_risk] == risk[i]).sum()
    return num / den, den


def test_counting_process_matches_risk_set_definition():
    rng = np.random.default_rng(5)
    rows = []
    for pid in range(60):
        cuts = np.sort(rng.choice(np.arange(1, 15), rng.integers(1, 4), replace=False)).astype(float)
        begin = 0.0
        for j, c in enumerate(cuts):
            rows.append((pid, begin, c, int(j == cuts.size - 1 and rng.random() < 0.5), float(rng.integers(0, 5))))
            begin = c
    a = np.array(rows)
    ours = concordance_counting_process(a[:, 1], a[:, 2], a[:, 3], a[:, 4], patient_id=a[:, 0])
    est, den = _brute_counting_process(a[:, 1], a[:, 2], a[:, 3], a[:, 4])
    assert ours.estimate == pytest.approx(est, abs=1e-12)
    assert ours.comparable == den
    assert 0 < ours.se < 0.2


def test_counting_process_with_one_row_each_equals_harrell():
    t, e, x = _simulated(300, 2)
    cp = concordance_counting_process(np.zeros(300), t, e, x)
    h = concordance_harrell(t, e, x)
    assert cp.estimate == pytest.approx(h.estimate, abs=1e-12)
    assert cp.se == pytest.approx(h.se, rel=1e-9)


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 10_000))
def test_random_scores_near_half_and_perfect_ordering_one(seed):
    """Common practice: C ≈ 0.5 for an unrelated score (within 4 standard errors), 1.0 for a perfect order."""
    rng = np.random.default_rng(seed)
    t = rng.exponential(1.0, 400)
    e = np.ones(400, dtype=int)
    c = concordance_harrell(t, e, rng.random(400))
    assert abs(c.estimate - 0.5) < 4 * c.se
    assert concordance_harrell(t, e, -t).estimate == 1.0


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 10_000))
def test_invariant_to_increasing_transform(seed):
    t, e, x = _simulated(200, seed)
    a = concordance_harrell(t, e, x)
    # strictly increasing and never squeezing differences under the 1e-8 tie tolerance
    b = concordance_harrell(t, e, x**3 + 2 * x + 7)
    assert a.estimate == b.estimate
    assert concordance_uno(t, e, x, 1.0).estimate == concordance_uno(t, e, 10 * x - 3, 1.0).estimate


def test_competing_event_is_comparable_with_every_outcome():
    """Wolbers et al. (2009): a subject with a competing event is treated as never having the outcome."""
    t = np.array([1.0, 2.0, 3.0])
    status = np.array([2, 1, 0])
    c = concordance_harrell(t, status, np.array([0.1, 0.9, 0.5]))
    assert c.comparable == 2 and c.estimate == 1.0


def test_bad_input_messages():
    t, e, x = np.array([1.0, 2.0, 3.0]), np.array([1, 0, 1]), np.array([0.3, 0.2, 0.1])
    with pytest.raises(MetricInputError, match=r"differ|entries"):
        concordance_harrell(t, e[:2], x)
    with pytest.raises(MetricInputError, match=r"`risk`.*missing"):
        concordance_harrell(t, e, np.array([0.1, np.nan, 0.2]))
    with pytest.raises(MetricInputError, match="coded 0"):
        concordance_uno(t, np.array([1, 3, 0]), x, 2.5)
    with pytest.raises(MetricInputError, match="no outcome"):
        concordance_harrell(t, np.zeros(3), x)
    with pytest.raises(MetricInputError, match="start"):
        concordance_counting_process(np.array([1.0, 0, 0]), np.array([1.0, 2, 3]), e, x)


def _uno_competing_by_pairs(time, status, risk, tau, case_weight):
    """Wolbers et al. (2014, Biostatistics 15:526, section 2; weights as recalled from the paper, not
    copied): outcome i before tau with a later subject j, weight 1/G(T_i)^2; with a competing event j
    strictly before T_i, weight 1/(G(T_i) G(T_j)). G: censoring Kaplan-Meier from lifelines (a competing
    event is not a censoring). Pairs also carry case weights v_i v_j, for the jackknife derivative."""
    from lifelines import KaplanMeierFitter

    km = KaplanMeierFitter().fit(time, (status == 0).astype(int))
    g = km.survival_function_at_times(time).to_numpy()  # distinct continuous times: G(T-) = G(T)
    num = den = 0.0
    for i in np.flatnonzero((status == 1) & (time < tau)):
        for j in range(time.size):
            if time[j] > time[i]:
                w = 1.0 / g[i] ** 2
            elif status[j] == 2 and time[j] < time[i]:
                w = 1.0 / (g[i] * g[j])
            else:
                continue
            w *= case_weight[i] * case_weight[j]
            den += w
            num += w * (1.0 if risk[i] > risk[j] else 0.5 if risk[i] == risk[j] else 0.0)
    return num / den


def test_uno_with_competing_events_matches_the_pairwise_definition():
    rng = np.random.default_rng(8)
    n = 90
    time = rng.exponential(300.0, n)
    status = rng.choice([0, 1, 2], n, p=[0.35, 0.4, 0.25])
    risk = np.round(0.4 * (status == 1) + rng.normal(0, 0.3, n), 1)  # rounded: some tied risks
    tau = float(np.quantile(time, 0.8))
    ours = concordance_uno(time, status, risk, tau)
    ones = np.ones(n)
    assert ours.estimate == pytest.approx(_uno_competing_by_pairs(time, status, risk, tau, ones), abs=1e-12)
    # standard error: the infinitesimal jackknife, derivative of C in each case weight by finite differences
    eps = 1e-6
    grad = [
        (
            _uno_competing_by_pairs(time, status, risk, tau, ones + eps * (np.arange(n) == k))
            - _uno_competing_by_pairs(time, status, risk, tau, ones - eps * (np.arange(n) == k))
        )
        / (2 * eps)
        for k in range(n)
    ]
    assert ours.se == pytest.approx(float(np.sqrt(np.sum(np.square(grad)))), rel=1e-5)
    # without competing events it is Uno's C (checked against scikit-survival above)
    plain = np.where(status == 2, 0, status)
    assert concordance_uno(time, plain, risk, tau).estimate == pytest.approx(
        _uno_competing_by_pairs(time, plain, risk, tau, ones), abs=1e-12
    )
