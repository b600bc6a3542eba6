"""Log-likelihood of the shared-random-effects joint model and its exact gradient (vectorised numpy).

Model (Henderson, Diggle & Dobson 2000, Biostatistics 1:465-480; Rizopoulos 2012, *Joint Models for
Longitudinal and Time-to-Event Data*, ch. 4), time ``t`` in years since entry:

* marker ``y_ij = m_i(t_ij) + ε_ij``, ``m_i(t) = β·[1, f(t), x_i] + b_i0 + b_i1 t``, ``ε ~ N(0, σ²)``,
  ``b_i ~ N(0, D)``, ``D = L Lᵀ`` (``L`` lower triangular with positive diagonal);
* cause-specific hazards ``h_c(t) = h_{c,k(t)} exp(γ_c·w_i + α_c m_i(t) + α'_c m_i'(t))`` with a
  piecewise-constant baseline ``h_{c,k}`` (``c`` = 1 outcome, 2 competing event; a cause may leave out the
  marker terms).

Patient ``i`` contributes ``log ∫ p(y_i | b) p(b) p(T_i, δ_i | b) db``. The integral is a Gauss–Hermite sum
over nodes ``b_iq`` fixed before the optimisation (:func:`riskbench.models.joint_quadrature.adaptive_nodes`,
the pseudo-adaptive rule), and each cumulative hazard a Gauss–Legendre sum over the baseline pieces. With
the nodes fixed the log-likelihood is a smooth function of the parameters; its gradient is the posterior
(over the nodes) average of the complete-data score (Louis 1982, JRSS B 44:226-233), computed exactly here.

The longitudinal part alone has a closed form (:func:`marker_loglik`): ``b | y ~ N(μ_i, Σ_i)`` with
``Σ_i = (D⁻¹ + Z_iᵀZ_i/σ²)⁻¹`` and ``μ_i = Σ_i Z_iᵀ(y_i - X_iβ)/σ²``, and
``log p(y_i) = log p(y_i | μ_i) + log p(μ_i) - log N(μ_i; μ_i, Σ_i)`` -- the linear mixed model's
maximum-likelihood (not REML) objective, used for the starting values.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy.special import logsumexp

__all__ = [
    "CauseArrays",
    "JointArrays",
    "MarkerSums",
    "ParameterLayout",
    "joint_loglik",
    "marker_loglik",
    "marker_posterior",
]

_LOG_2PI = math.log(2.0 * math.pi)
_ETA_CAP = 600.0  # exp() argument cap: keeps a wild trial step of the optimiser finite


@dataclass(frozen=True)
class CauseArrays:
    """One cause-specific hazard's data: status indicator, centred covariates and its marker terms."""

    event: np.ndarray  # (n,) 1.0 where the patient had this cause
    covariates: np.ndarray  # (n, q) centred
    terms: tuple[str, ...]  # subset of ("value", "slope")


@dataclass(frozen=True)
class MarkerSums:
    """Per-patient sufficient statistics of the marker (``Z = [1, t]``): ``n_obs``, ``yy = Σ y²``,
    ``xy = Xᵀy``, ``xx = XᵀX``, ``zy = Zᵀy``, ``zx = ZᵀX``, ``zz = ZᵀZ``."""

    n_obs: np.ndarray
    yy: np.ndarray
    xy: np.ndarray
    xx: np.ndarray
    zy: np.ndarray
    zx: np.ndarray
    zz: np.ndarray


@dataclass(frozen=True)
class JointArrays(MarkerSums):
    """Everything the likelihood needs, per patient (``n`` patients, ``p`` fixed effects of the marker).

    The marker's sufficient statistics (:class:`MarkerSums`) and, for the survival part: ``end`` (years),
    ``piece`` (baseline piece of ``end``),
    Gauss–Legendre node ``times``/``weights`` ``(n, K, G)``, the fixed design at the nodes ``design_nodes``
    ``(n, K, G, p)`` and its time derivative ``slope_nodes``, the same at ``end`` (``design_end``,
    ``slope_end``), and the causes.
    """

    end: np.ndarray
    piece: np.ndarray
    times: np.ndarray
    weights: np.ndarray
    design_nodes: np.ndarray
    slope_nodes: np.ndarray
    design_end: np.ndarray
    slope_end: np.ndarray
    causes: tuple[CauseArrays, ...]

    @property
    def n_patients(self) -> int:
        return len(self.n_obs)


