"""Regression of pseudo-observations on covariates with the complementary log-log link.

The model is E[θ | x] = μ = 1 − exp(−exp(x β + offset)), fitted by generalised estimating equations with
working independence (Andersen & Pohar Perme 2010, Stat Methods Med Res, section 3) and the binomial variance
function μ(1 − μ), i.e. by maximum quasi-likelihood (Wedderburn 1974; McCullagh & Nelder 1989, ch. 9):
iteratively reweighted least squares with step halving on the quasi-likelihood
Σ w [θ log μ + (1 − θ) log(1 − μ)], which is defined for pseudo-observations outside [0, 1] too.
With this variance function an intercept-only model with the offset cloglog(p) solves Σ (θ − μ)·e^η/μ = 0,
which for small risks is Σ θ ≈ Σ μ: the calibration intercept agrees with the observed/expected ratio.
The covariance is the sandwich estimator, summed over clusters when rows of one patient are correlated (one
patient at several landmarks).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

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


def _quasi_loglik(eta: np.ndarray, y: np.ndarray, w: np.ndarray) -> float:
    """Σ w [y log μ + (1 − y) log(1 − μ)], with log(1 − μ) = −e^η exactly."""
    e = np.exp(eta)
    return float(np.sum(w * (y * np.log(-np.expm1(-e)) - (1.0 - y) * e)))


def fit_cloglog(x: np.ndarray, y: np.ndarray, *, offset: np.ndarray | float = 0.0, start: np.ndarray | None = None,
                cluster: np.ndarray | None = None, weights: np.ndarray | None = None, max_iter: int = 100,
                tol: float = 1e-10) -> CloglogFit:
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
        Iterations and the relative change of the quasi-likelihood that stops them.

    Returns
    -------
    CloglogFit
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    w = np.ones(y.size) if weights is None else np.asarray(weights, dtype=float)
    beta = np.zeros(x.shape[1]) if start is None else np.asarray(start, dtype=float).copy()

    def eta_of(b):
        return np.clip(x @ b + offset, *_ETA_RANGE)

    eta = eta_of(beta)
    ql = _quasi_loglik(eta, y, w)
    converged = False
    for _ in range(max_iter):
        mu, ratio, irls = _pieces(eta)
        info = (x * (w * irls)[:, None]).T @ x
        score = x.T @ (w * ratio * (y - mu))
        try:
            step = np.linalg.solve(info, score)
        except np.linalg.LinAlgError as exc:
            raise MetricInputError("the calibration regression is singular (predicted risks nearly constant?)") from exc
        for _half in range(40):
            new_eta = eta_of(beta + step)
            new_ql = _quasi_loglik(new_eta, y, w)
            if np.isfinite(new_ql) and new_ql >= ql - 1e-12 * (1.0 + abs(ql)):
                break
            step = step / 2
        else:
            converged = True  # no step raises the quasi-likelihood: at its maximum to machine precision
            break
        beta = beta + step
        done = abs(new_ql - ql) <= tol * (1.0 + abs(ql))
        eta, ql = new_eta, new_ql
        if done:
            converged = True
            break
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
