"""Hazard ratios per interquartile range, standard deviation or configured step.

Outside definitions: the interquartile range is the 75th minus the 25th percentile with linear interpolation
(Hyndman & Fan 1996, Am Stat 50:361-365, definition 7, R's default), and the hazard ratio for a step of u units
of a covariate with log hazard ratio β is exp(β·u), its Wald interval exp((β ± 1.96·SE)·u) (any survival text,
e.g. Hosmer, Lemeshow & May 2008, *Applied Survival Analysis*, section 4.3, **from memory**).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from riskbench.models.landmark import LandmarkSupermodel
from riskbench.report.effects import effect_step, effect_steps, per_text, scaled_hazard_ratios, unit_of_label


def _stack(n: int = 300, seed: int = 0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    age = rng.normal(60, 9, n)
    smoker = rng.integers(0, 2, n).astype(float)
    frames = []
    for s in (0.0, 365.25):
        t = rng.exponential(900 / np.exp(0.04 * (age - 60) + 0.5 * smoker))
        frames.append(
            pd.DataFrame(
                {
                    "patient_id": np.arange(n),
                    "landmark": s,
                    "time": np.minimum(t, 730.5),
                    "status": (t <= 730.5).astype(int),
                    "age": age + s / 365.25,
                    "smoker": smoker,
                }
            )
        )
    return pd.concat(frames, ignore_index=True)


def test_per_iqr_hazard_ratio_is_exp_beta_times_iqr():
    stack = _stack()
    model = LandmarkSupermodel(["age", "smoker"], landmark_effects="none", competing=False).fit(stack)
    summary = model.summary()
    steps = effect_steps(stack, ["age", "smoker"])
    q1, q3 = np.percentile(stack["age"], [25, 75])  # Hyndman & Fan definition 7
    assert steps["age"].kind == "iqr" and steps["age"].size == pytest.approx(q3 - q1, rel=1e-12)
    assert steps["smoker"].kind == "binary" and steps["smoker"].size == 1.0
    labels = {"age": "Age (years)", "smoker": "Current smoker"}
    table = scaled_hazard_ratios(summary, steps, labels.get).set_index("term")
    beta, se = summary.set_index("term").loc["age", ["coef", "se_robust"]]
    assert table.loc["age", "hazard_ratio"] == pytest.approx(np.exp(beta * (q3 - q1)), rel=1e-10)
    assert table.loc["age", "hr_lower_95"] == pytest.approx(
        np.exp((beta - 1.959963984540054 * se) * (q3 - q1)), rel=1e-9
    )
    assert table.loc["age", "hr_upper_95"] == pytest.approx(
        np.exp((beta + 1.959963984540054 * se) * (q3 - q1)), rel=1e-9
    )
    assert table.loc["age", "per"] == f"{q3 - q1:.3g} years (interquartile range)"
    assert table.loc["smoker", "per"] == "1 (present vs absent)"
    assert table.loc["smoker", "hazard_ratio"] == pytest.approx(np.exp(summary.set_index("term").loc["smoker", "coef"]))
    assert table.loc["age", "p_value"] == pytest.approx(summary.set_index("term").loc["age", "p_value"])


def test_configured_and_sd_steps_and_landmark_interactions_left_out():
    stack = _stack(seed=1)
    model = LandmarkSupermodel(["age", "smoker"], landmark_effects="linear", competing=False).fit(stack)
    steps = effect_steps(stack, ["age", "smoker"], {"age": 10, "smoker": "sd"})
    assert steps["age"].size == 10.0 and steps["age"].kind == "configured"
    assert steps["smoker"].size == pytest.approx(np.std(stack["smoker"], ddof=1))
    table = scaled_hazard_ratios(model.summary(), steps, varying=frozenset({"age"}))
    assert list(table["term"]) == ["age", "smoker"]  # no "age:s" row
    assert table.loc[0, "per"] == "10 (set in the configuration)"
    assert table.loc[0, "effect_at"].startswith("landmark 0")
    assert table.loc[1, "effect_at"] == "every landmark"
    assert table.loc[0, "hazard_ratio"] == pytest.approx(np.exp(10 * model.coef_[0]))


def test_fallbacks_and_errors():
    assert effect_step(np.array([1.0, 1.0, 1.0, 1.0, 5.0])).kind == "sd"  # IQR 0
    assert effect_step(np.array([2.0, 2.0])).kind == "unit"
    assert effect_step(np.array([np.nan, np.nan])).size == 1.0
    assert effect_step(np.array([0.0, 1.0, 1.0]), "iqr").kind == "iqr"
    for bad in (0, -2.0, float("inf"), "range", True):
        with pytest.raises(ValueError, match="effect unit"):
            effect_step(np.array([1.0, 2.0]), bad)
    assert unit_of_label("Nodule volume, change from first (log mm3)") == "log mm3"
    assert unit_of_label("Smoker") == ""
    with pytest.raises(ValueError, match="hazard_ratio"):
        scaled_hazard_ratios(pd.DataFrame({"term": ["a"], "coef": [1.0]}), {})


@settings(max_examples=40, deadline=None)
@given(st.floats(-3, 3), st.floats(0.01, 2), st.floats(0.01, 50))
def test_scaling_is_a_power_of_the_per_unit_ratio(beta, se, step):
    """exp(β·u) = HR₁ᵘ and the interval endpoints scale the same way, whatever β, SE and u > 0."""
    summary = pd.DataFrame(
        {
            "term": ["x"],
            "hazard_ratio": [np.exp(beta)],
            "hr_lower_95": [np.exp(beta - 1.96 * se)],
            "hr_upper_95": [np.exp(beta + 1.96 * se)],
        }
    )
    from riskbench.report.effects import EffectStep

    row = scaled_hazard_ratios(summary, {"x": EffectStep(step, "configured")}).iloc[0]
    assert row["hazard_ratio"] == pytest.approx(np.exp(beta * step), rel=1e-9)
    assert row["hr_lower_95"] <= row["hazard_ratio"] <= row["hr_upper_95"]
    assert np.log(row["hr_upper_95"]) - np.log(row["hr_lower_95"]) == pytest.approx(2 * 1.96 * se * step, rel=1e-9)
    assert per_text(EffectStep(step, "sd"), "mm") == f"{step:.3g} mm (standard deviation)"
