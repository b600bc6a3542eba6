"""Likelihood-ratio test for nested Cox models.

Outside check: Fox & Weisberg, "Cox Proportional-Hazards Regression for Survival Data in R" (appendix to
An R Companion to Applied Regression), Rossi recidivism data, seven covariates vs the null model:
likelihood-ratio statistic 33.27 on 7 df. The log-likelihoods here come from lifelines (a stand-in fitter used
in this test only), so the check is of our statistic and its chi-squared tail.
"""

from types import SimpleNamespace

import numpy as np
import pytest
from lifelines import CoxPHFitter
from lifelines.datasets import load_rossi
from scipy.stats import chi2

from riskbench.validation.errors import ValidationInputError
from riskbench.validation.likelihood_ratio import likelihood_ratio_test, nested_cox_lr_test


def _null_loglik_efron(time, event):
    """Log partial likelihood at beta = 0 with Efron ties: -sum over event times of sum_j log(n_at_risk - j)."""
    total = 0.0
    for t in np.unique(time[event == 1]):
        n_risk = np.sum(time >= t)
        d = np.sum((time == t) & (event == 1))
        total -= np.sum(np.log(n_risk - np.arange(d)))
    return total


def test_rossi_full_model_against_null_matches_published_statistic():
    rossi = load_rossi()
    cph = CoxPHFitter().fit(rossi, "week", "arrest")
    loglik_null = _null_loglik_efron(rossi["week"].to_numpy(), rossi["arrest"].to_numpy())
    res = likelihood_ratio_test(loglik_null, cph.log_likelihood_, df=7)
    assert res.statistic == pytest.approx(33.27, abs=0.005)  # printed to 2 decimals
    # R's print of the same fit shows p = 2.36e-05 (**from memory**); three printed digits.
    assert res.p_value == pytest.approx(2.36e-05, abs=0.005e-05)


def test_nested_fits_give_positive_statistic_and_check_nesting():
    rossi = load_rossi()
    small_cov, large_cov = ["age", "prio"], ["age", "prio", "fin", "wexp"]
    fits = {}
    for name, covs in (("small", small_cov), ("large", large_cov)):
        cph = CoxPHFitter().fit(rossi[["week", "arrest", *covs]], "week", "arrest")
        fits[name] = SimpleNamespace(
            covariates=tuple(covs),
            fit_=SimpleNamespace(
                loglik=cph.log_likelihood_,
                loglik_null=_null_loglik_efron(rossi["week"].to_numpy(), rossi["arrest"].to_numpy()),
                coef=cph.params_.to_numpy(),
            ),
        )
    res = nested_cox_lr_test(fits["small"], fits["large"])
    # The definition (Fox & Weisberg, appendix cited above, section 3): twice the gain in log partial likelihood,
    # referred to chi-squared on the number of added terms.
    expected = 2.0 * (fits["large"].fit_.loglik - fits["small"].fit_.loglik)
    assert res.df == 2 and res.statistic == pytest.approx(expected, rel=1e-12)
    assert res.p_value == pytest.approx(chi2.sf(expected, 2), rel=1e-9)
    assert 0.001 < res.p_value < 0.5  # fin and wexp add something, not overwhelming, on these data
    with pytest.raises(ValidationInputError, match="not nested"):
        nested_cox_lr_test(fits["large"], SimpleNamespace(covariates=("age",), fit_=fits["small"].fit_))
    shifted = SimpleNamespace(
        covariates=tuple(large_cov),
        fit_=SimpleNamespace(
            loglik=fits["large"].fit_.loglik, loglik_null=fits["large"].fit_.loglik_null - 3, coef=np.zeros(4)
        ),
    )
    with pytest.raises(ValidationInputError, match="different rows"):
        nested_cox_lr_test(fits["small"], shifted)


def test_larger_model_fitting_worse_is_refused():
    with pytest.raises(ValidationInputError, match="not nested"):
        likelihood_ratio_test(-100.0, -110.0, 2)


def test_with_the_project_cox_model_on_rossi():
    """Same published statistic (33.27 on 7 df, Fox & Weisberg) from riskbench's own CoxModel, and a nested
    pair whose statistic equals twice the log-likelihood gain of lifelines' fits (to 1e-6)."""
    from riskbench.models import CoxModel

    rossi = load_rossi().rename(columns={"week": "stop", "arrest": "status"})
    rossi["patient_id"] = [f"R{i}" for i in range(len(rossi))]
    full_cov = ["fin", "age", "race", "wexp", "mar", "paro", "prio"]
    full = CoxModel(full_cov).fit(rossi)
    res = likelihood_ratio_test(full.fit_.loglik_null, full.fit_.loglik, df=7)
    assert res.statistic == pytest.approx(33.27, abs=0.005)
    small = CoxModel(["age", "prio"]).fit(rossi)
    nested = nested_cox_lr_test(small, full)
    ll = {}
    for name, covs in (("small", ["age", "prio"]), ("full", full_cov)):
        ll[name] = CoxPHFitter().fit(rossi[["stop", "status", *covs]], "stop", "status").log_likelihood_
    assert nested.df == 5
    assert nested.statistic == pytest.approx(2 * (ll["full"] - ll["small"]), abs=1e-6)
