"""The β(s) figure: one panel per covariate, hazard ratio per step exp(u·β(s)) with its band, plain log ticks."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from riskbench.report.landmark_effect_plot import landmark_effect_figure


def _bands(shift: float = 0.0) -> pd.DataFrame:
    grid = np.linspace(0.0, 730.5, 11)
    return pd.concat(
        [
            pd.DataFrame(
                {
                    "covariate": c,
                    "landmark_days": grid,
                    "coef": m + shift + 0.2 * grid / 730.5,
                    "lower": m + shift - 0.3,
                    "upper": m + shift + 0.5,
                }
            )
            for c, m in (("age", 0.03), ("score", 1.2))
        ],
        ignore_index=True,
    )


def test_curve_is_the_hazard_ratio_per_step_and_ticks_are_plain_numbers():
    fig = landmark_effect_figure(
        {"full": _bands()},
        {"age": 10.0, "score": 0.5},
        labels={"age": "Age $ (years)"},
        per={"age": "10 years (set in the configuration)"},
    )
    axes = [ax for ax in fig.axes if ax.get_visible()]
    assert len(axes) == 2
    line = axes[0].get_lines()[0]
    np.testing.assert_allclose(line.get_xdata(), np.linspace(0.0, 2.0, 11))  # years since entry
    np.testing.assert_allclose(line.get_ydata(), np.exp(10.0 * (0.03 + 0.2 * np.linspace(0, 1, 11))))
    assert axes[0].get_title() == "Age $ (years)\nper 10 years (set in the configuration)"
    fig.canvas.draw()
    labels = [t.get_text() for t in axes[1].get_yticklabels() if t.get_text()]
    assert labels and all("times" not in t and "^" not in t for t in labels)


def test_several_models_share_a_legend_and_empty_input_is_an_error():
    fig = landmark_effect_figure({"a": _bands(), "b": _bands(0.1)}, {"age": 1.0, "score": 1.0})
    assert [t.get_text() for t in fig.legends[0].get_texts()] == ["a", "b"]
    with pytest.raises(ValueError, match="no β"):
        landmark_effect_figure({}, {})
