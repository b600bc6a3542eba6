"""Saving and loading forests: round trip, and refusal of files that no longer match their SHA-256."""

from __future__ import annotations

import hashlib

import numpy as np
import pytest

from riskbench.models import ModelIntegrityError, SurvivalForest, load_forest, save_forest
from riskbench.models.forest_io import digest_path


@pytest.fixture
def saved(tmp_path, make_stack):
    stack = make_stack(n_patients=80, seed=21)
    forest = SurvivalForest(["x1", "x2"], n_estimators=10, random_state=3).fit(stack)
    path = tmp_path / "models" / "forest.joblib"
    digest = save_forest(forest, path)
    return forest, stack, path, digest


def test_round_trip_gives_the_same_predictions(saved) -> None:
    forest, stack, path, digest = saved
    # the record is in sha256sum's format, checked here with hashlib (Python standard library)
    assert digest_path(path).read_text() == f"{hashlib.sha256(path.read_bytes()).hexdigest()}  forest.joblib\n"
    assert digest == hashlib.sha256(path.read_bytes()).hexdigest()
    loaded = load_forest(path)
    np.testing.assert_array_equal(loaded.predict_risk(stack, 365.25), forest.predict_risk(stack, 365.25))


def test_tampered_file_is_refused(saved) -> None:
    _, _, path, _ = saved
    data = bytearray(path.read_bytes())
    data[len(data) // 2] ^= 0xFF
    path.write_bytes(bytes(data))
    with pytest.raises(ModelIntegrityError, match="changed or replaced"):
        load_forest(path)


def test_missing_or_edited_digest_is_refused(saved) -> None:
    _, _, path, _ = saved
    record = digest_path(path)
    record.write_text("0" * 64 + "  forest.joblib\n")
    with pytest.raises(ModelIntegrityError, match="records 0000"):
        load_forest(path)
    record.unlink()
    with pytest.raises(ModelIntegrityError, match="missing"):
        load_forest(path)
    assert isinstance(ModelIntegrityError("x"), ValueError)


def test_only_fitted_forests_are_saved(tmp_path) -> None:
    with pytest.raises(ValueError, match="fitted SurvivalForest"):
        save_forest(SurvivalForest(["x1"]), tmp_path / "f.joblib")