@dataclass(frozen=True)
class ParameterLayout:
    """Where each parameter sits in the flat vector ``θ``.

    ``[β (p), log σ, log L₁₁, L₂₁, log L₂₂, then per cause: log h (K), γ (q), marker terms]``.
    """

    n_fixed: int
    n_pieces: int
    cause_sizes: tuple[tuple[int, int], ...]  # (q, number of marker terms) per cause
    names: tuple[str, ...] = field(default=())

    @property
    def n_marker(self) -> int:
        """Parameters of the longitudinal submodel (β, log σ and the three of L)."""
        return self.n_fixed + 4

    def cause_slices(self, c: int) -> tuple[slice, slice, slice]:
        """Slices of (log h, γ, marker terms) of cause ``c``."""
        start = self.n_marker
        for q, a in self.cause_sizes[:c]:
            start += self.n_pieces + q + a
        q, a = self.cause_sizes[c]
        return (
            slice(start, start + self.n_pieces),
            slice(start + self.n_pieces, start + self.n_pieces + q),
            slice(start + self.n_pieces + q, start + self.n_pieces + q + a),
        )

    @property
    def size(self) -> int:
        return self.n_marker + sum(self.n_pieces + q + a for q, a in self.cause_sizes)

    def marker_parts(self, theta: np.ndarray) -> tuple[np.ndarray, float, np.ndarray]:
        """β, σ and L from ``θ``."""
        p = self.n_fixed
        chol = np.array([[math.exp(theta[p + 1]), 0.0], [theta[p + 2], math.exp(theta[p + 3])]])
        return theta[:p], math.exp(theta[p]), chol


