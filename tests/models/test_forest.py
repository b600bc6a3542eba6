"""Survival forest on the landmark stack: time coarsening, determinism, the prediction contract."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given
from hypothesis import strategies as st
from lifelines.utils import concordance_index

from riskbench.models import RiskModel, SurvivalForest
from riskbench.models.forest import coarsen_times, tree_blocks
from riskbench.models.risk_contract import ModelInputError

MONTH = 30.4375  # days; 1 month = 365.25 / 12 (DEVELOPERS.md convention)


@given(st.lists(st.floats(1e-3, 5000.0), min_size=1, max_size=50))
def test_coarsening_never_moves_a_time_earlier_and_by_less_than_one_step(times: list[float]) -> None:
    coarse = coarsen_times(times, MONTH)
    # times within 1e-9 grid steps above a grid point stay on it (floating-point tolerance of the rounding)
    assert np.all(coarse >= np.asarray(times) - 1e-9 * MONTH)
    assert np.all(coarse - np.asarray(times) < MONTH + 1e-9)
    np.testing.assert_allclose(np.round(coarse / MONTH), coarse / MONTH, atol=1e-9)


def test_coarsening_keeps_grid_points() -> None:
    np.testing.assert_allclose(coarsen_times([730.5, 30.4375, 0.2, 31.0], MONTH), [730.5, MONTH, MONTH, 2 * MONTH])
    np.testing.assert_allclose(coarsen_times([3.3], None), [3.3])
    with pytest.raises(ModelInputError, match="grid_days"):
        coarsen_times([1.0], 0.0)


def _small_forest(**params) -> SurvivalForest:
    defaults = dict(n_estimators=25, min_samples_leaf=10, random_state=7)
    return SurvivalForest(["x1", "x2"], **(defaults | params))


def test_same_seed_same_forest_other_seed_other_forest(make_stack) -> None:
    stack = make_stack(n_patients=150, seed=11)
    a = _small_forest().fit(stack).predict_risk(stack, 365.25)
    b = _small_forest().fit(stack).predict_risk(stack, 365.25)
    c = _small_forest(random_state=8).fit(stack).predict_risk(stack, 365.25)
    np.testing.assert_array_equal(a, b)
    assert not np.allclose(a, c)


def test_worker_count_does_not_change_the_forest(make_stack) -> None:
    """Trees grow in seeded blocks of 25 whatever n_jobs is, so 1 and 2 workers give the same forest."""
    stack = make_stack(n_patients=100, seed=16)
    one = _small_forest(n_estimators=30, n_jobs=1).fit(stack)
    two = _small_forest(n_estimators=30, n_jobs=2).fit(stack)
    assert len(one.forest_.estimators_) == 30 == one.forest_.n_estimators
    np.testing.assert_array_equal(one.predict_curve(stack, [200.0, 600.0]), two.predict_curve(stack, [200.0, 600.0]))


def test_forest_is_cause_specific_and_on_the_grid(make_stack) -> None:
    """The competing event is treated as censoring (a cause-specific forest); event times sit on the grid."""
    stack = make_stack(n_patients=150, seed=12, competing_rate=1 / 500)
    assert (stack["status"] == 2).sum() > 20
    forest = _small_forest(max_samples=200).fit(stack)
    censored = _small_forest(max_samples=200).fit(stack.assign(status=stack["status"].replace(2, 0)))
    np.testing.assert_array_equal(forest.predict_risk(stack, 700.0), censored.predict_risk(stack, 700.0))
    np.testing.assert_allclose(forest.event_times_ / MONTH, np.round(forest.event_times_ / MONTH))
    assert len(forest.event_times_) <= 24


def test_contract_on_unseen_patients_and_discrimination(make_stack) -> None:
    """Rows of new patients (covariates only) get risks in [0, 1], independent of the other rows, with
    curves non-decreasing in the horizon; the risk ranks held-out outcomes better than chance
    (C-index 0.5 for an unrelated score is **common practice**; the simulated hazard ratio is e^0.7 per SD)."""
    train = make_stack(n_patients=250, seed=13)
    test = make_stack(n_patients=250, seed=14, id_prefix="Q")
    forest = _small_forest().fit(train)
    assert isinstance(forest, RiskModel)
    covariates_only = test[["x1", "x2"]]
    risk = forest.predict_risk(covariates_only, 365.25)
    assert risk.shape == (len(test),) and np.all((risk >= 0) & (risk <= 1))
    np.testing.assert_allclose(forest.predict_risk(covariates_only.iloc[[5]], 365.25), risk[[5]])
    curve = forest.predict_curve(covariates_only, [10.0, 182.625, 365.25, 730.5])
    assert np.all(np.diff(curve, axis=1) >= 0) and np.all(curve[:, 0] == 0)
    np.testing.assert_allclose(curve[:, 2], risk)
    c_index = concordance_index(test["time"], -forest.predict_risk(test, 730.5), test["status"] == 1)
    assert c_index > 0.6


def test_forest_errors(make_stack) -> None:
    stack = make_stack(n_patients=60, seed=15)
    with pytest.raises(ModelInputError, match="not fitted"):
        _small_forest().predict_risk(stack, 100.0)
    with pytest.raises(ModelInputError, match=r"'x2' .*missing in 1 row.*\[missing_data\] method"):
        _small_forest().fit(stack.assign(x2=stack["x2"].mask(stack.index == 3)))
    with pytest.raises(ModelInputError, match="time <= 0"):
        _small_forest().fit(stack.assign(time=-1.0))
    forest = _small_forest().fit(stack)
    with pytest.raises(ModelInputError, match="beyond"):
        forest.predict_risk(stack, 1000.0)
    with pytest.raises(ModelInputError, match="lacks covariate"):
        forest.predict_risk(pd.DataFrame({"x1": [0.0]}), 100.0)


@pytest.mark.parametrize("max_samples", [None, 120])
def test_one_block_without_grid_is_scikit_survivals_forest(make_stack, max_samples) -> None:
    """With at most 25 trees (one block) and continuous times, the forest is scikit-survival's
    RandomSurvivalForest (Ishwaran et al. 2008, Ann Appl Stat 2:841-860) fitted on the outcome with the
    competing event as censoring, seeded as the module documents: the risk at a horizon is 1 − S(w) of that
    forest, to the last bit."""
    from sksurv.ensemble import RandomSurvivalForest

    stack = make_stack(n_patients=120, seed=21, competing_rate=1 / 900)
    ours = SurvivalForest(
        ["x1", "x2"], grid_days=None, n_estimators=20, min_samples_leaf=8, random_state=13, max_samples=max_samples
    ).fit(stack)
    seed = int(np.random.SeedSequence(13).spawn(1)[0].generate_state(1)[0])
    target = np.empty(len(stack), dtype=[("event", bool), ("time", float)])
    target["event"], target["time"] = stack["status"].to_numpy() == 1, stack["time"].to_numpy()
    x = stack[["x1", "x2"]].to_numpy()
    reference = RandomSurvivalForest(
        n_estimators=20,
        min_samples_leaf=8,
        min_samples_split=16,
        max_features="sqrt",
        max_samples=max_samples,
        random_state=seed,
        n_jobs=1,
    ).fit(x, target)
    fresh = make_stack(n_patients=60, seed=22)
    for horizon in (200.0, 365.25, 700.0):
        expected = 1.0 - np.array(
            [f(horizon) for f in reference.predict_survival_function(fresh[["x1", "x2"]].to_numpy())]
        )
        np.testing.assert_array_equal(ours.predict_risk(fresh, horizon), expected)
    assert tree_blocks(20, 13) == [(20, seed)] and [n for n, _ in tree_blocks(60, 13)] == [25, 25, 10]
