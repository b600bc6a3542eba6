"""The calibration figure draws what :func:`riskbench.metrics.calibration_at_horizon` computed, on axes sized
to the predictions, with the legend and the measures beside the data and small counts hidden.

Checks: the drawn curve is the computed curve; the printed O/E is the object's (one O/E for table and
figure); axes end 10% above the 99th percentile of predicted risk (the rule this figure documents); rows
beyond the axes are counted with small counts hidden (common practice: threshold 10 or 11); the subtitle
names what a cause-specific 1 − S is compared with.
"""

import matplotlib

matplotlib.use("Agg")
import numpy as np
import pytest

from riskbench.metrics import calibration_at_horizon
from riskbench.report.calibration_plot import axis_top, calibration_figure, plain_text


@pytest.fixture(scope="module")
def cohort():
    rng = np.random.default_rng(0)
    x = rng.normal(size=800)
    h1 = 0.1 * np.exp(x)
    t_event = rng.exponential(1 / (h1 + 0.05))
    cause = np.where(rng.uniform(size=800) < h1 / (h1 + 0.05), 1, 2)
    t_cens = rng.uniform(0, 20, 800)
    status = np.where(t_event <= t_cens, cause, 0)
    risk = h1 / (h1 + 0.05) * -np.expm1(-(h1 + 0.05) * 5.0)
    return np.minimum(t_event, t_cens), status, risk


def _texts(fig):
    return " ".join(t.get_text() for t in fig.texts) + " " + " ".join(t.get_text() for ax in fig.axes for t in ax.texts)


def test_figure_draws_the_computed_curve_groups_and_histogram(cohort):
    t, s, risk = cohort
    cal = calibration_at_horizon(t, s, risk, 5.0, n_boot=10)
    fig = calibration_figure(cal, risk, model_name="true model", min_group_size=1)
    main, hist, side = fig.axes
    line = next(ln for ln in main.get_lines() if "smoothed" in str(ln.get_label()))
    top = axis_top(risk)
    inside = cal.curve[cal.curve["predicted"] <= top]
    np.testing.assert_allclose(line.get_ydata(), inside["observed"])
    assert sum(p.get_height() for p in hist.patches) == (risk <= top).sum()
    assert len(main.collections) >= 1  # band
    assert main.get_xlim()[1] == pytest.approx(top)
    assert hist.get_ylabel() == "landmark rows"
    assert main.get_legend() is None and side.get_legend() is not None  # legend off the data
    assert f"{cal.oe_ratio:.2f} ({cal.oe_lower:.2f}–{cal.oe_upper:.2f})" in _texts(fig)
    assert "Aalen–Johansen" in _texts(fig)


def test_axes_follow_the_bulk_of_predictions_and_count_the_rest(cohort):
    t, s, risk = cohort
    extreme = 0.3 * risk  # calibration does not matter here; the spread of predictions does
    extreme[:5] = 0.99  # five extreme predictions: beyond the axes, a count below the threshold
    cal = calibration_at_horizon(t, s, extreme, 5.0, n_boot=0, check_direction=False)
    fig = calibration_figure(cal, extreme, min_group_size=10, row_unit="patients")
    main, hist, _ = fig.axes
    assert main.get_xlim()[1] == pytest.approx(1.1 * np.quantile(extreme, 0.99))
    assert main.get_xlim()[1] < 0.99
    assert "<10 patients with higher predicted risk are not drawn" in _texts(fig)
    assert hist.get_ylabel() == "patients"
    assert all(p.get_height() == 0 or p.get_height() >= 10 for p in hist.patches)


def test_cause_specific_prediction_is_labelled(cohort):
    t, s, _ = cohort
    rng = np.random.default_rng(1)
    risk = np.clip(rng.beta(2, 10, t.size), 0.01, 0.9)
    cal = calibration_at_horizon(t, s, risk, 5.0, target="cause_specific", n_boot=0, check_direction=False)
    fig = calibration_figure(cal, risk)
    assert "cause-specific 1 − S" in _texts(fig) and "competing events censored" in _texts(fig)


def test_hostile_model_name_is_plain_text(cohort):
    t, s, risk = cohort
    cal = calibration_at_horizon(t, s, risk, 5.0, n_boot=0)
    name = "$\\frac{1}{0}$ <script>\nalert(1)"
    fig = calibration_figure(cal, risk, model_name=name)
    fig.canvas.draw()  # mathtext would fail or render a formula
    assert plain_text(name) in fig.get_suptitle() and "\n" not in fig.get_suptitle()
    assert plain_text("a$b") == "a\\$b"
