"""Maximum-likelihood fitting of the joint model: starting values, optimiser and observed information.

1. The linear mixed submodel alone, by its exact likelihood (:func:`fit_marker`, BFGS with the analytic
   gradient).
2. The hazards with the random effects fixed at their posterior means from step 1 (a two-stage fit: the
   survival submodel on the fitted marker trajectories, :func:`fit_two_stage`).
3. The joint likelihood with pseudo-adaptive Gauss–Hermite nodes placed on the marker-only posterior, then
   placed again on the joint posterior of the first joint fit (``adaptive_rounds``; Rizopoulos 2012,
   J Comput Graph Stat 21:270-292), L-BFGS-B with the exact gradient (:func:`fit_joint`).
4. The observed information: central differences of the exact gradient (:func:`observed_information`),
   a few Newton steps from it to finish the optimisation (:func:`newton_polish`).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from scipy.optimize import minimize

from riskbench.models.joint_likelihood import (
    JointArrays,
    ParameterLayout,
    joint_loglik,
    marker_loglik,
    marker_posterior,
)
from riskbench.models.joint_quadrature import adaptive_nodes, hermite_grid

__all__ = [
    "FitResult",
    "fit_joint",
    "fit_marker",
    "fit_two_stage",
    "newton_polish",
    "observed_information",
    "start_hazards",
]

Objective = Callable[[np.ndarray], tuple[float, np.ndarray]]


@dataclass(frozen=True)
class FitResult:
    """Outcome of one optimisation: estimate, log-likelihood, iterations, whether it converged, message."""

    theta: np.ndarray
    loglik: float
    iterations: int
    converged: bool
    message: str


def _maximise(
    objective: Objective, start: np.ndarray, scale: float, max_iter: int, method: str = "L-BFGS-B"
) -> FitResult:
    """Maximise ``objective`` (returns log-likelihood and gradient) from ``start``; ``scale`` divides both."""

    def negative(theta: np.ndarray) -> tuple[float, np.ndarray]:
        ll, grad = objective(theta)
        if not np.isfinite(ll):
            return np.inf, np.zeros_like(theta)
        return -ll / scale, -grad / scale

    options = (
        {"maxiter": max_iter, "gtol": 1e-9}
        if method == "BFGS"
        else {"maxiter": max_iter, "maxcor": 30, "ftol": 1e-14, "gtol": 1e-8}
    )
    result = minimize(negative, start, jac=True, method=method, options=options)
    return FitResult(
        np.asarray(result.x), float(-result.fun * scale), int(result.nit), bool(result.success), str(result.message)
    )


def marker_start(arrays: JointArrays, layout: ParameterLayout) -> np.ndarray:
    """Least-squares β and moment-based variance components as the mixed model's starting values."""
    p = layout.n_fixed
    xx = arrays.xx.sum(0)
    beta = np.linalg.lstsq(xx, arrays.xy.sum(0), rcond=None)[0]
    rss = float(arrays.yy.sum() - 2 * arrays.xy.sum(0) @ beta + beta @ xx @ beta)
    sd = np.sqrt(max(rss / max(arrays.n_obs.sum(), 1.0), 1e-8))
    theta = np.zeros(layout.n_marker)
    theta[:p] = beta
    theta[p] = np.log(0.5 * sd)
    theta[p + 1] = np.log(0.8 * sd)
    theta[p + 3] = np.log(0.3 * sd)
    return theta


def fit_marker(arrays: JointArrays, layout: ParameterLayout, max_iter: int) -> FitResult:
    """Maximum-likelihood (not REML) fit of the linear mixed submodel alone (exact likelihood)."""
    start = marker_start(arrays, layout)
    result = _maximise(
        lambda th: marker_loglik(th, arrays, layout), start, float(arrays.n_patients), max_iter, method="BFGS"
    )
    return result


def start_hazards(arrays: JointArrays, layout: ParameterLayout, knots: np.ndarray) -> np.ndarray:
    """Survival parameters at crude piecewise rates (events / person-years per piece), zero coefficients."""
    upper = np.append(knots[1:], np.inf)
    exposure = (np.clip(arrays.end[:, None], knots, upper) - knots).sum(0)
    theta = np.zeros(layout.size - layout.n_marker)
    offset = layout.n_marker
    for c, cause in enumerate(arrays.causes):
        sl_h, _, _ = layout.cause_slices(c)
        events = np.bincount(arrays.piece, weights=cause.event, minlength=layout.n_pieces)
        theta[sl_h.start - offset : sl_h.stop - offset] = np.log((events + 0.5) / np.maximum(exposure, 1e-9))
    return theta


