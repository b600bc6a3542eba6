"""Saving and loading CoxModel as JSON."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from riskbench.models import CoxModel, ModelInputError


def _table(seed: int = 0, n: int = 300) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    df = pd.DataFrame({"patient_id": [f"P{i:05d}" for i in range(n)], "x": rng.normal(size=n)})
    df["z"] = rng.integers(0, 2, n).astype(float)
    df["stop"] = np.ceil(rng.exponential(size=n) * 400 * np.exp(-0.5 * df["x"]))
    df["status"] = rng.choice([0, 1, 2], size=n, p=[0.3, 0.6, 0.1])
    df["arm"] = np.where(rng.random(n) < 0.5, "a", "b")
    return df


@pytest.mark.parametrize("strata", [None, "arm"])
def test_round_trip_reproduces_everything(tmp_path, strata):
    df = _table()
    model = CoxModel(["x", "z"], strata=strata, ties="breslow", penalty=0.01, variance="robust").fit(df)
    path = model.to_json(tmp_path / "cox.json")
    loaded = CoxModel.from_json(path)
    assert loaded.get_params() == {**model.get_params(), "covariates": ["x", "z"]}
    pd.testing.assert_frame_equal(loaded.summary(), model.summary())
    pd.testing.assert_frame_equal(loaded.baseline_cumhaz_, model.baseline_cumhaz_, check_dtype=False)
    probe = df.assign(landmark=30.0)
    np.testing.assert_array_equal(loaded.predict_curve(probe, [30, 365]), model.predict_curve(probe, [30, 365]))
    assert loaded.fit_.lr_test == model.fit_.lr_test and loaded.fit_.n_clusters == len(df)
    doc = json.loads(path.read_text())
    assert {"numpy", "pandas", "scipy", "python"} <= set(doc["versions"])
    assert doc["fit"]["center"] and doc["fit"]["scale"]


def test_refuses_foreign_or_unfitted(tmp_path):
    with pytest.raises(ModelInputError, match="fitted"):
        CoxModel(["x"]).to_json(tmp_path / "a.json")
    other = tmp_path / "other.json"
    other.write_text(json.dumps({"format": "something else"}))
    with pytest.raises(ModelInputError, match="not a riskbench Cox model"):
        CoxModel.from_json(other)
    with pytest.raises(ModelInputError, match="cannot read"):
        CoxModel.from_json(tmp_path / "missing.json")
