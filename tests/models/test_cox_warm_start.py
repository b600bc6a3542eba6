"""Refits started from another estimate (``fit_cox(..., initial=...)``) reach the optimum of a fit from zero.

The Cox partial log-likelihood is concave (Cox 1972; Andersen & Gill 1982 for counting-process data), so its
maximiser does not depend on where Newton–Raphson starts; the two fits may differ only by the convergence
tolerance. The check: coefficients and variances equal to 1e-8, fewer iterations from a nearby start, and the
likelihood-ratio test (whose null model stays at zero) unchanged.
"""

from __future__ import annotations

import numpy as np
import pytest

from riskbench.models.cox_engine import CoxInputError, fit_cox


def _data(seed: int, n: int = 3000):
    rng = np.random.default_rng(seed)
    x = rng.normal(size=(n, 4)) * [1.0, 2.0, 0.5, 10.0]
    lp = x @ np.array([0.5, -0.3, 0.8, 0.02])
    event_time = rng.exponential(1000 * np.exp(-lp))
    censor = rng.uniform(100, 2000, n)
    stop = np.ceil(np.minimum(event_time, censor))  # whole days: many ties
    event = (event_time <= censor).astype(int)
    strata = rng.integers(0, 3, n)
    return x, stop, event, strata


@pytest.mark.parametrize("ties", ["efron", "breslow"])
@pytest.mark.parametrize("penalty", [0.0, 0.01])
def test_warm_started_refit_reaches_the_same_estimate(ties, penalty):
    x, stop, event, strata = _data(1)
    full = fit_cox(x, stop, event, strata=strata, ties=ties, penalty=penalty)
    rng = np.random.default_rng(2)
    for _ in range(3):  # bootstrap resamples of the rows, as a replicate draws them
        rows = rng.integers(0, stop.size, stop.size)
        cold = fit_cox(x[rows], stop[rows], event[rows], strata=strata[rows], ties=ties, penalty=penalty)
        warm = fit_cox(
            x[rows], stop[rows], event[rows], strata=strata[rows], ties=ties, penalty=penalty, initial=full.coef
        )
        assert cold.converged and warm.converged
        np.testing.assert_allclose(warm.coef, cold.coef, rtol=0, atol=1e-8)
        np.testing.assert_allclose(warm.var, cold.var, rtol=1e-8, atol=0)
        assert warm.loglik == pytest.approx(cold.loglik, rel=1e-12)
        assert warm.loglik_null == cold.loglik_null
        assert warm.lr_test.statistic == pytest.approx(cold.lr_test.statistic, rel=1e-8)
        assert warm.n_iter < cold.n_iter


def test_a_start_worse_than_zero_is_replaced_by_zero_and_a_wrong_length_refused():
    x, stop, event, _ = _data(3, 800)
    cold = fit_cox(x, stop, event)
    far = fit_cox(x, stop, event, initial=[-40.0, 40.0, -40.0, 4.0])
    np.testing.assert_allclose(far.coef, cold.coef, rtol=0, atol=1e-8)
    assert far.n_iter == cold.n_iter
    with pytest.raises(CoxInputError, match="4 finite coefficients"):
        fit_cox(x, stop, event, initial=[0.1, 0.2])
