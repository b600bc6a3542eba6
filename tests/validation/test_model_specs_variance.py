"""The workflow's time-varying Cox models ask for robust standard errors explicitly (a patient's counting-process
rows are not independent), now that the model no longer switches to them by itself."""

from __future__ import annotations

from riskbench.validation.model_specs import ModelSpec, build_estimator


def test_time_varying_cox_gets_robust_variance_unless_configured_otherwise():
    assert build_estimator(ModelSpec("m", ["x"], family="time_varying_cox")).variance == "robust"
    no_id = ModelSpec("m", ["x"], family="time_varying_cox", params={"cluster": None})
    assert build_estimator(no_id).variance == "model"
    chosen = ModelSpec("m", ["x"], family="time_varying_cox", params={"variance": "model"})
    assert build_estimator(chosen).variance == "model"
