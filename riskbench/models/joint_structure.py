"""The fixed shape of a fitted joint model: parameter layout, time basis, hazard knots and covariate means.

Everything a prediction needs besides the parameter vector; kept in one frozen object so prediction code
does not reach into the estimator.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from riskbench.models.joint_design import TimeBasis
from riskbench.models.joint_likelihood import ParameterLayout

__all__ = ["JointStructure"]


@dataclass(frozen=True)
class JointStructure:
    """Shape of a joint model (times in years).

    Attributes
    ----------
    layout : ParameterLayout
    basis : TimeBasis
        Time columns of the marker's fixed effects.
    knots : ndarray
        0 and the interior knots of the piecewise-constant baseline hazards (years).
    cause_terms : tuple of tuple of str
        Marker terms (``"value"``, ``"slope"``) of each cause-specific hazard (outcome first).
    marker_covariates, cause_covariates : tuple of str, tuple of tuple of str
        Covariate names of the marker model and of each cause.
    marker_means, cause_means : ndarray, tuple of ndarray
        Training means subtracted from those covariates.
    legendre_points : int
        Gauss–Legendre nodes per baseline piece.
    """

    layout: ParameterLayout
    basis: TimeBasis
    knots: np.ndarray
    cause_terms: tuple[tuple[str, ...], ...]
    marker_covariates: tuple[str, ...]
    cause_covariates: tuple[tuple[str, ...], ...]
    marker_means: np.ndarray
    cause_means: tuple[np.ndarray, ...]
    legendre_points: int

    def parameter_names(self) -> list[str]:
        """A readable name for every entry of ``θ``."""
        names = ["marker: intercept (at covariate means)"] + [f"marker: {c}" for c in self.basis.names()]
        names += [f"marker: {c}" for c in self.marker_covariates]
        names += [
            "marker: log residual SD",
            "marker: log random-intercept scale (L11)",
            "marker: random-effects L21",
            "marker: log random-slope scale (L22)",
        ]
        upper = list(self.knots[1:]) + [np.inf]
        for label, terms, covariates in zip(("outcome", "competing"), self.cause_terms, self.cause_covariates):
            for lo, hi in zip(self.knots, upper):
                names.append(f"{label}: log baseline hazard per year, ({lo:.3g}, {hi:.3g}] years")
            names += [f"{label}: {c}" for c in covariates]
            names += [
                f"{label}: association, current marker {'value' if t == 'value' else 'slope per year'}" for t in terms
            ]
        return names
