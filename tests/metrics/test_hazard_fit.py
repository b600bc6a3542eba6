"""The small Cox fit used by calibration, against scikit-survival's ``CoxPHSurvivalAnalysis(ties="breslow")``
(coefficients and Breslow cumulative hazard) on whas500."""

import warnings

import numpy as np
import pytest
from sksurv.datasets import load_whas500
from sksurv.linear_model import CoxPHSurvivalAnalysis
from sksurv.util import Surv

from riskbench.metrics.hazard_fit import fit_hazard


def test_agrees_with_scikit_survival_breslow():
    x_df, y = load_whas500()
    x = x_df[["age", "hr", "bmi"]].to_numpy(float)
    t, e = y["lenfol"].astype(float), y["fstat"].astype(int)
    ours = fit_hazard(x, t, e)
    ref = CoxPHSurvivalAnalysis(ties="breslow").fit(x, Surv.from_arrays(e == 1, t))
    np.testing.assert_allclose(ours.coef, ref.coef_, atol=1e-6)
    ref_cumhaz = np.array([f(1000.0) for f in ref.predict_cumulative_hazard_function(x[:5])])
    np.testing.assert_allclose(-np.log1p(-ours.risk_at(x[:5], 1000.0)), ref_cumhaz, rtol=1e-6)


def test_separated_data_give_finite_risks_without_warnings():
    """Outcomes only among the highest scores: coefficients run off, predicted risks stay in [0, 1]."""
    z = np.linspace(-3, 3, 200)
    t = np.where(z > 1, 1.0 + (3 - z), 10.0)
    e = (z > 1).astype(int)
    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)
        fit = fit_hazard(z[:, None] * 20, t, e)
        risk = fit.risk_at(z[:, None] * 20, 5.0)
    assert np.isfinite(risk).all() and risk.min() >= 0 and risk.max() <= 1
    assert risk[z > 1.5].min() == pytest.approx(1.0, abs=1e-6)
