"""Quadrature rules of the joint model: Gauss–Hermite over the random effects, Gauss–Legendre over time.

* :func:`hermite_grid` gives the product Gauss–Hermite rule in ``d`` dimensions for ``∫ e^{-z'z} g(z) dz``
  (nodes and log weights, numpy's ``hermgauss`` in each dimension).
* :func:`adaptive_nodes` places that rule on each patient's approximate posterior of the random effects,
  ``b = b̂ + √2 L z`` with ``L Lᵀ = Σ̂`` (the (pseudo-)adaptive rule of Rizopoulos 2012, J Comput Graph Stat
  21:270-292: the posterior mode and curvature are computed once, not at every likelihood evaluation), and
  returns the log weights such that ``∫ f(b) db ≈ Σ_q exp(log_weight_q) f(b_q)``.
* :func:`legendre_pieces` splits ``[0, T_i]`` at the knots of the piecewise-constant baseline hazard and puts
  a ``G``-point Gauss–Legendre rule on each piece (pieces beyond ``T_i`` get zero weight), so a cumulative
  hazard ``∫_0^{T_i} h(t) dt`` is a weighted sum over an ``(n, K, G)`` array of times.
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["adaptive_nodes", "hermite_grid", "legendre_pieces", "piece_index"]


def hermite_grid(n_points: int, dim: int) -> tuple[np.ndarray, np.ndarray]:
    """Product Gauss–Hermite rule for ``∫_{R^d} e^{-z'z} g(z) dz``.

    Parameters
    ----------
    n_points : int
        Nodes per dimension.
    dim : int
        Dimension ``d``.

    Returns
    -------
    nodes : ndarray (n_points**dim, dim)
    log_weights : ndarray (n_points**dim,)
        Logarithm of the product weights.
    """
    x, w = np.polynomial.hermite.hermgauss(int(n_points))
    grids = np.meshgrid(*([x] * dim), indexing="ij")
    weights = np.meshgrid(*([w] * dim), indexing="ij")
    nodes = np.column_stack([g.ravel() for g in grids])
    log_weights = np.sum([np.log(g.ravel()) for g in weights], axis=0)
    return nodes, np.asarray(log_weights, dtype=float)


def adaptive_nodes(
    centre: np.ndarray, covariance: np.ndarray, nodes: np.ndarray, log_weights: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Gauss–Hermite nodes placed on each patient's approximate posterior ``N(centre_i, covariance_i)``.

    Parameters
    ----------
    centre : ndarray (n, d)
    covariance : ndarray (n, d, d), positive definite
    nodes, log_weights : the rule of :func:`hermite_grid`

    Returns
    -------
    points : ndarray (n, Q, d)
        ``b_iq = centre_i + √2 L_i z_q``.
    log_weight : ndarray (n, Q)
        ``log w_q + z_q'z_q + (d/2) log 2 + log |L_i|``, so that ``∫ f(b) db ≈ Σ_q exp(log_weight_iq) f(b_iq)``.
    """
    chol = np.linalg.cholesky(covariance)
    dim = centre.shape[1]
    points = centre[:, None, :] + math.sqrt(2.0) * np.einsum("nij,qj->nqi", chol, nodes)
    log_det = np.log(np.diagonal(chol, axis1=1, axis2=2)).sum(axis=1)
    log_weight = (log_weights + np.sum(nodes**2, axis=1))[None, :] + 0.5 * dim * math.log(2.0) + log_det[:, None]
    return points, log_weight


def piece_index(knots: np.ndarray, times: np.ndarray) -> np.ndarray:
    """Index of the baseline piece holding each time: piece k covers ``(knots[k], knots[k+1]]``.

    ``knots`` starts with 0 and holds the interior knots; the last piece is open to the right.
    """
    return np.clip(np.searchsorted(knots, times, side="left") - 1, 0, len(knots) - 1)


def legendre_pieces(
    ends: np.ndarray, knots: np.ndarray, n_points: int, starts: np.ndarray | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """Gauss–Legendre nodes over ``[start_i, end_i]`` split at the knots of a piecewise-constant hazard.

    Parameters
    ----------
    ends : ndarray (n,)
        Upper limits (the time unit of ``knots``).
    knots : ndarray (K,)
        0 followed by the interior knots, increasing; piece k is ``[knots[k], knots[k+1])``, the last open.
    n_points : int
        Nodes per piece ``G``.
    starts : ndarray (n,), optional
        Lower limits (default 0).

    Returns
    -------
    times, weights : ndarray (n, K, G)
        Node times and weights; ``Σ weights * f(times)`` over the last two axes approximates ``∫ f``.
        A piece outside ``[start_i, end_i]`` has zero weight (its nodes sit at the nearest limit).
    """
    x, w = np.polynomial.legendre.leggauss(int(n_points))
    ends = np.asarray(ends, dtype=float)
    starts = np.zeros_like(ends) if starts is None else np.asarray(starts, dtype=float)
    upper_knots = np.append(knots[1:], np.inf)
    lo = np.clip(knots[None, :], starts[:, None], ends[:, None])
    hi = np.clip(upper_knots[None, :], starts[:, None], ends[:, None])
    half = 0.5 * (hi - lo)
    times = (lo + half)[..., None] + half[..., None] * x
    weights = half[..., None] * w
    return times, weights
