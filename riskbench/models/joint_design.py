"""The marker's mean trajectory in the joint model: time basis (straight line or natural cubic spline).

The fixed part of the marker at time ``t`` (years since entry) for a patient with baseline covariates ``x``
is ``β · [1, f(t), x - x̄]``; the random part is ``b₀ + b₁ t``. ``f`` is ``t`` itself, or the natural cubic
spline basis of Hastie, Tibshirani & Friedman (*The Elements of Statistical Learning*, 2nd ed., 2009,
eqs. 5.4-5.5): with knots ξ₁ < ... < ξ_K, ``N₁ = t`` and ``N_{k+1} = d_k(t) - d_{K-1}(t)`` for k = 1..K-2,
``d_k(t) = ((t - ξ_k)₊³ - (t - ξ_K)₊³) / (ξ_K - ξ_k)``; the spline is linear beyond the boundary knots.
:class:`TimeBasis` also gives the derivative in ``t`` (for an association with the marker's slope).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["TimeBasis"]


@dataclass(frozen=True)
class TimeBasis:
    """Time columns of the marker's fixed effects.

    Attributes
    ----------
    knots : tuple of float
        Empty for a straight line; otherwise all knots (boundary knots included), years.
    """

    knots: tuple[float, ...] = ()

    @classmethod
    def from_times(cls, times: np.ndarray, interior_knots: int) -> TimeBasis:
        """A straight line (``interior_knots=0``) or a natural spline with knots at quantiles of ``times``."""
        if interior_knots <= 0:
            return cls(())
        probs = np.linspace(0.0, 1.0, interior_knots + 2)
        knots = np.unique(np.quantile(np.asarray(times, dtype=float), probs))
        return cls(tuple(float(k) for k in knots)) if len(knots) >= 3 else cls(())

    @property
    def n_columns(self) -> int:
        """Number of time columns (1 for a line; K - 1 for a spline with K knots)."""
        return 1 if not self.knots else len(self.knots) - 1

    def names(self) -> list[str]:
        """Column names: ``time_years`` or ``time_spline_1..``."""
        return ["time_years"] if not self.knots else [f"time_spline_{j + 1}" for j in range(self.n_columns)]

    def _truncated(self, t: np.ndarray, power: int) -> np.ndarray:
        xi = np.asarray(self.knots)
        last = xi[-1]
        scale = 3.0 if power == 2 else 1.0
        d = (
            scale
            * (np.clip(t[..., None] - xi[:-1], 0.0, None) ** power - np.clip(t[..., None] - last, 0.0, None) ** power)
        ) / (last - xi[:-1])
        return d[..., :-1] - d[..., -1:]

    def values(self, t: np.ndarray) -> np.ndarray:
        """Basis at times ``t`` (any shape), stacked on a new last axis."""
        t = np.asarray(t, dtype=float)
        if not self.knots:
            return t[..., None]
        return np.concatenate([t[..., None], self._truncated(t, 3)], axis=-1)

    def slopes(self, t: np.ndarray) -> np.ndarray:
        """Derivative of the basis in ``t`` (per year)."""
        t = np.asarray(t, dtype=float)
        if not self.knots:
            return np.ones(t.shape + (1,))
        return np.concatenate([np.ones(t.shape + (1,)), self._truncated(t, 2)], axis=-1)
