"""Readable log-axis ticks and legends off the data in the hazard-ratio figure (the report's own conventions)."""

from __future__ import annotations

import itertools

import pandas as pd
import pytest

from riskbench.report.hazard_ratio_plot import hazard_ratio_figure


def _table(low: float, high: float) -> pd.DataFrame:
    return pd.DataFrame(
        {"hazard_ratio": [(low * high) ** 0.5, 1.1], "hr_lower_95": [low, 1.0], "hr_upper_95": [high, 1.2]},
        index=["a", "b"],
    )


def _labels(fig) -> list[str]:
    fig.canvas.draw()
    ax = fig.axes[0]
    low, high = ax.get_xlim()
    return [t.get_text() for t, v in zip(ax.get_xticklabels(), ax.get_xticks()) if low <= v <= high and t.get_text()]


@pytest.mark.parametrize(("low", "high"), [(0.8, 1.6), (0.05, 30.0), (0.006, 7280.0)])
def test_log_ticks_are_plain_numbers_that_do_not_overlap(low, high):
    fig = hazard_ratio_figure(_table(low, high))
    labels = _labels(fig)
    assert len(labels) >= 2 and all("$" not in t and "10^" not in t for t in labels)
    ax = fig.axes[0]
    boxes = sorted(
        (t.get_window_extent() for t in ax.get_xticklabels() if t.get_text() and t.get_visible()), key=lambda b: b.x0
    )
    shown = [b for b in boxes if ax.bbox.x0 - 1 <= (b.x0 + b.x1) / 2 <= ax.bbox.x1 + 1]
    assert all(a.x1 <= b.x0 for a, b in itertools.pairwise(shown))  # no two labels overlap
    assert not any(t.get_text() for t in ax.xaxis.get_minorticklabels())


def test_legend_sits_beside_the_intervals():
    fig = hazard_ratio_figure({"first": _table(0.5, 2.0), "second": _table(0.7, 1.5)})
    fig.canvas.draw()
    ax = fig.axes[0]
    assert ax.get_legend().get_window_extent().x0 >= ax.bbox.x1
