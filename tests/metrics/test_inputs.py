"""Bad input is refused with a message that names the argument and the fix."""

import numpy as np
import pytest

from riskbench.metrics import (
    MetricInputError,
    brier_score,
    calibration_at_horizon,
    concordance_uno,
    net_benefit,
    triage_operating_point,
)

T = np.array([1.0, 2.0, 3.0, 4.0, 5.0])
E = np.array([1, 0, 1, 1, 0])
R = np.array([0.5, 0.4, 0.3, 0.2, 0.1])


@pytest.mark.parametrize(
    ("time", "event", "risk", "pattern"),
    [
        (np.array([1.0, np.nan, 3, 4, 5]), E, R, "`time` has 1 missing"),
        (np.array([1.0, -2, 3, 4, 5]), E, R, "`time` has 1 negative"),
        (T, E[:4], R, "`event` has 4 entries but `time` has 5"),
        (T, np.array([1, 0, 3, 1, 0]), R, "coded 0"),
        (T, E, R[:3], "`risk` has shape"),
        (T, E, np.array([0.5, 0.4, np.inf, 0.2, 0.1]), "`risk` has missing or infinite"),
    ],
)
def test_each_bad_array_is_named(time, event, risk, pattern):
    with pytest.raises(MetricInputError, match=pattern):
        brier_score(time, event, risk, 2.5)


def test_errors_are_value_errors():
    assert issubclass(MetricInputError, ValueError)


def test_no_outcome_before_horizon():
    with pytest.raises(MetricInputError, match=r"no outcome .* at or before the horizon 0\.5"):
        calibration_at_horizon(np.r_[T, 0.2], np.r_[E, 0], np.r_[R, 0.9], 0.5)


def test_uno_needs_both_training_arrays():
    with pytest.raises(MetricInputError, match="both `train_time` and `train_event`"):
        concordance_uno(T, E, R, 4.0, train_time=T)


def test_survival_probabilities_refused_by_probability_metrics():
    rng = np.random.default_rng(0)
    x = rng.normal(size=400)
    t = rng.exponential(np.exp(-x))  # hazard exp(x)
    e = np.ones(400, dtype=int)
    surv = np.exp(-0.5 * np.exp(x))  # the model's survival probability by 0.5, not its risk
    for call in (
        lambda: net_benefit(t, e, surv, 0.5, [0.2]),
        lambda: triage_operating_point(t, e, surv, 0.5, target_npv=0.9, n_boot=1),
        lambda: brier_score(t, e, surv, 0.5),
    ):
        with pytest.raises(MetricInputError, match="1 − survival"):
            call()
