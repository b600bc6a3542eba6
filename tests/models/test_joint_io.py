"""The joint model's file (riskbench.models.joint_io): a round trip predicts exactly as the fitted model, the file
holds no patient data, and a damaged or edited file is refused with a clear error.

The reference for "exactly" is the fitted model in memory; the data are a small demo-generator cohort (the joint
model fits on its counting-process table as in a run). The content digest is recomputed here from the documented
rule (SHA-256 of the JSON of every key but ``content_sha256`` and ``versions``, keys sorted, no spaces), not with
the module's own function.
"""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from riskbench.models.joint_family import SharedTrajectoryModel
from riskbench.models.joint_io import FORMAT, JointFileError
from riskbench.models.risk_contract import ModelInputError

HORIZONS = [182.625, 365.25, 730.5]


@pytest.fixture(scope="module")
def cohort_tables() -> tuple[pd.DataFrame, pd.DataFrame]:
    from riskbench.cohort import build_cohort
    from riskbench.demo import generate_cohort
    from riskbench.demo.cohort_spec import demo_cohort_spec

    data = generate_cohort(300, 3, n_risk_paths=0)
    cohort = build_cohort(data.patients, data.measurements, data.outcomes, demo_cohort_spec())
    return cohort.counting_process, cohort.landmark_stack([0.0, 365.25, 730.5], 730.5)


def _fit(cp: pd.DataFrame, **params) -> SharedTrajectoryModel:
    settings = {"prediction_draws": 25, "baseline_pieces": 3, "hermite_points": 3, **params}
    return SharedTrajectoryModel(["log_nodule_volume", "age_at_entry", "sex_male"], **settings).fit(cp)


@pytest.fixture(scope="module")
def fitted(cohort_tables) -> SharedTrajectoryModel:
    return _fit(cohort_tables[0])


@pytest.fixture()
def saved(fitted, tmp_path) -> Path:
    return fitted.to_json(tmp_path / "joint.json")


def test_a_loaded_model_predicts_exactly_as_the_fitted_one(fitted, saved, cohort_tables):
    cp, stack = cohort_tables
    loaded = SharedTrajectoryModel.from_json(saved)
    with_history = loaded.with_history(loaded.history_from(cp))
    expected = fitted.predict_curve(stack, HORIZONS)
    np.testing.assert_allclose(with_history.predict_curve(stack, HORIZONS), expected, rtol=0, atol=1e-12)
    np.testing.assert_array_equal(with_history.predict_risk(stack, 365.25), fitted.predict_risk(stack, 365.25))
    assert 0 < expected[:, -1].mean() < 0.5  # a real risk, not a degenerate one
    pd.testing.assert_frame_equal(loaded.joint_summary(), fitted.joint_summary())
    assert loaded.get_params() == fitted.get_params() and loaded.competing_ == fitted.competing_
    # the loaded model itself keeps no history: without one each row's history is rebuilt from the row
    assert loaded.history_.empty and not np.allclose(loaded.predict_curve(stack, HORIZONS), expected)


def test_other_structures_round_trip_too(cohort_tables, tmp_path):
    """A natural-spline time basis, value and slope in the outcome hazard, no competing hazard."""
    cp, stack = cohort_tables
    model = _fit(cp, time_knots=2, association="value_slope", competing=False)
    assert model.model_.structure_.basis.knots and len(model.model_.structure_.cause_terms) == 1
    loaded = SharedTrajectoryModel.from_json(model.to_json(tmp_path / "spline.json"))
    np.testing.assert_allclose(
        loaded.with_history(loaded.history_from(cp)).predict_curve(stack, HORIZONS),
        model.predict_curve(stack, HORIZONS),
        rtol=0,
        atol=1e-12,
    )


