"""Regression of pseudo-observations on covariates with the complementary log-log link.

The model is E[θ | x] = μ = 1 − exp(−exp(x β + offset)), fitted by generalised estimating equations with
working independence (Andersen & Pohar Perme 2010, Stat Methods Med Res, section 3) and the binomial variance
function μ(1 − μ) (Wedderburn 1974; McCullagh & Nelder 1989, ch. 9): Fisher scoring (iteratively reweighted
least squares) on the estimating equation U(β) = Σ w x (θ − μ) e^η/μ = 0, halving a step until it shrinks
U'I⁻¹U (the squared length of the Newton step in the information metric). The quasi-likelihood
Σ w [θ log μ + (1 − θ) log(1 − μ)] is not a safe guide here: a pseudo-observation above 1 or below 0 makes it
unbounded (it grows without limit as μ → 1 or 0), so climbing it can stop far from a root of U.
With this variance function an intercept-only model with the offset cloglog(p) solves Σ (θ − μ)·e^η/μ = 0,
which for small risks is Σ θ ≈ Σ μ: the calibration intercept agrees with the observed/expected ratio.
The covariance is the sandwich estimator, summed over clusters when rows of one patient are correlated (one
patient at several landmarks).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from riskbench.metrics.cloglog_pass import score_and_information
from riskbench.metrics.inputs import MetricInputError

#: Linear predictors are kept in this range: exp(5) makes the mean 1 to double precision, exp(-40) ~ 4e-18.
_ETA_RANGE = (-40.0, 5.0)


@dataclass(frozen=True)
class CloglogFit:
    """Coefficients, sandwich covariance and convergence of a cloglog-link pseudo-observation regression."""

    coef: np.ndarray
    cov: np.ndarray
    converged: bool

    def mean(self, x: np.ndarray, offset: np.ndarray | float = 0.0) -> np.ndarray:
        """Fitted mean 1 − exp(−exp(x β + offset))."""
        return _mean(np.clip(np.atleast_2d(x) @ self.coef + offset, *_ETA_RANGE))


def _mean(eta: np.ndarray) -> np.ndarray:
    return -np.expm1(-np.exp(eta))


def _pieces(eta: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """μ, dμ/dη / V(μ) = e^η / μ and the IRLS weight (dμ/dη)² / V(μ) = e^η (1 − μ) · e^η / μ."""
    e = np.exp(eta)
    mu = -np.expm1(-e)
    ratio = e / mu
    return mu, ratio, e * np.exp(-e) * ratio


def fit_cloglog(
    x: np.ndarray,
    y: np.ndarray,
    *,
    offset: np.ndarray | float = 0.0,
    start: np.ndarray | None = None,
    cluster: np.ndarray | None = None,
    weights: np.ndarray | None = None,
    max_iter: int = 100,
    tol: float = 1e-10,
    covariance: bool = True,
) -> CloglogFit:
    """Fit E[y | x] = 1 − exp(−exp(x β + offset)) by quasi-likelihood (GEE, working independence).

    Parameters
    ----------
    x
        Design matrix, shape (n, p) (include a column of ones for an intercept).
    y
        Responses (pseudo-observations; values outside [0, 1] are allowed).
    offset
        Fixed part of the linear predictor.
    start
        Starting coefficients (default zeros).
    cluster
        Labels of correlated rows (e.g. patient); None treats every row as its own cluster.
    weights
        Non-negative row weights (e.g. how often a bootstrap sample drew the row's cluster); default 1.
    max_iter, tol
        Iterations, and the value of U'I⁻¹U (score in the information metric) below which they stop.
    covariance
        Compute the sandwich covariance (False: ``cov`` is NaN; the point estimate alone, for resampling loops).

    Returns
    -------
    CloglogFit
    """
    # contiguous float64 once, so that no scoring step copies its inputs for the compiled pass
    x = np.ascontiguousarray(x, dtype=np.float64)
    y = np.ascontiguousarray(y, dtype=np.float64)
    w = np.ones(y.size) if weights is None else np.ascontiguousarray(weights, dtype=np.float64)
    beta = np.zeros(x.shape[1]) if start is None else np.asarray(start, dtype=float).copy()
    offsets = np.ascontiguousarray(np.broadcast_to(np.asarray(offset, dtype=np.float64), y.shape))

    def score_info(b: np.ndarray) -> tuple[np.ndarray, np.ndarray, float]:
        score, info = score_and_information(x, b, offsets, y, w, _ETA_RANGE)
        size = float(score @ np.linalg.lstsq(info, score, rcond=None)[0])
        return score, info, size

    score, info, size = score_info(beta)
    converged = size <= tol
    for _ in range(max_iter):
        if converged:
            break
        try:
            step = np.linalg.solve(info, score)
        except np.linalg.LinAlgError as exc:
            raise MetricInputError("the calibration regression is singular (predicted risks nearly constant?)") from exc
        for _half in range(40):
            new_score, new_info, new_size = score_info(beta + step)
            if np.isfinite(new_size) and new_size < size:
                break
            step = step / 2
        else:
            break  # no step brings the score closer to 0: as close to a root as double precision allows
        beta = beta + step
        score, info, size = new_score, new_info, new_size
        converged = size <= tol
    if not covariance:
        return CloglogFit(coef=beta, cov=np.full((beta.size, beta.size), np.nan), converged=converged)
    eta = np.clip(x @ beta + offset, *_ETA_RANGE)
    mu, ratio, irls = _pieces(eta)
    bread = np.linalg.pinv((x * (w * irls)[:, None]).T @ x)
    scores = x * (w * ratio * (y - mu))[:, None]
    if cluster is not None:
        _, code = np.unique(np.asarray(cluster), return_inverse=True)
        summed = np.zeros((code.max() + 1, x.shape[1]))
        np.add.at(summed, code, scores)
        scores = summed
    meat = scores.T @ scores
    return CloglogFit(coef=beta, cov=bread @ meat @ bread, converged=converged)
