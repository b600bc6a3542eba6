"""Net benefit of treating by predicted risk at a horizon (decision curve analysis, Vickers et al. 2008,
survival version: the observed risk among those above a threshold is estimated by Kaplan–Meier, or by
Aalen–Johansen when competing events are present).

NB(p) = P(risk >= p)·[O⁺ − (1 − O⁺)·p/(1 − p)], O⁺ = observed risk by the horizon among risk >= p;
treat-none is 0. Treat-all is NB_all(p) = F(h) − (1 − F(h))·p/(1 − p) with F(h) the whole cohort's
Aalen–Johansen cumulative incidence of the outcome by the horizon: a patient who dies of another cause first
never has the outcome, so 1 − Kaplan–Meier with competing events censored (which treats them as if they could
still have it) would overstate the benefit of treating everyone. At p = 0 every measure is the incidence itself.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from riskbench.metrics.censoring import observed_risk
from riskbench.metrics.horizon_inputs import single_horizon_inputs
from riskbench.metrics.inputs import ArrayLike, MetricInputError
from riskbench.metrics.risk_sets import OutcomeSet
from riskbench.metrics.threshold_groups import split_by_thresholds


def net_benefit(
    time: ArrayLike,
    event: ArrayLike,
    risk: ArrayLike,
    horizon: float,
    thresholds: ArrayLike,
    *,
    check_direction: bool = True,
    outcomes: OutcomeSet | None = None,
) -> pd.DataFrame:
    """Net benefit of the model, of treating everyone and of treating no one, at each risk threshold.

    Parameters
    ----------
    time
        Follow-up (days).
    event
        0 censored, 1 outcome, 2 competing event.
    risk
        Predicted probability of the outcome by ``horizon``.
    horizon
        Days; within [min(time), max(time)).
    thresholds
        Threshold probabilities in [0, 1) at which one would act (0: treat everyone the model gives any risk).
    check_direction
        Refuse a ``risk`` that is clearly anti-concordant (a survival probability passed by mistake).
    outcomes
        ``time`` and ``event`` as an evaluation set (:class:`riskbench.metrics.risk_sets.OutcomeSet`), whose
        observed risk curve then serves every model measured on these rows.

    Returns
    -------
    DataFrame
        ``threshold, model, treat_all, treat_none, fraction_treated``.
    """
    t, status, r, h = single_horizon_inputs(
        time, event, risk, horizon, metric="net benefit", check_direction=check_direction
    )
    p = np.atleast_1d(np.asarray(thresholds, dtype=float))
    if p.size == 0 or (p < 0).any() or (p >= 1).any() or not np.isfinite(p).all():
        raise MetricInputError("`thresholds` must be probabilities from 0 up to (not including) 1 (e.g. 0 … 0.5)")
    order = np.argsort(p)
    split = split_by_thresholds(t, status, r, h, np.r_[p[order], 1.0 + 1e-9])  # last: nobody above = whole cohort below
    n = t.size
    # Aalen–Johansen with competing events (see the module notes)
    overall = (
        observed_risk(t, status, h)
        if outcomes is None
        else outcomes.observed_risk("cumulative_incidence", status).at(h)
    )[0]
    odds = p[order] / (1 - p[order])
    frac = split.n_above[:-1] / n
    model = frac * (split.risk_above[:-1] - (1 - split.risk_above[:-1]) * odds)
    table = pd.DataFrame(
        {
            "threshold": p[order],
            "model": model,
            "treat_all": overall - (1 - overall) * odds,
            "treat_none": 0.0,
            "fraction_treated": frac,
        }
    )
    return table.reset_index(drop=True)