def test_the_file_holds_no_patient_data(fitted, saved, cohort_tables):
    cp, _ = cohort_tables
    text = saved.read_text()
    doc = json.loads(text)
    assert doc["format"] == FORMAT and doc["format_version"] == 1
    assert not any(str(p) in text for p in cp["patient_id"].unique())
    numbers = set()

    def collect(value):
        if isinstance(value, dict):
            for v in value.values():
                collect(v)
        elif isinstance(value, list):
            for v in value:
                collect(v)
        elif isinstance(value, float):
            numbers.add(value)

    collect(doc)
    values = set(fitted.history_from(cp)["log_nodule_volume"].to_numpy().tolist())
    assert len(values) > 500 and not numbers & values
    # every estimate is named, and the readable view matches the estimates (Cholesky factor: D = L Lᵀ)
    names = [p["name"] for p in doc["joint"]["parameters"]]
    assert names == fitted.model_.structure_.parameter_names()
    d = np.asarray(doc["joint"]["readable"]["random_effects_covariance"])
    estimates = dict(zip(names, (p["estimate"] for p in doc["joint"]["parameters"])))
    l11 = np.exp(estimates["marker: log random-intercept scale (L11)"])
    l21 = estimates["marker: random-effects L21"]
    assert d[0, 0] == pytest.approx(l11**2, rel=1e-12) and d[1, 0] == pytest.approx(l11 * l21, rel=1e-12)


def _rewrite(path: Path, change, *, reseal: bool) -> None:
    doc = json.loads(path.read_text())
    change(doc)
    if reseal:
        content = {k: v for k, v in doc.items() if k not in ("content_sha256", "versions")}
        text = json.dumps(content, sort_keys=True, allow_nan=True, separators=(",", ":"))
        doc["content_sha256"] = hashlib.sha256(text.encode("utf-8")).hexdigest()
    path.write_text(json.dumps(doc, indent=1))


def _edit_estimate(doc):
    doc["joint"]["parameters"][1]["estimate"] *= 1.5


def test_an_edited_number_is_refused(saved):
    _rewrite(saved, _edit_estimate, reseal=False)
    with pytest.raises(JointFileError, match=r"SHA-256.*edited or damaged"):
        SharedTrajectoryModel.from_json(saved)


def _drop_parameter(doc):
    doc["joint"]["parameters"].pop()


def _drop_covariance(doc):
    del doc["joint"]["covariance"]


def _bad_knots(doc):
    doc["joint"]["structure"]["hazard_knots_years"] = [0.0, 3.0, 2.0]


def _bad_sizes(doc):
    doc["joint"]["structure"]["cause_sizes"][0] = [3, 1]


@pytest.mark.parametrize(
    ("change", "message"),
    [
        (_drop_parameter, "parameters where the structure needs"),
        (_drop_covariance, r"missing or malformed.*covariance"),
        (_bad_knots, "hazard_knots_years must start at 0, increase"),
        (_bad_sizes, "cause_sizes"),
    ],
)
def test_a_resealed_but_inconsistent_file_is_refused(saved, change, message):
    _rewrite(saved, change, reseal=True)
    with pytest.raises(JointFileError, match=message) as caught:
        SharedTrajectoryModel.from_json(saved)
    assert str(saved) in str(caught.value) and "save the model again" in str(caught.value)


def test_foreign_truncated_and_newer_files_are_clear_errors(saved, tmp_path):
    text = saved.read_text()
    cut = tmp_path / "cut.json"
    cut.write_text(text[: len(text) // 2])
    with pytest.raises(ModelInputError, match="cannot read a joint model"):
        SharedTrajectoryModel.from_json(cut)
    other = tmp_path / "other.json"
    other.write_text(json.dumps({"format": "riskbench.cox_model"}))
    with pytest.raises(ModelInputError, match="not a riskbench joint model file"):
        SharedTrajectoryModel.from_json(other)
    _rewrite(saved, lambda doc: doc.update(format_version=99), reseal=True)
    with pytest.raises(ModelInputError, match="upgrade riskbench"):
        SharedTrajectoryModel.from_json(saved)


def test_an_unfitted_model_and_a_history_without_the_marker_are_refused(fitted, tmp_path):
    with pytest.raises(ModelInputError, match="only a fitted"):
        SharedTrajectoryModel(["log_nodule_volume"]).to_json(tmp_path / "x.json")
    with pytest.raises(ModelInputError, match="lacks column"):
        fitted.with_history(pd.DataFrame({"patient_id": ["a"], "time": [0.0]}))
