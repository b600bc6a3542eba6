"""Decision-curve figures draw what the metrics computed (calibration figures: test_calibration_plot.py)."""

import matplotlib

matplotlib.use("Agg")
import numpy as np
import pytest

from riskbench.metrics import net_benefit
from riskbench.report.decision_curve_plot import decision_curve_figure


@pytest.fixture(scope="module")
def cohort():
    rng = np.random.default_rng(0)
    x = rng.normal(size=800)
    t_event = rng.exponential(1 / (0.1 * np.exp(x)))
    t_cens = rng.uniform(0, 20, 800)
    return np.minimum(t_event, t_cens), (t_event <= t_cens).astype(int), 1 - np.exp(-0.5 * np.exp(x))


def test_decision_curve_figure_lines(cohort):
    t, e, risk = cohort
    table = net_benefit(t, e, risk, 5.0, np.linspace(0.05, 0.6, 12))
    fig = decision_curve_figure(table, horizon_days=5.0)
    labels = [ln.get_label() for ln in fig.axes[0].get_lines()]
    assert labels == ["model", "treat all", "treat none"]
    with pytest.raises(ValueError, match="lacks column"):
        decision_curve_figure(table.drop(columns=["treat_all"]))
