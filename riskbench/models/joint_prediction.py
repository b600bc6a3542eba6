"""Dynamic predictions of the joint model: risk in (s, s + w] given survival to s and the marker history.

For a patient still event-free at the landmark ``s`` with measurements ``Y(s)`` taken at or before ``s``
(Rizopoulos 2011, Biometrics 67:819-829, sections 2-3)::

    π(s + w | s) = ∫ F₁(s, s + w | b, θ) p(b | T > s, Y(s), θ) db

where ``F₁(s, s + w | b, θ)`` is the cumulative incidence of the outcome over ``(s, s + w]`` given survival
to ``s`` (the competing event removes the patient from risk), from the cause-specific hazards given ``b``.

Monte Carlo scheme (seeded):

* ``b`` is drawn from its posterior by importance sampling: the proposal is the marker-only posterior
  ``N(μ_i(θ), Σ_i(θ))`` (closed form, :func:`riskbench.models.joint_likelihood.marker_posterior`), under which
  ``p(Y(s) | b) p(b) / proposal`` is constant, so the self-normalised weight of a draw is the survival to ``s``,
  ``exp(-H₁(s | b) - H₂(s | b))``;
* with ``parameter_draws > 0`` the parameters are drawn too, ``θ⁽ᵐ⁾ ~ N(θ̂, var(θ̂))``, each with its own
  ``b`` draws, and the prediction is the mean of the ``π⁽ᵐ⁾`` with the 2.5% and 97.5% quantiles as an
  interval (the published scheme); otherwise ``θ = θ̂``;
* the cumulative incidence over ``(s, s + w]`` is the product-integral of the cause-specific hazards
  (Aalen & Johansen 1978) over steps ending at the multiples of ``1 / steps_per_year`` years and at the
  baseline knots, cut at ``s`` and ``s + w`` (:mod:`riskbench.models.joint_window`), each step's hazards held
  at their midpoint values and integrated exactly (:func:`riskbench.models.joint_window.step_factors`).

Only measurements at or before each row's ``s`` enter its prediction (leakage-free by construction). A row's
prediction is a function of the row and the model only: its standard normal draws come from its own stream
(:mod:`riskbench.models.row_streams`) and its time grid does not depend on the other horizons asked for.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from riskbench.models.joint_data import History, fixed_design, marker_sums
from riskbench.models.joint_likelihood import marker_posterior
from riskbench.models.joint_quadrature import legendre_pieces, piece_index
from riskbench.models.joint_structure import JointStructure
from riskbench.models.joint_window import grid_edges, last_edge, step_factors

__all__ = ["PredictionRows", "marker_band", "posterior_draws", "risk_given_draws", "rows_history"]

_ETA_CAP = 600.0


@dataclass(frozen=True)
class PredictionRows:
    """Rows to predict: landmark ``s`` (years), each row's measurement history up to ``s`` and covariates.

    ``history.patient`` indexes the rows (not patients); ``marker_x`` and ``cause_x`` are centred.
    """

    landmark: np.ndarray
    history: History
    marker_x: np.ndarray
    cause_x: tuple[np.ndarray, ...]

    def __len__(self) -> int:
        return len(self.landmark)

    def subset(self, rows: slice) -> PredictionRows:
        """The rows in ``rows`` (a contiguous slice) with their measurements."""
        index = np.arange(len(self))[rows]
        keep = (self.history.patient >= index[0]) & (self.history.patient <= index[-1])
        history = History(self.history.patient[keep] - index[0], self.history.time[keep], self.history.value[keep])
        return PredictionRows(self.landmark[rows], history, self.marker_x[rows], tuple(x[rows] for x in self.cause_x))


def rows_history(history: History, row_patient: np.ndarray, landmark: np.ndarray) -> History:
    """Each row's measurements at or before its landmark (``row_patient`` -1: a patient never measured).

    ``history`` must be sorted by patient, then time. The result's ``patient`` is the row index.
    """
    key = history.patient * 1e4 + history.time
    first = np.searchsorted(history.patient, row_patient, side="left")
    last = np.searchsorted(key, row_patient * 1e4 + landmark * (1 + 1e-12), side="right")
    counts = np.where(row_patient >= 0, np.maximum(last - first, 0), 0)
    rows = np.repeat(np.arange(len(row_patient)), counts)
    offsets = np.arange(counts.sum()) - np.repeat(np.cumsum(counts) - counts, counts)
    position = first[rows] + offsets
    return History(rows, history.time[position], history.value[position])


def _marker_values(
    structure: JointStructure, theta: np.ndarray, marker_x: np.ndarray, draws: np.ndarray, times: np.ndarray, term: str
) -> np.ndarray:
    """Marker value or slope at ``times`` (R, ...) for every draw (R, K, 2) -> (R, K, ...)."""
    beta = theta[: structure.layout.n_fixed]
    extra = times.ndim - 1
    x = marker_x.reshape(marker_x.shape[:1] + (1,) * extra + marker_x.shape[1:])
    design, slope = fixed_design(structure.basis, times, x)
    expand = (slice(None), slice(None)) + (None,) * extra
    if term == "value":
        return (design @ beta)[:, None] + draws[..., 0][expand] + draws[..., 1][expand] * times[:, None]
    return (slope @ beta)[:, None] + draws[..., 1][expand]


def _log_hazard(
    structure: JointStructure, theta: np.ndarray, rows: PredictionRows, c: int, draws: np.ndarray, times: np.ndarray
) -> np.ndarray:
    """Log cause-specific hazard of cause ``c`` at ``times`` (R, ...) for each draw -> (R, K, ...)."""
    sl_h, sl_g, sl_a = structure.layout.cause_slices(c)
    extra = times.ndim - 1
    lin = rows.cause_x[c] @ theta[sl_g]
    out = (theta[sl_h][piece_index(structure.knots, times)] + lin.reshape((-1,) + (1,) * extra))[:, None]
    for a, term in zip(theta[sl_a], structure.cause_terms[c]):
        out = out + a * _marker_values(structure, theta, rows.marker_x, draws, times, term)
    return np.minimum(out, _ETA_CAP)


def posterior_draws(
    structure: JointStructure, theta: np.ndarray, rows: PredictionRows, z: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Draws of ``b`` (R, K, 2) and their normalised importance weights (R, K) given ``T > s`` and ``Y(s)``.

    ``z`` (R, K, 2) holds each row's standard normal draws (:func:`riskbench.models.row_streams.row_normals`).
    """
    n, n_draws = z.shape[:2]
    beta, sigma, chol = structure.layout.marker_parts(theta)
    x = rows.marker_x[rows.history.patient]
    fixed, _ = fixed_design(structure.basis, rows.history.time, x)
    mean, cov = marker_posterior(marker_sums(rows.history, fixed, n), beta, sigma, chol)
    draws = mean[:, None, :] + np.einsum("nij,nkj->nki", np.linalg.cholesky(cov), z)
    times, weights = legendre_pieces(rows.landmark, structure.knots, structure.legendre_points)
    log_w = np.zeros((n, n_draws))
    for c in range(len(structure.cause_terms)):
        hazard = np.exp(_log_hazard(structure, theta, rows, c, draws, times))
        log_w -= np.einsum("nkpg,npg->nk", hazard, weights)
    log_w -= log_w.max(axis=1, keepdims=True)
    w = np.exp(log_w)
    return draws, w / w.sum(axis=1, keepdims=True)


