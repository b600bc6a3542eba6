"""Rubin's rules (riskbench.models.rubin) against statsmodels' MICE combining and a hand-worked example."""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats
from statsmodels.imputation.mice import MICE, MICEData

from riskbench.models.imputation import impute_training_rows
from riskbench.models.risk_contract import ModelInputError
from riskbench.models.rubin import pool_estimates


def _completed_fits(m: int = 6, n: int = 300, seed: int = 5) -> list:
    """OLS fits on m completed copies of one data set with 25% of x2 missing (each copy from one chain)."""
    rng = np.random.default_rng(seed)
    x1 = rng.normal(size=n)
    x2 = 0.6 * x1 + rng.normal(size=n)
    y = 1.0 + 0.5 * x1 - 0.8 * x2 + rng.normal(size=n)
    x = np.column_stack([x1, x2])
    x[rng.uniform(size=n) < 0.25, 1] = np.nan
    fits = []
    for k in range(m):
        completed = impute_training_rows(x, np.zeros(n), y[:, None], seed=100 + k, max_iterations=5)
        fits.append(sm.OLS(y, sm.add_constant(completed)).fit())
    return fits


def test_pooled_estimates_equal_statsmodels_mice_combine() -> None:
    """statsmodels.imputation.mice.MICE.combine (statsmodels 0.14/0.15; Rubin 1987 rules as coded there) on
    the same completed-data fits: pooled coefficients, standard errors and its ``frac_miss_info``
    ((1 + 1/m) B / T, our ``variance_share_missing``) agree to 1e-10."""
    fits = _completed_fits()
    frame = pd.DataFrame({"y": [0.0, 1.0, 2.0], "x1": [0.0, 1.0, 0.5], "x2": [1.0, 0.0, 2.0]})
    mice = MICE("y ~ x1 + x2", sm.OLS, MICEData(frame))
    mice.results_list = fits
    mice.exog_names, mice.endog_names = ["const", "x1", "x2"], "y"  # set by MICE.fit, which we bypass
    reference = mice.combine()

    ours = pool_estimates([f.params for f in fits], [f.bse**2 for f in fits])
    np.testing.assert_allclose(ours.estimate, reference.params, rtol=0, atol=1e-10)
    np.testing.assert_allclose(ours.se, reference.bse, rtol=0, atol=1e-10)
    np.testing.assert_allclose(ours.variance_share_missing, reference.frac_miss_info, rtol=0, atol=1e-10)
    assert ours.between[2] > 0 and ours.fraction_missing_info[2] > 0.01  # x2 was imputed: not vacuous


def test_hand_worked_example() -> None:
    """m = 3 estimates 1.0, 1.2, 1.4 with variances 0.04, 0.05, 0.06, worked by hand with the formulas of
    Rubin (1987, ch. 3) as recalled **from memory**: Q̄ = 1.2, Ū = 0.05, B = 0.04, T = 0.05 + (4/3)·0.04,
    r = (4/3)·0.04 / 0.05 = 16/15, ν = 2 (1 + 15/16)² = 961/128, γ = (r + 2/(ν + 3)) / (r + 1)."""
    pooled = pool_estimates([1.0, 1.2, 1.4], [0.04, 0.05, 0.06])
    r = Fraction(16, 15)
    nu = 2 * (1 + 1 / r) ** 2
    gamma = (r + 2 / (nu + 3)) / (r + 1)
    assert pooled.estimate[0] == pytest.approx(1.2, abs=1e-12)
    assert pooled.within[0] == pytest.approx(0.05, abs=1e-12)
    assert pooled.between[0] == pytest.approx(0.04, abs=1e-12)
    assert pooled.total[0] == pytest.approx(0.05 + 4 / 3 * 0.04, abs=1e-12)
    assert pooled.relative_increase[0] == pytest.approx(float(r), abs=1e-12)
    assert nu == Fraction(961, 128)
    assert pooled.df[0] == pytest.approx(float(nu), abs=1e-9)
    assert pooled.fraction_missing_info[0] == pytest.approx(float(gamma), abs=1e-12)
    low, high = pooled.interval(0.95)
    half = stats.t.ppf(0.975, float(nu)) * np.sqrt(0.05 + 4 / 3 * 0.04)
    assert (low[0], high[0]) == pytest.approx((1.2 - half, 1.2 + half), abs=1e-12)


def test_identical_imputations_reduce_to_the_complete_data_analysis() -> None:
    """With B = 0 the rules give back the complete-data estimate and variance, a normal reference
    distribution (ν infinite) and no missing information (Rubin 1987)."""
    pooled = pool_estimates([[0.3, -1.0]] * 4, [[0.01, 0.04]] * 4)
    np.testing.assert_allclose(pooled.se, [0.1, 0.2])
    assert np.isinf(pooled.df).all() and (pooled.fraction_missing_info == 0).all()
    low, _ = pooled.interval(0.95)
    np.testing.assert_allclose(low, [0.3 - 1.959963984540054 * 0.1, -1.0 - 1.959963984540054 * 0.2])


@settings(max_examples=50, deadline=None)
@given(st.lists(st.floats(-5, 5), min_size=2, max_size=12), st.floats(0.001, 2.0))
def test_total_variance_is_never_below_within_or_between(estimates, variance) -> None:
    """T = Ū + (1 + 1/m) B ≥ both parts; γ and λ lie in [0, 1] (definitions, Rubin 1987)."""
    pooled = pool_estimates(estimates, [variance] * len(estimates))
    assert pooled.total[0] >= pooled.within[0] - 1e-15
    assert pooled.total[0] >= pooled.between[0] - 1e-15
    assert 0.0 <= pooled.variance_share_missing[0] <= 1.0
    assert 0.0 <= pooled.fraction_missing_info[0] <= 1.0


def test_bad_input_is_refused() -> None:
    with pytest.raises(ModelInputError, match="same shapes"):
        pool_estimates([1.0, 2.0], [0.1])
    with pytest.raises(ModelInputError, match="non-negative"):
        pool_estimates([1.0, 2.0], [0.1, -0.1])