def fit_two_stage(
    arrays: JointArrays,
    layout: ParameterLayout,
    marker_theta: np.ndarray,
    centre: np.ndarray,
    knots: np.ndarray,
    max_iter: int,
) -> FitResult:
    """Hazard parameters with the marker parameters fixed and ``b_i`` fixed at ``centre`` (posterior means)."""
    points = centre[:, None, :]
    log_weight = np.zeros((arrays.n_patients, 1))
    m = layout.n_marker

    def objective(survival_theta: np.ndarray) -> tuple[float, np.ndarray]:
        theta = np.concatenate([marker_theta, survival_theta])
        ll, grad, _ = joint_loglik(theta, arrays, layout, points, log_weight)
        return ll, grad[m:]

    result = _maximise(objective, start_hazards(arrays, layout, knots), float(arrays.n_patients), max_iter)
    theta = np.concatenate([marker_theta, result.theta])
    return FitResult(theta, result.loglik, result.iterations, result.converged, result.message)


def fit_joint(
    arrays: JointArrays,
    layout: ParameterLayout,
    start: np.ndarray,
    centre: np.ndarray,
    covariance: np.ndarray,
    *,
    hermite_points: int,
    adaptive_rounds: int,
    max_iter: int,
) -> tuple[FitResult, np.ndarray, np.ndarray]:
    """Joint maximum likelihood with pseudo-adaptive Gauss–Hermite nodes.

    Returns the fit and the nodes and log weights it was maximised with (kept for the information matrix).
    """
    nodes, log_w = hermite_grid(hermite_points, 2)
    theta = start
    result = FitResult(start, np.nan, 0, False, "not run")
    points, log_weight = adaptive_nodes(centre, covariance, nodes, log_w)
    for _round in range(max(1, adaptive_rounds)):
        points, log_weight = adaptive_nodes(centre, covariance, nodes, log_w)
        objective = _joint_objective(arrays, layout, points, log_weight)
        result = _maximise(objective, theta, float(arrays.n_patients), max_iter)
        theta = result.theta
        _, _, post = joint_loglik(theta, arrays, layout, points, log_weight, want_gradient=False)
        centre = np.einsum("nq,nqk->nk", post, points)
        second = np.einsum("nq,nqk,nql->nkl", post, points, points)
        covariance = second - np.einsum("nk,nl->nkl", centre, centre) + 1e-10 * np.eye(2)
    return result, points, log_weight


def _joint_objective(
    arrays: JointArrays, layout: ParameterLayout, points: np.ndarray, log_weight: np.ndarray
) -> Objective:
    def objective(theta: np.ndarray) -> tuple[float, np.ndarray]:
        ll, grad, _ = joint_loglik(theta, arrays, layout, points, log_weight)
        return ll, grad

    return objective


def observed_information(gradient: Callable[[np.ndarray], np.ndarray], theta: np.ndarray) -> np.ndarray:
    """Observed information ``-∂²ℓ/∂θ²`` by central differences of the exact gradient (symmetrised).

    Steps are ``1e-5 · max(1, |θ_j|)``; the error is O(h²).
    """
    size = len(theta)
    hessian = np.empty((size, size))
    for j in range(size):
        step = 1e-5 * max(1.0, abs(theta[j]))
        e = np.zeros(size)
        e[j] = step
        hessian[:, j] = (gradient(theta + e) - gradient(theta - e)) / (2 * step)
    return -0.5 * (hessian + hessian.T)


def newton_polish(
    objective: Objective, theta: np.ndarray, information: np.ndarray, steps: int = 3
) -> tuple[np.ndarray, float]:
    """A few Newton–Raphson steps with step halving from an optimiser's answer (sharpens the optimum).

    Returns the improved ``θ`` and its log-likelihood; a step that does not raise the likelihood is not taken.
    """
    ll, grad = objective(theta)
    for _ in range(steps):
        try:
            step = np.linalg.solve(information, grad)
        except np.linalg.LinAlgError:
            break
        for _halving in range(20):
            trial = theta + step
            trial_ll, trial_grad = objective(trial)
            if np.isfinite(trial_ll) and trial_ll >= ll - 1e-12:
                break
            step = step / 2
        else:
            break
        if trial_ll < ll - 1e-12:
            break
        theta, ll, grad = trial, trial_ll, trial_grad
        if np.max(np.abs(grad)) < 1e-8:
            break
    return theta, ll


def marker_only_posterior(
    arrays: JointArrays, layout: ParameterLayout, theta: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Posterior mean and covariance of ``b`` under the marker model at ``θ``."""
    beta, sigma, chol = layout.marker_parts(theta)
    return marker_posterior(arrays, beta, sigma, chol)
