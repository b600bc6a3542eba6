"""Likelihood-ratio test between landmark-effect forms of the super-model.

Outside check: the log partial likelihoods of both forms are recomputed with lifelines' CoxPHFitter (Efron
ties, a general Cox fitter used only in this test) on the same design columns built by hand:
x, x·(s/S), x·(s/S)², s/S, (s/S)².
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from lifelines import CoxPHFitter

from riskbench.validation.errors import ValidationInputError
from riskbench.validation.landmark_form import form_comparisons, landmark_form_test


def simulate_stack(
    n_patients: int = 300,
    beta: tuple[float, float] = (0.7, -0.4),
    beta_slope: tuple[float, float] = (0.0, 0.0),
    seed: int = 0,
) -> pd.DataFrame:
    """Landmarks 0, 6, 12, 18 months; outcome hazard exp(β(s)·x)/800 per day with β(s) = beta + beta_slope·s/S,
    uniform censoring, administrative censoring at 2 years after each landmark."""
    rng = np.random.default_rng(seed)
    landmarks = (0.0, 182.625, 365.25, 547.875)
    x = rng.normal(size=(n_patients, 2))
    frames = []
    for s in landmarks:
        x = x + rng.normal(scale=0.2, size=x.shape)
        b = np.asarray(beta) + np.asarray(beta_slope) * s / landmarks[-1]
        t1 = rng.exponential(800.0 / np.exp(x @ b))
        time = np.minimum.reduce([t1, rng.uniform(60.0, 1500.0, size=n_patients), np.full(n_patients, 730.5)])
        frames.append(
            pd.DataFrame(
                {
                    "patient_id": [f"P{i:04d}" for i in range(n_patients)],
                    "landmark": s,
                    "time": time,
                    "status": (time == t1).astype(int),
                    "x1": x[:, 0],
                    "x2": x[:, 1],
                }
            )
        )
    return pd.concat(frames, ignore_index=True)


def _lifelines_loglik(stack: pd.DataFrame, power: int) -> float:
    r = stack["landmark"] / stack["landmark"].max()
    design = pd.DataFrame({"time": stack["time"], "event": (stack["status"] == 1).astype(int)})
    for c in ("x1", "x2"):
        design[c] = stack[c]
        for k in range(1, power + 1):
            design[f"{c}_s{k}"] = stack[c] * r**k
    design["ls1"], design["ls2"] = r, r**2
    return CoxPHFitter().fit(design, "time", "event").log_likelihood_


def test_statistic_equals_lifelines_logliks_and_detects_a_drifting_effect():
    stack = simulate_stack(n_patients=500, beta=(0.3, -0.4), beta_slope=(0.8, 0.0), seed=11)
    test = landmark_form_test(stack, ["x1", "x2"], "none", "linear")
    expected = 2 * (_lifelines_loglik(stack, 1) - _lifelines_loglik(stack, 0))
    assert test["lr_statistic"] == pytest.approx(expected, rel=1e-6)
    assert test["df"] == 2 and test["rows"] == len(stack)
    assert test["p_value"] < 1e-3  # the effect of x1 drifts by 0.8 over the landmark range


def test_quadratic_form_not_needed_when_the_truth_is_linear():
    """Under the smaller form the statistic is chi-squared(2): over 20 simulated stacks the test rejects at 5%
    a handful of times at most (binomial(20, 0.05): P(>= 5) < 0.003)."""
    rejections = sum(
        landmark_form_test(
            simulate_stack(n_patients=250, beta_slope=(0.5, 0.0), seed=100 + i), ["x1", "x2"], "linear", "quadratic"
        )["p_value"]
        < 0.05
        for i in range(20)
    )
    assert rejections < 5


def test_which_forms_are_compared_and_clear_errors():
    assert form_comparisons("linear", 8) == [("linear", "quadratic")]
    assert form_comparisons("none", 8) == [("none", "linear"), ("none", "quadratic")]
    assert form_comparisons("quadratic", 8) == [("linear", "quadratic")]
    assert form_comparisons("linear", 2) == [("none", "linear")]  # the richest form two landmarks allow
    assert form_comparisons("none", 1) == []
    with pytest.raises(ValidationInputError, match="not nested"):
        landmark_form_test(simulate_stack(n_patients=50), ["x1"], "quadratic", "linear")
    with pytest.raises(ValidationInputError, match="landmark_effects must be one of"):
        form_comparisons("spline", 3)


def test_rows_with_missing_covariates_are_left_out_of_both_fits():
    stack = simulate_stack(n_patients=200, seed=12)
    stack.loc[::7, "x2"] = np.nan
    test = landmark_form_test(stack, ["x1", "x2"], "linear", "quadratic", params={"baseline": "smooth"})
    assert test["rows"] == int(stack["x2"].notna().sum())
