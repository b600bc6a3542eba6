"""Rubin's rules: one estimate, standard error and interval from m analyses of multiply imputed data.

For a scalar quantity estimated on each of m completed data sets as ``Q_k`` with variance ``U_k``
(Rubin 1987, *Multiple Imputation for Nonresponse in Surveys*, Wiley, ch. 3; Little & Rubin 2002, §10.2):

* pooled estimate ``Q̄ = mean(Q_k)``;
* within-imputation variance ``Ū = mean(U_k)``;
* between-imputation variance ``B = sum((Q_k - Q̄)²) / (m - 1)``;
* total variance ``T = Ū + (1 + 1/m) B``;
* relative increase in variance due to missingness ``r = (1 + 1/m) B / Ū``;
* degrees of freedom of the reference t distribution ``ν = (m - 1) (1 + 1/r)²`` (Rubin 1987; infinite when
  ``B = 0``; the complete-data degrees of freedom of a Cox model are large, so the small-sample version of
  Barnard & Rubin 1999 is not needed);
* proportion of the total variance due to missingness ``λ = (1 + 1/m) B / T`` (what statsmodels' MICE calls
  ``frac_miss_info``);
* fraction of missing information ``γ = (r + 2 / (ν + 3)) / (r + 1)`` (Rubin 1987), the quantity reported
  beside pooled coefficients.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike
from scipy import stats

from riskbench.models.risk_contract import ModelInputError

__all__ = ["PooledEstimates", "pool_estimates"]


@dataclass(frozen=True)
class PooledEstimates:
    """Rubin's rules applied to p quantities (each attribute an array of shape ``(p,)``; module notes).

    Attributes
    ----------
    estimate, within, between, total : pooled estimate Q̄, Ū, B and T.
    se : ``sqrt(T)``.
    relative_increase : r.
    df : ν (``inf`` when B = 0).
    variance_share_missing : λ = (1 + 1/m) B / T.
    fraction_missing_info : γ.
    m : number of imputations.
    """

    estimate: np.ndarray
    within: np.ndarray
    between: np.ndarray
    total: np.ndarray
    se: np.ndarray
    relative_increase: np.ndarray
    df: np.ndarray
    variance_share_missing: np.ndarray
    fraction_missing_info: np.ndarray
    m: int

    def interval(self, level: float = 0.95) -> tuple[np.ndarray, np.ndarray]:
        """``Q̄ ± t_{ν, (1+level)/2} · sqrt(T)`` (the normal quantile where ν is infinite)."""
        quantile = stats.t.ppf(0.5 + level / 2, self.df)
        return self.estimate - quantile * self.se, self.estimate + quantile * self.se

    def p_value(self) -> np.ndarray:
        """Two-sided p-value of ``Q̄ / sqrt(T)`` against the t distribution with ν degrees of freedom."""
        with np.errstate(divide="ignore", invalid="ignore"):
            return 2 * stats.t.sf(np.abs(self.estimate / self.se), self.df)


def pool_estimates(estimates: ArrayLike, variances: ArrayLike) -> PooledEstimates:
    """Combine per-imputation estimates and their variances by Rubin's rules.

    Parameters
    ----------
    estimates : array, shape (m,) or (m, p)
        ``Q_k``: one row per imputation.
    variances : array, same shape
        ``U_k``: the squared standard errors of the same analyses.

    Returns
    -------
    PooledEstimates
        With m = 1 (one complete data set, nothing imputed) B is 0 and T = Ū.
    """
    q = np.asarray(estimates, dtype=float)
    u = np.asarray(variances, dtype=float)
    if q.ndim == 1:
        q, u = q[:, None], u[:, None]
    if q.shape != u.shape or q.ndim != 2 or q.shape[0] < 1:
        raise ModelInputError(
            f"Rubin's rules need one row of estimates and one of variances per imputation (same shapes); "
            f"got {q.shape} and {u.shape}"
        )
    if not (np.isfinite(q).all() and np.isfinite(u).all()) or (u < 0).any():
        raise ModelInputError("Rubin's rules need finite estimates and finite, non-negative variances")
    m = q.shape[0]
    estimate = q.mean(axis=0)
    within = u.mean(axis=0)
    between = q.var(axis=0, ddof=1) if m > 1 else np.zeros_like(estimate)
    inflation = (1.0 + 1.0 / m) * between
    total = within + inflation
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        relative = np.where(within > 0, inflation / within, np.where(inflation > 0, np.inf, 0.0))
        df = np.where(inflation > 0, (m - 1) * (1.0 + 1.0 / relative) ** 2, np.inf)
        share = np.where(total > 0, inflation / total, 0.0)
        fmi = np.where(inflation > 0, (relative + 2.0 / (df + 3.0)) / (relative + 1.0), 0.0)
    fmi = np.where(np.isinf(relative), 1.0, fmi)
    return PooledEstimates(
        estimate=estimate,
        within=within,
        between=between,
        total=total,
        se=np.sqrt(total),
        relative_increase=relative,
        df=df,
        variance_share_missing=share,
        fraction_missing_info=fmi,
        m=m,
    )
