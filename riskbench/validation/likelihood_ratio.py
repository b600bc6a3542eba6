"""Likelihood-ratio test between nested Cox models fitted on the same rows."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import stats

from riskbench.validation.errors import ValidationInputError


@dataclass(frozen=True)
class LikelihoodRatioTest:
    """Result of a likelihood-ratio test.

    Attributes
    ----------
    statistic : float
        2 (loglik_large − loglik_small).
    df : int
        Number of extra coefficients in the larger model.
    p_value : float
        Upper tail of the chi-squared distribution with ``df`` degrees of freedom.
    """

    statistic: float
    df: int
    p_value: float


def likelihood_ratio_test(loglik_small: float, loglik_large: float, df: int) -> LikelihoodRatioTest:
    """Likelihood-ratio test from two maximised (partial) log-likelihoods.

    Parameters
    ----------
    loglik_small, loglik_large : float
        Maximised log partial likelihood of the smaller and the larger (nesting) model, on the same rows.
    df : int
        Number of coefficients the larger model adds (>= 1).

    Returns
    -------
    LikelihoodRatioTest

    Notes
    -----
    Under the smaller model, 2 (l_large − l_small) is asymptotically chi-squared with ``df`` degrees
    of freedom (Wilks 1938). The test is valid for unpenalised fits of nested models on identical
    data; with a cluster-robust variance, the LR test still uses the model-based likelihood and
    ignores within-patient correlation — prefer the robust Wald test then.
    """
    if int(df) != df or df < 1:
        raise ValidationInputError(f"df must be a positive integer (extra coefficients); got {df!r}.")
    if not (np.isfinite(loglik_small) and np.isfinite(loglik_large)):
        raise ValidationInputError("both log-likelihoods must be finite numbers; did both fits converge?")
    statistic = 2.0 * (float(loglik_large) - float(loglik_small))
    # A nesting model cannot fit worse; allow rounding noise of the optimiser only.
    if statistic < -1e-6 * max(1.0, abs(float(loglik_large))):
        raise ValidationInputError(
            f"the larger model's log-likelihood ({loglik_large:.6g}) is below the smaller one's "
            f"({loglik_small:.6g}); the models are not nested or a fit did not converge."
        )
    statistic = max(statistic, 0.0)
    return LikelihoodRatioTest(statistic=statistic, df=int(df), p_value=float(stats.chi2.sf(statistic, int(df))))


def _cox_fit_of(model: Any) -> Any:
    """The array-level fit result (has ``loglik``, ``loglik_null``, ``coef``) of a fitted model or fit."""
    if hasattr(model, "loglik") and hasattr(model, "coef"):
        return model
    for name in ("fit_result_", "fit_", "result_", "cox_fit_", "cox_"):
        inner = getattr(model, name, None)
        if inner is not None and hasattr(inner, "loglik"):
            return inner
    raise ValidationInputError(
        f"{type(model).__name__} is not a fitted Cox model (no log-likelihood found); fit it first."
    )


def _covariates_of(model: Any) -> tuple[str, ...] | None:
    covs = getattr(model, "covariates", None)
    return tuple(covs) if covs is not None else None


def nested_cox_lr_test(small: Any, large: Any) -> LikelihoodRatioTest:
    """Likelihood-ratio test of a larger Cox model against a smaller one nested in it.

    Parameters
    ----------
    small, large : fitted CoxModel or CoxFit
        Fits on the same rows; the covariates of ``small`` must all be in ``large``.

    Returns
    -------
    LikelihoodRatioTest

    Raises
    ------
    ValidationInputError
        When the covariate sets are not nested, or the two fits' null log-likelihoods differ (which
        means they were fitted on different rows or events).
    """
    fit_small, fit_large = _cox_fit_of(small), _cox_fit_of(large)
    cov_small, cov_large = _covariates_of(small), _covariates_of(large)
    if cov_small is not None and cov_large is not None:
        missing = [c for c in cov_small if c not in cov_large]
        if missing:
            raise ValidationInputError(
                f"the models are not nested: {missing} are in the smaller model but not in the larger one."
            )
    null_small = getattr(fit_small, "loglik_null", None)
    null_large = getattr(fit_large, "loglik_null", None)
    if (
        null_small is not None
        and null_large is not None
        and not np.isclose(float(null_small), float(null_large), rtol=1e-8, atol=1e-8)
    ):
        raise ValidationInputError(
            f"the null log-likelihoods differ ({null_small:.8g} vs {null_large:.8g}): the models were "
            "fitted on different rows (e.g. different missing-value exclusions). Refit both on the same rows."
        )
    df = len(np.atleast_1d(fit_large.coef)) - len(np.atleast_1d(fit_small.coef))
    return likelihood_ratio_test(float(fit_small.loglik), float(fit_large.loglik), df)
