"""The time grid of a joint-model prediction window, fixed by the model and the row alone.

The cumulative incidence over ``(s, s + w]`` is a product-integral over steps (see
:func:`riskbench.models.joint_prediction.risk_given_draws`). The steps of a row end at the multiples of
``1 / steps_per_year`` years since entry and at the knots of the piecewise-constant baseline hazards (so a
baseline hazard is constant within a step), cut at ``s`` and at ``s + w``. The grid depends on neither the
other rows nor the other horizons of a call, so the risk over ``(s, s + w]`` is the same whether ``w`` is
asked alone or with longer horizons: a horizon reads the product-integral at the last edge at or before
``s + w`` and adds one partial step up to ``s + w``. Within a step the hazards are taken at its midpoint
and integrated exactly (:func:`step_factors`).
"""

from __future__ import annotations

import numpy as np

__all__ = ["grid_edges", "last_edge", "step_edges", "step_factors"]


def grid_edges(landmark: np.ndarray, top: float, knots: np.ndarray, steps_per_year: int) -> np.ndarray:
    """Step edges of each row over ``[s, s + top]`` (years since entry), sorted; the first is ``s``.

    Parameters
    ----------
    landmark : ndarray (n,)
        Each row's landmark ``s`` (years since entry).
    top : float
        Longest horizon of the call (years).
    knots : ndarray (K,)
        0 and the interior knots of the baseline hazards (years).
    steps_per_year : int
        Grid steps per year.

    Returns
    -------
    ndarray (n, M + 1)
        Edges clipped to ``[s, s + top]``; grid points outside the window become repeated edges (steps of
        zero width, which change nothing), so every row has the same number of edges.
    """
    landmark = np.asarray(landmark, dtype=float)
    # the first multiple of the step at or after s; enough multiples to pass s + top
    first = np.ceil(landmark * steps_per_year)
    multiples = (first[:, None] + np.arange(int(np.ceil(top * steps_per_year)) + 1)) / steps_per_year
    inner = np.broadcast_to(np.asarray(knots, dtype=float)[1:], (len(landmark), len(knots) - 1))
    points = np.concatenate([landmark[:, None], multiples, inner], axis=1)
    return np.sort(np.clip(points, landmark[:, None], (landmark + top)[:, None]), axis=1)


def last_edge(edges: np.ndarray, ends: np.ndarray) -> np.ndarray:
    """Index of each row's last edge at or before each end ``(n, H)``; 0 (the landmark) at the least."""
    return (edges[:, None, :] <= ends[:, :, None]).sum(axis=2) - 1


def step_edges(landmark: float, horizon: float, knots: np.ndarray, steps_per_year: int) -> np.ndarray:
    """The distinct step edges of one row's window ``[s, s + horizon]`` (years since entry)."""
    return np.unique(grid_edges(np.array([landmark]), horizon, knots, steps_per_year)[0])


def step_factors(increments: list[np.ndarray]) -> tuple[np.ndarray, np.ndarray]:
    """Outcome incidence and all-cause survival of each step, per survivor at the step's start.

    With cause-specific hazards constant over a step, increments ``dA_c = h_c · width`` and ``dA = Σ dA_c``,
    the exact results are ``F₁ gain = dA₁ / dA · (1 − e^{−dA})`` and ``S factor = e^{−dA}`` (piecewise
    exponential competing risks; Kalbfleisch & Prentice 2002, *The Statistical Analysis of Failure Time
    Data*, section 8.2). With midpoint hazards the product-integral is then second order in the step.

    Parameters
    ----------
    increments : list of ndarray
        ``dA_c`` of each cause (outcome first), same shape.

    Returns
    -------
    gain, factor : ndarray, the shape of the increments.
    """
    total = increments[0] + increments[1] if len(increments) > 1 else increments[0]
    lost = -np.expm1(-total)  # 1 - e^{-dA}, accurate for a small dA; one transcendental call serves both
    # (1 - e^{-dA}) / dA, which is 1 as dA -> 0 (a step of zero width)
    ratio = np.divide(lost, total, out=np.ones_like(total), where=total > 0)
    return increments[0] * ratio, 1.0 - lost
