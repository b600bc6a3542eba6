"""Standard errors of the concordance indices against an infinitesimal jackknife written here, pair by pair.

The infinitesimal jackknife (Efron 1982, The Jackknife, the Bootstrap and Other Resampling Plans, SIAM, ch. 6)
gives each subject a case weight v_k; a pair (i, j) carries v_i v_j, so C(v) = N(v) / D(v) with
N = Σ v_i v_j c_ij and D = Σ v_i v_j over comparable pairs (c_ij = 1 concordant, ½ tied risk, 0 discordant). At
v = 1, ∂C/∂v_k = (N_k − C D_k) / D, where N_k and D_k sum c_ij and 1 over the pairs that contain k (a pair that
contains k twice, in the counting-process form, counts twice), and SE = sqrt(Σ_k (∂C/∂v_k)²); with clusters the
derivatives of one cluster's members are summed first. The loops below are O(n²) and share nothing with the
library's O(n log n) sums, so agreement to 1e-10 checks the algebra and the bookkeeping of ties.
"""

from __future__ import annotations

import numpy as np
import pytest
from lifelines import KaplanMeierFitter

from riskbench.metrics import concordance_counting_process, concordance_harrell, concordance_uno


def _ij_se(
    pairs: list[tuple[int, int, float, float]], n: int, cluster: np.ndarray | None = None
) -> tuple[float, float]:
    """(C, SE) from pairs ``(i, j, weight, score)``: score 1 / ½ / 0 (concordant / tied risk / discordant)."""
    num = sum(w * c for _, _, w, c in pairs)
    den = sum(w for _, _, w, _ in pairs)
    estimate = num / den
    dn, dd = np.zeros(n), np.zeros(n)
    for i, j, w, c in pairs:
        for k in (i, j):
            dn[k] += w * c
            dd[k] += w
    grad = (dn - estimate * dd) / den
    if cluster is not None:
        grad = np.array([grad[cluster == g].sum() for g in np.unique(cluster)])
    return estimate, float(np.sqrt(np.sum(grad**2)))


def _score(risk_i: float, risk_j: float) -> float:
    return 1.0 if risk_i > risk_j else 0.5 if risk_i == risk_j else 0.0


def _harrell_pairs(time, status, risk):
    """Comparable pairs of Harrell's C with scikit-survival's conventions and Wolbers et al. (2009) for a
    competing event (comparable with every outcome, as later): outcome i, and j later, censored at the same
    time, or with a competing event."""
    pairs = []
    for i in np.flatnonzero(status == 1):
        for j in range(len(time)):
            if j != i and (status[j] == 2 or time[j] > time[i] or (time[j] == time[i] and status[j] == 0)):
                pairs.append((i, j, 1.0, _score(risk[i], risk[j])))
    return pairs


def _data(n: int, seed: int, *, competing: bool, rounded: bool):
    rng = np.random.default_rng(seed)
    x = rng.normal(size=n)
    time = rng.exponential(400.0 * np.exp(-0.8 * x))
    status = rng.choice([0, 1, 2] if competing else [0, 1], size=n, p=[0.3, 0.5, 0.2] if competing else [0.4, 0.6])
    risk = x + rng.normal(scale=0.8, size=n)
    if rounded:  # ties in time and in risk
        time, risk = np.ceil(time / 30.0) * 30.0, np.round(risk, 1)
    return time, status, risk


@pytest.mark.parametrize(("competing", "rounded"), [(False, False), (False, True), (True, True)])
def test_harrell_se_equals_the_pairwise_infinitesimal_jackknife(competing, rounded) -> None:
    time, status, risk = _data(70, 3, competing=competing, rounded=rounded)
    estimate, se = _ij_se(_harrell_pairs(time, status, risk), len(time))
    ours = concordance_harrell(time, status, risk)
    assert ours.estimate == pytest.approx(estimate, abs=1e-12)
    assert ours.se == pytest.approx(se, rel=1e-10)


def test_uno_se_equals_the_pairwise_infinitesimal_jackknife_with_fixed_weights() -> None:
    """Uno et al. (2011, Stat Med 30:1105-1117, eq. 5): outcome i before tau, j later, weight 1/G(T_i)² with G
    the censoring Kaplan–Meier (lifelines here; distinct continuous times, so G(T−) = G(T)); the weights are
    held fixed in the jackknife, as the library documents."""
    time, status, risk = _data(80, 5, competing=False, rounded=False)
    tau = float(np.quantile(time, 0.8))
    g = KaplanMeierFitter().fit(time, (status == 0).astype(int)).survival_function_at_times(time).to_numpy()
    pairs = [
        (i, j, 1.0 / g[i] ** 2, _score(risk[i], risk[j]))
        for i in np.flatnonzero((status == 1) & (time < tau))
        for j in range(len(time))
        if time[j] > time[i]
    ]
    estimate, se = _ij_se(pairs, len(time))
    ours = concordance_uno(time, status, risk, tau)
    assert ours.estimate == pytest.approx(estimate, abs=1e-12)
    assert ours.se == pytest.approx(se, rel=1e-10)


def test_counting_process_se_equals_the_pairwise_jackknife_by_patient() -> None:
    """Risk-set pairs of counting-process rows (an outcome row against every other row at risk at its time);
    a patient's rows share one case weight, so the derivatives are summed per patient."""
    rng = np.random.default_rng(9)
    patients, start, stop, event, risk = [], [], [], [], []
    for p in range(40):
        t0 = 0.0
        for _ in range(rng.integers(1, 4)):
            t1 = t0 + float(np.ceil(rng.exponential(200.0)))
            patients.append(p), start.append(t0), stop.append(t1), risk.append(round(float(rng.normal()), 1))
            t0 = t1
        event.extend([0] * (len(stop) - len(event) - 1) + [int(rng.random() < 0.6)])
    patient, start, stop = np.array(patients), np.array(start), np.array(stop)
    event, risk = np.array(event), np.array(risk)
    pairs = []
    for i in np.flatnonzero(event == 1):
        for j in range(len(stop)):
            at_risk = start[j] < stop[i] and (stop[j] > stop[i] or (stop[j] == stop[i] and event[j] != 1))
            if j != i and at_risk:
                pairs.append((i, j, 1.0, _score(risk[i], risk[j])))
    estimate, se = _ij_se(pairs, len(stop), cluster=patient)
    ours = concordance_counting_process(start, stop, event, risk, patient_id=patient)
    assert ours.estimate == pytest.approx(estimate, abs=1e-12)
    assert ours.se == pytest.approx(se, rel=1e-10)