def _residual_stats(arrays: MarkerSums, beta: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``rᵀr`` (n,) and ``Zᵀr`` (n, 2) for ``r = y - Xβ``."""
    rr = arrays.yy - 2.0 * arrays.xy @ beta + np.einsum("np,p->n", arrays.xx @ beta, beta)
    zr = arrays.zy - arrays.zx @ beta
    return rr, zr


def marker_posterior(
    arrays: MarkerSums, beta: np.ndarray, sigma: float, chol: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Posterior mean ``μ_i`` (n, 2) and covariance ``Σ_i`` (n, 2, 2) of ``b`` given the marker alone."""
    d_inv = np.linalg.inv(chol @ chol.T)
    precision = d_inv[None] + arrays.zz / sigma**2
    cov = np.linalg.inv(precision)
    _, zr = _residual_stats(arrays, beta)
    mean = np.einsum("nij,nj->ni", cov, zr) / sigma**2
    return mean, cov


def _marker_gradient(
    arrays: JointArrays,
    theta: np.ndarray,
    layout: ParameterLayout,
    m1: np.ndarray,
    m2: np.ndarray,
    rr: np.ndarray,
    zr: np.ndarray,
) -> np.ndarray:
    """Gradient of the longitudinal parameters given each patient's moments ``E b`` (n,2) and ``E bbᵀ``."""
    beta, sigma, chol = layout.marker_parts(theta)
    p = layout.n_fixed
    grad = np.zeros(layout.n_marker)
    s2 = sigma**2
    grad[:p] = (arrays.xy.sum(0) - arrays.xx.sum(0) @ beta - np.einsum("nkp,nk->p", arrays.zx, m1)) / s2
    rss = rr - 2.0 * np.einsum("nk,nk->n", m1, zr) + np.einsum("nkl,nlk->n", arrays.zz, m2)
    grad[p] = float(np.sum(-arrays.n_obs + rss / s2))
    chol_inv_t = np.linalg.inv(chol).T
    d_inv = chol_inv_t @ chol_inv_t.T
    g_chol = -len(rr) * chol_inv_t + d_inv @ m2.sum(0) @ chol_inv_t
    grad[p + 1] = g_chol[0, 0] * chol[0, 0]
    grad[p + 2] = g_chol[1, 0]
    grad[p + 3] = g_chol[1, 1] * chol[1, 1]
    return grad


def marker_loglik(theta: np.ndarray, arrays: JointArrays, layout: ParameterLayout) -> tuple[float, np.ndarray]:
    """Exact log-likelihood of the linear mixed submodel alone and its gradient (only the marker parameters).

    ``theta`` holds at least the longitudinal parameters (the first ``layout.n_marker``).
    """
    beta, sigma, chol = layout.marker_parts(theta)
    mean, cov = marker_posterior(arrays, beta, sigma, chol)
    rr, zr = _residual_stats(arrays, beta)
    s2 = sigma**2
    rss = rr - 2.0 * np.einsum("nk,nk->n", mean, zr) + np.einsum("nk,nkl,nl->n", mean, arrays.zz, mean)
    u = np.linalg.solve(chol, mean.T)
    log_det_l = math.log(chol[0, 0]) + math.log(chol[1, 1])
    _, log_det_cov = np.linalg.slogdet(cov)
    ll = (
        -0.5 * arrays.n_obs * (_LOG_2PI + math.log(s2))
        - 0.5 * rss / s2
        - log_det_l
        - 0.5 * np.sum(u**2, axis=0)
        + 0.5 * log_det_cov
    )
    m2 = cov + np.einsum("ni,nj->nij", mean, mean)
    grad = _marker_gradient(arrays, theta, layout, mean, m2, rr, zr)
    return float(ll.sum()), grad


def _marker_at(fixed: np.ndarray, points: np.ndarray, times: np.ndarray) -> np.ndarray:
    """``m(t | b_q)`` for node times ``(n, K, G)``: ``fixed (n,K,G) + b0 + b1 t`` -> ``(n, Q, K, G)``."""
    b0 = points[:, :, 0][:, :, None, None]
    b1 = points[:, :, 1][:, :, None, None]
    return fixed[:, None] + b0 + b1 * times[:, None]


def joint_loglik(
    theta: np.ndarray,
    arrays: JointArrays,
    layout: ParameterLayout,
    points: np.ndarray,
    log_weight: np.ndarray,
    *,
    want_gradient: bool = True,
) -> tuple[float, np.ndarray, np.ndarray]:
    """Joint log-likelihood, its gradient and the posterior node weights.

    Parameters
    ----------
    theta : ndarray (layout.size,)
    arrays : JointArrays
    layout : ParameterLayout
    points : ndarray (n, Q, 2)
        Quadrature nodes of the random effects per patient.
    log_weight : ndarray (n, Q)
        Log quadrature weights (``∫ f ≈ Σ exp(log_weight) f(points)``).

    Returns
    -------
    loglik : float
    gradient : ndarray (layout.size,) (zeros when ``want_gradient`` is False)
    posterior : ndarray (n, Q)
        Each node's share of the patient's likelihood (the posterior weight of the node).
    """
    beta, sigma, chol = layout.marker_parts(theta)
    s2 = sigma**2
    rr, zr = _residual_stats(arrays, beta)
    b0, b1 = points[..., 0], points[..., 1]
    rss = (
        rr[:, None]
        - 2.0 * (b0 * zr[:, :1] + b1 * zr[:, 1:])
        + b0**2 * arrays.zz[:, None, 0, 0]
        + 2 * b0 * b1 * arrays.zz[:, None, 0, 1]
        + b1**2 * arrays.zz[:, None, 1, 1]
    )
    u0 = b0 / chol[0, 0]
    u1 = (b1 - chol[1, 0] * u0) / chol[1, 1]
    total = (
        log_weight
        - 0.5 * arrays.n_obs[:, None] * (_LOG_2PI + math.log(s2))
        - 0.5 * rss / s2
        - _LOG_2PI
        - math.log(chol[0, 0] * chol[1, 1])
        - 0.5 * (u0**2 + u1**2)
    )

    fixed_nodes = arrays.design_nodes @ beta  # (n, K, G)
    slope_fixed = arrays.slope_nodes @ beta
    fixed_end = arrays.design_end @ beta  # (n,)
    slope_end = arrays.slope_end @ beta
    cached: dict[str, np.ndarray] = {}

    def node_marker(term: str) -> np.ndarray:
        if term not in cached:
            cached[term] = (
                _marker_at(fixed_nodes, points, arrays.times)
                if term == "value"
                else slope_fixed[:, None] + b1[:, :, None, None]
            )
        return cached[term]

    end_marker = {"value": fixed_end[:, None] + b0 + b1 * arrays.end[:, None], "slope": slope_end[:, None] + b1}
    kept = []
    for c, cause in enumerate(arrays.causes):
        sl_h, sl_g, sl_a = layout.cause_slices(c)
        log_h, gamma, alpha = theta[sl_h], theta[sl_g], theta[sl_a]
        lin = cause.covariates @ gamma  # (n,)
        if cause.terms:
            eta = sum(a * node_marker(term) for a, term in zip(alpha, cause.terms))
            node = arrays.weights[:, None] * np.exp(np.minimum(eta, _ETA_CAP))  # (n, Q, K, G)
            eta_end = sum(a * end_marker[term] for a, term in zip(alpha, cause.terms))
        else:
            node = arrays.weights[:, None]  # (n, 1, K, G)
            eta_end = np.zeros((len(lin), 1))
        hazard_nodes = np.exp(lin)[:, None, None, None] * np.exp(log_h)[None, None, :, None] * node
        cumhaz = hazard_nodes.sum(axis=(2, 3))  # (n, Q)
        total = total + cause.event[:, None] * (log_h[arrays.piece][:, None] + lin[:, None] + eta_end) - cumhaz
        kept.append((hazard_nodes, cumhaz, eta_end))

    ll_i = logsumexp(total, axis=1)
    post = np.exp(total - ll_i[:, None])
    grad = np.zeros(layout.size)
    if not want_gradient:
        return float(ll_i.sum()), grad, post

    m1 = np.einsum("nq,nqk->nk", post, points)
    m2 = np.einsum("nq,nqk,nql->nkl", post, points, points)
    grad[: layout.n_marker] = _marker_gradient(arrays, theta, layout, m1, m2, rr, zr)
    for c, (cause, (hazard_nodes, cumhaz, _eta_end)) in enumerate(zip(arrays.causes, kept)):
        sl_h, sl_g, sl_a = layout.cause_slices(c)
        alpha = theta[sl_a]
        q_post = post if hazard_nodes.shape[1] > 1 else np.ones((len(post), 1))
        weighted = np.einsum("nq,nqkg->nkg", q_post, hazard_nodes)  # posterior-averaged node hazards
        grad[sl_h] = np.bincount(arrays.piece, weights=cause.event, minlength=layout.n_pieces) - weighted.sum(
            axis=(0, 2)
        )
        expected_cumhaz = (q_post * cumhaz).sum(axis=1)
        grad[sl_g] = cause.covariates.T @ (cause.event - expected_cumhaz)
        beta_direction = np.zeros(arrays.design_nodes.shape[:3] + (layout.n_fixed,))
        beta_end = np.zeros((len(post), layout.n_fixed))
        for j, (a, term) in enumerate(zip(alpha, cause.terms)):
            at_end = (post * end_marker[term]).sum(axis=1)
            at_nodes = np.einsum("nq,nqkg,nqkg->", q_post, hazard_nodes, node_marker(term))
            grad[sl_a.start + j] = float(cause.event @ at_end - at_nodes)
            design, design_end = (
                (arrays.design_nodes, arrays.design_end) if term == "value" else (arrays.slope_nodes, arrays.slope_end)
            )
            beta_direction += a * design
            beta_end += a * design_end
        if cause.terms:
            grad[: layout.n_fixed] += cause.event @ beta_end - np.einsum("nkg,nkgp->p", weighted, beta_direction)
    return float(ll_i.sum()), grad, post
