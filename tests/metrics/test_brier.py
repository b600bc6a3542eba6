"""IPCW Brier score, integrated Brier score and the scaled Brier score.

Outside checks: Brier scores of the Nottingham-Prognostic-Index-group Kaplan–Meier predictions on GBSG2
(Schumacher et al. 1994, J Clin Oncol 12:2086-2093, the data; Graf et al. 1999, Stat Med 18:2529-2545, the
IPCW Brier score) at 1–5 years and their integrated score, 15 digits as scikit-survival computes them
(**from memory** of that library's recorded values, not a publication; the same library is also run live);
scikit-survival's ``brier_score`` / ``integrated_brier_score`` on the same inputs to 1e-6; McLernon et al.
(2023), GBSG2: Brier score at 5 years 0.22 (2 decimals as printed).
"""

import numpy as np
import pytest
from sksurv.metrics import brier_score as sksurv_brier
from sksurv.metrics import integrated_brier_score as sksurv_ibs
from sksurv.util import Surv

from riskbench.metrics import MetricInputError, brier_score, integrated_brier_score

NOTTINGHAM_BRIER = [0.0762922458520448, 0.182536421174199, 0.220017747254941, 0.234133800146671, 0.233822955042198]


def test_scikit_survival_gbsg2_nottingham_values(gbsg2_nottingham):
    t, e, years, surv = gbsg2_nottingham
    table = brier_score(t, e, 1 - surv, years)
    np.testing.assert_allclose(table["brier"], NOTTINGHAM_BRIER, atol=1e-9)


def test_scikit_survival_gbsg2_integrated(gbsg2_nottingham):
    """Integrated Brier score 0.197936392255733 over the grid 365–1825 days (scikit-survival's value,
    **from memory**; see the module docstring)."""
    t, e, years, surv = gbsg2_nottingham
    assert integrated_brier_score(t, e, 1 - surv, years) == pytest.approx(0.197936392255733, abs=1e-9)


def test_agrees_with_scikit_survival(shipped):
    y = Surv.from_arrays(shipped.event, shipped.time)
    scale = np.ptp(shipped.risk) + 1.0
    risk = np.column_stack([(shipped.risk - shipped.risk.min()) / scale * (k + 1) / 5 for k in range(4)])
    ours = brier_score(shipped.time, shipped.event, risk, shipped.horizons)
    np.testing.assert_allclose(ours["brier"], sksurv_brier(y, y, 1 - risk, shipped.horizons)[1], atol=1e-6)
    ibs = integrated_brier_score(shipped.time, shipped.event, risk, shipped.horizons)
    assert ibs == pytest.approx(sksurv_ibs(y, y, 1 - risk, shipped.horizons), abs=1e-6)


def test_mclernon_gbsg2_brier_at_five_years(gbsg2_five_years):
    """McLernon et al. (2023): Brier score at 5 years 0.22 (evaluated just inside, 4.99 y)."""
    t, e, risk = gbsg2_five_years
    assert round(float(brier_score(t, e, risk, 4.99)["brier"].iloc[0]), 2) == 0.22


def test_null_model_scores_zero_and_perfect_model_one():
    """The Kaplan–Meier null model has scaled Brier 0 (by definition of the index of prediction accuracy);
    knowing every outcome without censoring gives Brier 0 and scaled Brier 1."""
    rng = np.random.default_rng(1)
    t = rng.exponential(1.0, 500)
    e = np.ones(500, dtype=int)
    h = 0.7
    km_risk = np.full(500, np.mean(t <= h))
    assert brier_score(t, e, km_risk, h)["scaled_brier"].iloc[0] == pytest.approx(0.0, abs=1e-12)
    perfect = brier_score(t, e, (t <= h).astype(float), h)
    assert perfect["brier"].iloc[0] == 0.0 and perfect["scaled_brier"].iloc[0] == 1.0


def test_probability_range_and_shape_errors():
    t = np.array([1.0, 2.0, 3.0, 4.0])
    e = np.array([1, 0, 1, 1])
    with pytest.raises(MetricInputError, match=r"probability.*\[0, 1\]"):
        brier_score(t, e, np.array([0.1, 2.0, 0.3, 0.4]), 2.5)
    with pytest.raises(MetricInputError, match="one column"):
        brier_score(t, e, np.array([0.1, 0.2, 0.3, 0.4]), [1.5, 2.5])
    with pytest.raises(MetricInputError, match="two horizons"):
        integrated_brier_score(t, e, np.array([0.1, 0.2, 0.3, 0.4]), [2.5])
