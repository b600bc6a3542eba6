"""Calibration and decision-curve figures draw what the metrics computed."""

import matplotlib

matplotlib.use("Agg")
import numpy as np  # noqa: E402
import pytest  # noqa: E402

from riskbench.metrics import calibration_at_horizon, net_benefit  # noqa: E402
from riskbench.report.calibration_plot import calibration_figure  # noqa: E402
from riskbench.report.decision_curve_plot import decision_curve_figure  # noqa: E402


@pytest.fixture(scope="module")
def cohort():
    rng = np.random.default_rng(0)
    x = rng.normal(size=800)
    t_event = rng.exponential(1 / (0.1 * np.exp(x)))
    t_cens = rng.uniform(0, 20, 800)
    return np.minimum(t_event, t_cens), (t_event <= t_cens).astype(int), 1 - np.exp(-0.5 * np.exp(x))


def test_calibration_figure_has_curve_groups_and_histogram(cohort):
    t, e, risk = cohort
    cal = calibration_at_horizon(t, e, risk, 5.0, n_boot=10)
    fig = calibration_figure(cal, risk, model_name="true model")
    main, hist = fig.axes
    line = [ln for ln in main.get_lines() if "smoothed" in str(ln.get_label())][0]
    np.testing.assert_allclose(line.get_ydata(), cal.curve["observed"])
    assert sum(p.get_height() for p in hist.patches) == risk.size
    assert len(main.collections) >= 1  # band


def test_decision_curve_figure_lines(cohort):
    t, e, risk = cohort
    table = net_benefit(t, e, risk, 5.0, np.linspace(0.05, 0.6, 12))
    fig = decision_curve_figure(table, horizon_days=5.0)
    labels = [ln.get_label() for ln in fig.axes[0].get_lines()]
    assert labels == ["model", "treat all", "treat none"]
    with pytest.raises(ValueError, match="lacks column"):
        decision_curve_figure(table.drop(columns=["treat_all"]))


def test_calibration_figure_with_competing_events_shows_groups_only(cohort):
    t, e, risk = cohort
    status = np.where((np.arange(t.size) % 7 == 0) & (e == 1), 2, e)
    cal = calibration_at_horizon(t, status, risk, 5.0, n_groups=5)
    fig = calibration_figure(cal, risk)
    labels = [str(ln.get_label()) for ln in fig.axes[0].get_lines()]
    assert not any("smoothed" in lab for lab in labels)
    assert "O/E" in fig.axes[0].texts[0].get_text()