def risk_given_draws(
    structure: JointStructure,
    theta: np.ndarray,
    rows: PredictionRows,
    draws: np.ndarray,
    weights: np.ndarray,
    horizons: np.ndarray,
    steps_per_year: int,
) -> np.ndarray:
    """Weighted mean over draws of the outcome's cumulative incidence over ``(s, s + h]`` -> (R, len(h)).

    Parameters
    ----------
    horizons : ndarray (H,)
        Horizons ``h`` (years).
    steps_per_year : int
        Steps per year of the grid (:func:`riskbench.models.joint_window.grid_edges`).
    """
    horizons = np.asarray(horizons, dtype=float)
    n = len(rows)
    top = float(horizons.max()) if len(horizons) else 0.0
    if top <= 0:
        return np.zeros((n, len(horizons)))
    causes = range(len(structure.cause_terms))
    edges = grid_edges(rows.landmark, top, structure.knots, steps_per_year)  # (R, M + 1)
    m = edges.shape[1] - 1
    # each horizon reads the product-integral at its last edge and adds one partial step to s + h
    ends = rows.landmark[:, None] + horizons[None, :]  # (R, H)
    at = last_edge(edges, ends)
    low = np.take_along_axis(edges, at, axis=1)
    # the grid's M steps, then the H partial steps, in one pass over the hazards
    left, right = np.concatenate([edges[:, :-1], low], axis=1), np.concatenate([edges[:, 1:], ends], axis=1)
    mids, width = 0.5 * (left + right), right - left
    increments = [np.exp(_log_hazard(structure, theta, rows, c, draws, mids)) * width[:, None, :] for c in causes]
    gain, kept = step_factors(increments)
    survival = np.ones(gain.shape[:-1] + (m + 1,))  # all-cause survival at each edge
    np.cumprod(kept[..., :m], axis=-1, out=survival[..., 1:])
    incidence = np.zeros_like(survival)
    np.cumsum(survival[..., :-1] * gain[..., :m], axis=-1, out=incidence[..., 1:])
    index = np.broadcast_to(at[:, None, :], (n, draws.shape[1], len(horizons)))
    risk = np.take_along_axis(incidence, index, axis=-1) + np.take_along_axis(survival, index, axis=-1) * gain[..., m:]
    return np.einsum("nk,nkh->nh", weights, np.clip(risk, 0.0, 1.0))


def marker_band(
    structure: JointStructure,
    theta: np.ndarray,
    rows: PredictionRows,
    draws: np.ndarray,
    weights: np.ndarray,
    times: np.ndarray,
    level: float = 0.95,
) -> tuple[np.ndarray, ...]:
    """Posterior mean and pointwise band of the true marker value at ``times`` (years) for each row.

    Returns mean, lower and upper, each (R, len(times)); the band is the weighted ``level`` quantile range of
    the draws.
    """
    grid = np.broadcast_to(np.asarray(times, dtype=float), (len(rows), len(times)))
    values = _marker_values(structure, theta, rows.marker_x, draws, grid, "value")  # (R, K, T)
    mean = np.einsum("nk,nkt->nt", weights, values)
    order = np.argsort(values, axis=1)
    sorted_values = np.take_along_axis(values, order, axis=1)
    cumulative = np.cumsum(
        np.take_along_axis(np.broadcast_to(weights[:, :, None], values.shape), order, axis=1), axis=1
    )
    tail = (1.0 - level) / 2

    def quantile(prob: float) -> np.ndarray:
        index = np.clip((cumulative < prob).sum(axis=1), 0, values.shape[1] - 1)
        return np.take_along_axis(sorted_values, index[:, None, :], axis=1)[:, 0, :]

    return mean, quantile(tail), quantile(1.0 - tail)
