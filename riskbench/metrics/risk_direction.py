"""Refuse survival probabilities passed as ``risk`` when the data make it unambiguous."""

from __future__ import annotations

import numpy as np

from riskbench.metrics.concordance import concordance_harrell
from riskbench.metrics.inputs import MetricInputError


def check_risk_direction(time: np.ndarray, status: np.ndarray, risk: np.ndarray) -> None:
    """Raise when ``risk`` is clearly anti-concordant with the outcome (Harrell's C below 0.35 and more than
    four standard errors below 0.5, over at least 50 comparable pairs): the usual cause is a survival
    probability passed where the probability of the outcome is expected. Pass ``check_direction=False`` to
    evaluate a genuinely inverted model.
    """
    if not (status == 1).any() or np.ptp(risk) == 0:
        return
    c = concordance_harrell(time, status, risk)
    if c.comparable >= 50 and c.estimate < 0.35 and (0.5 - c.estimate) > 4 * c.se:
        raise MetricInputError(
            f"`risk` ranks subjects in reverse (Harrell's C = {c.estimate:.3f}, SE {c.se:.3f}): higher values go "
            "with later outcomes. `risk` must be the predicted probability of the outcome by the horizon; if "
            "you passed a survival probability, pass 1 − survival (or set check_direction=False to score an "
            "inverted model on purpose)"
        )
