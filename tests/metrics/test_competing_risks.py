"""AUC and Brier score with a competing event (code 2).

Checks by definition: without censoring every inverse-probability weight is 1 and the estimators reduce to
the plain empirical AUC (cases: outcome by t; controls: everyone else) and the plain mean squared error of
the outcome indicator (Blanche, Dartigues & Jacqmin-Gadda 2013; Schoop et al. 2011). With independent
censoring the weighted estimates recover those uncensored values (simulation, tolerance from its size).
"""

import numpy as np
import pytest

from riskbench.metrics import auc_cumulative_dynamic, brier_score


def _latent(n, seed):
    rng = np.random.default_rng(seed)
    x = rng.normal(size=n)
    t1 = rng.exponential(1 / (0.1 * np.exp(x)))
    t2 = rng.exponential(1 / (0.05 * np.exp(-0.5 * x)))
    t = np.minimum(t1, t2)
    status = np.where(t1 <= t2, 1, 2)
    risk = 1 / (1 + np.exp(-(x - 1)))
    return t, status, risk, rng


def _empirical_auc(t, status, risk, h):
    case = (status == 1) & (t <= h)
    ctrl = ~case
    diff = risk[case][:, None] - risk[ctrl][None, :]
    return float(np.mean((diff > 0) + 0.5 * (diff == 0)))


def test_without_censoring_reduces_to_empirical_values():
    t, status, risk, _ = _latent(600, 1)
    h = 5.0
    auc = auc_cumulative_dynamic(t, status, risk, h).table["auc"].iloc[0]
    assert auc == pytest.approx(_empirical_auc(t, status, risk, h), abs=1e-12)
    y = ((status == 1) & (t <= h)).astype(float)
    brier = brier_score(t, status, risk, h)["brier"].iloc[0]
    assert brier == pytest.approx(np.mean((y - risk) ** 2), abs=1e-12)


def test_with_censoring_recovers_uncensored_values():
    t, status, risk, rng = _latent(20_000, 2)
    h = 5.0
    auc_full = _empirical_auc(t[:3000], status[:3000], risk[:3000], h)
    y = ((status == 1) & (t <= h)).astype(float)
    brier_full = np.mean((y - risk) ** 2)
    cens = rng.uniform(0, 15, t.size)
    obs_t = np.minimum(t, cens)
    obs_s = np.where(t <= cens, status, 0)
    auc = auc_cumulative_dynamic(obs_t, obs_s, risk, h).table["auc"].iloc[0]
    brier = brier_score(obs_t, obs_s, risk, h)["brier"].iloc[0]
    # sampling SD of either estimate is under 0.01 at these sizes
    assert auc == pytest.approx(auc_full, abs=0.03)
    assert brier == pytest.approx(brier_full, abs=0.01)
