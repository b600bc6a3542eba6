"""The calibration slope and the integrated calibration index (ICI) alone, for resampling loops.

:func:`riskbench.metrics.calibration.calibration_at_horizon` gives everything a report shows about one model's
calibration (grouped table, observed/expected with its interval, intercept, Cox recalibration slope, the smoothed
curve with its band). A bootstrap replicate needs two numbers of it, the slope of the cloglog regression of the
pseudo-observations on cloglog(predicted risk) and the ICI of the smoothed curve (Austin, Harrell & van Klaveren
2020, Stat Med), and measures several models on the same rows: the pseudo-observations depend on the rows and
the horizon only, so :class:`riskbench.metrics.risk_sets.OutcomeSet` computes them once for every model.
:func:`slope_and_ici` makes exactly the computations of ``calibration_at_horizon`` for these two numbers (the same
validation, knots, starting values and fits; a test checks that the numbers agree) and skips the rest.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from riskbench.metrics.calibration import cloglog, rcs_basis, target_status
from riskbench.metrics.cloglog_regression import fit_cloglog
from riskbench.metrics.horizon_inputs import single_horizon_inputs
from riskbench.metrics.inputs import ArrayLike, MetricInputError
from riskbench.metrics.pseudo_observations import pseudo_observations
from riskbench.metrics.risk_sets import OutcomeSet

#: Quantile groups of ``calibration_at_horizon``'s table: fewer rows than this are refused there, so here too.
_GROUPS = 10


class SlopeAndICI(NamedTuple):
    """Calibration slope (1 = ideal) and ICI (mean absolute distance of the smoothed observed risk from the
    predicted risk; 0 = ideal)."""

    slope: float
    ici: float


def slope_and_ici(
    time: ArrayLike,
    status: ArrayLike,
    risk: ArrayLike,
    horizon: float,
    *,
    target: str = "cumulative_incidence",
    outcomes: OutcomeSet | None = None,
) -> SlopeAndICI:
    """The ``slope`` and ``ici`` of :func:`riskbench.metrics.calibration.calibration_at_horizon` (no cluster,
    no band, no direction check) for one set of predicted risks.

    Parameters
    ----------
    time, status
        Follow-up (days) and status (0 censored, 1 outcome, 2 competing event).
    risk
        Predicted probability of the outcome by ``horizon``.
    horizon
        Days; within the follow-up.
    target
        ``"cumulative_incidence"`` or ``"cause_specific"`` (competing events censored), as in
        ``calibration_at_horizon``.
    outcomes
        ``time`` and ``status`` as an evaluation set, whose pseudo-observations are then computed once for every
        model measured on these rows.

    Raises
    ------
    MetricInputError
        As ``calibration_at_horizon`` would (including "too few distinct values" for the spline).
    """
    t, codes, r, h = single_horizon_inputs(time, status, risk, horizon, metric="calibration", check_direction=False)
    codes = target_status(codes, target)
    if t.size < _GROUPS:
        raise MetricInputError(f"`n_groups` must be between 1 and the number of subjects ({t.size}); got {_GROUPS}")
    z = cloglog(r)
    knots = np.quantile(z, [0.1, 0.5, 0.9])
    if np.unique(knots).size < 3:
        raise MetricInputError(
            "`risk` takes too few distinct values for a 3-knot spline (10th, 50th, 90th percentiles coincide); "
            "use the grouped calibration table"
        )
    if outcomes is None:
        pseudo = pseudo_observations(t, codes, h, cause=1)
    else:
        pseudo = outcomes.cached(("pseudo", h, target), lambda: pseudo_observations(t, codes, h, cause=1))
    ones = np.ones((t.size, 1))
    slope_fit = fit_cloglog(np.column_stack([ones, z]), pseudo, start=np.array([0.0, 1.0]), covariance=False)
    design = np.column_stack([np.ones(z.size), rcs_basis(z, knots)])
    start = np.r_[0.0, 1.0, np.zeros(knots.size - 2)]  # the identity: observed = predicted
    smooth = fit_cloglog(design, pseudo, start=start, covariance=False)
    return SlopeAndICI(float(slope_fit.coef[1]), float(np.abs(smooth.mean(design) - r).mean()))
