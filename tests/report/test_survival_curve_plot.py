"""The survival-curve figure draws what :func:`riskbench.metrics.kaplan_meier_estimate` computed, with the number
at risk beneath, small counts hidden and user labels shown as plain text.

Data: lifelines' ``load_waltons`` (two groups of 129 and 34 subjects). The numbers at risk themselves are
checked against lifelines' event table in ``tests/metrics/test_survival_curves.py``; here the figure must show
exactly those numbers after :func:`riskbench.report.suppression.coarsen_sequence` (threshold 10, common
practice).
"""

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt
import numpy as np
import pytest
from lifelines.datasets import load_waltons

from riskbench.metrics import aalen_johansen_estimate, kaplan_meier_estimate
from riskbench.report.suppression import coarsen_sequence
from riskbench.report.survival_curve_plot import survival_curve_figure

TIMES = [0.0, 20.0, 40.0, 60.0, 75.0]


@pytest.fixture(scope="module")
def estimate():
    w = load_waltons()
    return kaplan_meier_estimate(w["T"], w["E"], group=w["group"])


def _table_texts(fig):
    table_ax = fig.axes[1]
    return {(round(t.get_position()[0], 6), round(t.get_position()[1])): t.get_text() for t in table_ax.texts}


def test_curves_are_the_estimate_and_the_table_its_numbers_at_risk(estimate):
    fig = survival_curve_figure(estimate, at_risk_times=TIMES)
    try:
        ax = fig.axes[0]
        assert len(ax.get_lines()) == 2
        for line, g in zip(ax.get_lines(), estimate.groups):
            rows = estimate.table[estimate.table["group"] == g]
            np.testing.assert_array_equal(line.get_ydata(), np.r_[1.0, rows["estimate"]])
            np.testing.assert_array_equal(line.get_xdata(), np.r_[0.0, rows["time"]])
        texts = _table_texts(fig)
        at_risk = estimate.at_risk(TIMES)
        for row, g in enumerate(estimate.groups):
            expected = coarsen_sequence(at_risk.loc[g].to_numpy(float), 10)
            shown = [texts[(t, len(estimate.groups) - 1 - row)] for t in TIMES]
            assert shown == expected
        assert "<10" in texts.values()  # late times in the small group are hidden
        assert fig.axes[1].get_title(loc="left") == "Number at risk"
        assert "not a medical device" in " ".join(t.get_text() for t in fig.texts)
    finally:
        plt.close(fig)


def test_threshold_one_shows_the_raw_counts(estimate):
    fig = survival_curve_figure(estimate, at_risk_times=TIMES, threshold=1)
    try:
        texts = _table_texts(fig)
        control = estimate.groups.index("control")
        shown = [texts[(t, len(estimate.groups) - 1 - control)] for t in TIMES]
        assert shown == [str(int(n)) for n in estimate.at_risk(TIMES).loc["control"]]
    finally:
        plt.close(fig)


def test_hostile_labels_are_plain_text_and_incidence_curves_start_at_zero():
    rng = np.random.default_rng(4)
    t = rng.exponential(10.0, 300)
    status = rng.choice([0, 1, 2], 300)
    group = np.where(rng.random(300) < 0.5, "$\\frac{a}{b}$ <b>x</b>", "plain")
    fig = survival_curve_figure(aalen_johansen_estimate(t, status, group=group), title="$x^2$ title")
    try:
        ax = fig.axes[0]
        assert all(line.get_ydata()[0] == 0.0 for line in ax.get_lines())
        labels = [t.get_text() for t in fig.axes[1].get_yticklabels()]
        assert r"\$\frac{a}{b}\$ <b>x</b>" in labels  # mathtext neutralised; HTML is escaped where HTML is made
        assert ax.get_title() == r"\$x^2\$ title" and ax.get_ylabel() == "Cumulative incidence"
    finally:
        plt.close(fig)
