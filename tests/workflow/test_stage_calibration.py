"""The calibration part of the comparison stage: each model judged against its own estimand, one O/E in the
table and the figure, a model that cannot be calibrated becomes a note.

Outside check: the cumulative incidence of constant cause-specific hazards in closed form (Putter, Fiocco &
Geskus 2007, Stat Med, section 2), as in tests/metrics/test_calibration_competing.py.
"""

from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest

from riskbench.metrics import calibration_at_horizon
from riskbench.validation.performance import evaluation_time
from riskbench.workflow.config import ConfigError
from riskbench.workflow.stage_calibration import calibration_part
from riskbench.workflow.stage_result import StageResult

HORIZON = 730.5


class _Notes:
    def __init__(self):
        self.added = []

    def attempt(self, part, model, compute, *args, **kwargs):
        try:
            return compute(*args, **kwargs)
        except ValueError as exc:
            self.added.append((part, model, str(exc)))
            return None


def _config(families):
    models = {name: SimpleNamespace(family=fam, params=params) for name, (fam, params) in families.items()}

    def model(name):
        if name not in models:
            raise ConfigError(f"no model named {name!r}")
        return models[name]

    return SimpleNamespace(
        report=SimpleNamespace(small_count_threshold=10), validation=SimpleNamespace(seed=3), model=model
    )


@pytest.fixture(scope="module")
def stack():
    """Two landmark rows per patient (the second a copy shifted by noise), administratively censored at 2 years."""
    rng = np.random.default_rng(8)
    n = 1500
    x = np.clip(rng.normal(size=n), -3, 1.5)
    h1, h2 = 0.0004 * np.exp(x), 0.0003
    t = rng.exponential(1 / (h1 + h2))
    cause = np.where(rng.uniform(size=n) < h1 / (h1 + h2), 1, 2)
    status = np.where(t <= HORIZON, cause, 0)
    time = np.minimum(t, HORIZON)
    cif = h1 / (h1 + h2) * -np.expm1(-(h1 + h2) * HORIZON)
    cs = -np.expm1(-h1 * HORIZON)
    patient = np.arange(n)
    return (np.r_[time, time], np.r_[status, status], np.r_[patient, patient], np.r_[cif, cif], np.r_[cs, cs])


def test_each_model_is_calibrated_against_its_estimand(stack, tmp_path):
    time, status, patient, cif, cs = stack
    config = _config({"landmark": ("landmark_cox", {}), "forest": ("forest", {})})
    result = StageResult(stage="comparison", run_dir=tmp_path)
    notes = _Notes()
    calibration_part(
        config, time, status, patient, {HORIZON: {"landmark": cif, "forest": cs}}, result, notes, lambda h: "2y"
    )
    table = result.tables["calibration_summary"].set_index("model")
    assert table.loc["landmark", "prediction"] == "cumulative incidence"
    assert table.loc["forest", "prediction"] == "cause-specific 1 − S"
    assert "competing events censored" in table.loc["forest", "observed_by"]
    direct = calibration_at_horizon(time, status, cif, evaluation_time(HORIZON, time), cluster=patient, n_boot=0)
    assert table.loc["landmark", "observed_expected"] == pytest.approx(direct.oe_ratio, rel=1e-12)
    for model in ("landmark", "forest"):  # each truth is calibrated against its own estimand
        assert abs(table.loc[model, "slope"] - 1) < 3 * table.loc[model, "slope_se"]
        se_log = np.log(table.loc[model, "oe_upper"] / table.loc[model, "oe_lower"]) / (2 * 1.959964)
        assert abs(np.log(table.loc[model, "observed_expected"])) < 3 * se_log  # Monte Carlo error
    assert table.loc["landmark", "landmark_rows"] == str(time.size)
    assert table.loc["landmark", "patients"] == str(time.size // 2)
    assert {"calibration_landmark_2y", "calibration_forest_2y"} <= set(result.figures)
    assert not notes.added


def test_a_model_that_cannot_be_calibrated_becomes_a_note(stack, tmp_path):
    time, status, patient, cif, _ = stack
    config = _config({"landmark": ("landmark_cox", {"competing": False})})
    coarse = np.where(np.arange(time.size) % 10 == 0, 0.2, 0.1)  # 90% of the rows share one risk
    result = StageResult(stage="comparison", run_dir=tmp_path)
    notes = _Notes()
    calibration_part(
        config, time, status, patient, {HORIZON: {"coarse": coarse, "landmark": cif}}, result, notes, lambda h: "2y"
    )
    assert [n[1] for n in notes.added] == ["coarse"] and "distinct values" in notes.added[0][2]
    table = result.tables["calibration_summary"]
    assert list(table["model"]) == ["landmark"]
    assert table["prediction"].iloc[0] == "cause-specific 1 − S"  # competing = false
    assert isinstance(table, pd.DataFrame)
