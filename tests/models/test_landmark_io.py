"""Saving and loading LandmarkSupermodel as JSON: the loaded model predicts exactly what the fitted one did."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from riskbench.models import LandmarkSupermodel, ModelInputError


@pytest.mark.parametrize(
    ("effects", "baseline", "competing_rate"),
    [("quadratic", "smooth", 1 / 600), ("none", "stratified", 1 / 600), ("linear", "smooth", 0)],
)
def test_round_trip_reproduces_predictions(tmp_path, make_stack, effects, baseline, competing_rate) -> None:
    stack = make_stack(n_patients=150, competing_rate=competing_rate, seed=4)
    model = LandmarkSupermodel(["x1", "x2"], landmark_effects=effects, baseline=baseline).fit(stack)
    path = model.to_json(tmp_path / "landmark.json")
    loaded = LandmarkSupermodel.from_json(path)
    assert loaded.get_params() == {**model.get_params(), "covariates": ["x1", "x2"]}
    assert (loaded.competing_ is None) == (model.competing_ is None)
    assert _same_fit(loaded.outcome_, model.outcome_)
    assert np.isfinite(loaded.outcome_.loglik) and loaded.outcome_.loglik == model.outcome_.loglik
    if model.competing_ is not None:
        assert _same_fit(loaded.competing_, model.competing_)
    horizons = [100.0, 365.0]
    np.testing.assert_array_equal(loaded.predict_curve(stack, horizons), model.predict_curve(stack, horizons))
    pd.testing.assert_frame_equal(loaded.summary(), model.summary())
    pd.testing.assert_frame_equal(loaded.landmark_coefficients([0, 365]), model.landmark_coefficients([0, 365]))
    doc = json.loads(path.read_text())
    assert {"numpy", "python"} <= set(doc["versions"]) and doc["design"]["design_columns"] == model.design_columns_


def _same_fit(a, b) -> bool:
    """Every field of two cause-specific fits equal (arrays element by element, baselines per stratum)."""
    if a.baseline.keys() != b.baseline.keys():
        return False
    same_baseline = all(np.array_equal(a.baseline[k][i], b.baseline[k][i]) for k in a.baseline for i in (0, 1))
    arrays = all(np.array_equal(getattr(a, f), getattr(b, f)) for f in ("coef", "var", "robust_var", "means"))
    scalars = (a.n_events, a.loglik, a.loglik_null) == (b.n_events, b.loglik, b.loglik_null)
    return same_baseline and arrays and scalars


def test_refuses_foreign_or_unfitted(tmp_path) -> None:
    with pytest.raises(ModelInputError, match="fitted"):
        LandmarkSupermodel(["x1"]).to_json(tmp_path / "a.json")
    other = tmp_path / "other.json"
    other.write_text(json.dumps({"format": "riskbench.cox_model"}))
    with pytest.raises(ModelInputError, match="not a riskbench landmark super-model"):
        LandmarkSupermodel.from_json(other)
    with pytest.raises(ModelInputError, match="cannot read"):
        LandmarkSupermodel.from_json(tmp_path / "missing.json")
    newer = tmp_path / "newer.json"
    newer.write_text(json.dumps({"format": "riskbench.landmark_supermodel", "format_version": 99}))
    with pytest.raises(ModelInputError, match="upgrade"):
        LandmarkSupermodel.from_json(newer)
