"""Hazard-ratio forest plot."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from lifelines.datasets import load_rossi

from riskbench.models import CoxModel
from riskbench.report.hazard_ratio_plot import hazard_ratio_figure

COLS = ["fin", "age", "prio"]


def test_one_and_two_models_are_drawn():
    table = load_rossi().rename(columns={"week": "stop", "arrest": "status"})
    full = CoxModel(COLS).fit(table).summary()
    small = CoxModel(COLS[:2]).fit(table).summary()
    fig = hazard_ratio_figure(full, labels={"age": "age (per year)"}, title="Rossi")
    ax = fig.axes[0]
    assert [t.get_text() for t in ax.get_yticklabels()] == ["fin", "age (per year)", "prio"]
    assert ax.get_xscale() == "log"
    # the drawn points are the hazard ratios
    points = np.concatenate([line.get_xdata() for line in ax.lines if line.get_marker() == "s"])
    np.testing.assert_allclose(np.sort(points), np.sort(full["hazard_ratio"].to_numpy()))
    fig2 = hazard_ratio_figure({"full": full, "without prio": small})
    assert len(fig2.axes[0].get_legend().get_texts()) == 2


def test_rejects_a_table_without_intervals():
    with pytest.raises(ValueError, match="hr_lower"):
        hazard_ratio_figure(pd.DataFrame({"hazard_ratio": [1.0]}, index=["x"]))
