"""The prediction contract's arithmetic, checked against lifelines and against the definitions."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from lifelines import AalenJohansenFitter

from riskbench.models.risk_contract import (
    ModelInputError,
    RiskModel,
    check_covariates,
    check_horizon,
    cumulative_incidence,
    prediction_origin,
    risk_curve,
    risk_from_cumulative_hazard,
    step_function_at,
)


def _nelson_aalen_increments(time: np.ndarray, status: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    grid = np.unique(time[status > 0])
    at_risk = (time[None, :] >= grid[:, None]).sum(axis=1)
    d1 = np.array([((time == t) & (status == 1)).sum() for t in grid]) / at_risk
    d2 = np.array([((time == t) & (status == 2)).sum() for t in grid]) / at_risk
    return grid, d1, d2


def test_cumulative_incidence_equals_aalen_johansen_without_covariates() -> None:
    """Product-integral of Nelson–Aalen cause-specific increments = lifelines' AalenJohansenFitter
    (Aalen & Johansen 1978; continuous times, so lifelines does not jitter ties)."""
    rng = np.random.default_rng(3)
    n = 400
    t1, t2, c = rng.exponential(500, n), rng.exponential(900, n), rng.uniform(50, 1200, n)
    time = np.minimum.reduce([t1, t2, c])
    status = np.where(time == t1, 1, np.where(time == t2, 2, 0))
    grid, d1, d2 = _nelson_aalen_increments(time, status)
    ours = cumulative_incidence(d1, d2)

    reference = AalenJohansenFitter(calculate_variance=False).fit(time, status, event_of_interest=1)
    ref_curve = reference.cumulative_density_.iloc[:, 0]
    expected = step_function_at(ref_curve.index.to_numpy(), ref_curve.to_numpy(), grid)
    np.testing.assert_allclose(ours, expected, rtol=0, atol=1e-12)
    assert ours[-1] > 0.2  # the check is not vacuous


def test_without_competing_event_incidence_is_one_minus_kaplan_meier() -> None:
    """With no competing increments the product-integral is 1 − Kaplan–Meier (Kaplan & Meier 1958)."""
    from lifelines import KaplanMeierFitter

    rng = np.random.default_rng(4)
    time = rng.exponential(300, 200)
    status = (rng.uniform(size=200) < 0.7).astype(int)
    grid, d1, _ = _nelson_aalen_increments(time, status)
    km = KaplanMeierFitter().fit(time, status).survival_function_.iloc[:, 0]
    expected = 1 - step_function_at(km.index.to_numpy(), km.to_numpy(), grid)
    np.testing.assert_allclose(cumulative_incidence(d1), expected, atol=1e-12)


@settings(max_examples=60, deadline=None)
@given(
    st.lists(
        st.tuples(st.floats(0, 0.6), st.floats(0, 0.6)),
        min_size=1,
        max_size=30,
    )
)
def test_incidences_and_survival_add_to_one(jumps: list[tuple[float, float]]) -> None:
    """F1 + F2 + S = 1 at every time, F1 non-decreasing in [0, 1] (definition of the product-integral)."""
    d1 = np.array([a for a, _ in jumps])
    d2 = np.array([b for _, b in jumps])
    f1, f2 = cumulative_incidence(d1, d2), cumulative_incidence(d2, d1)
    survival = np.cumprod(1 - np.minimum(d1 + d2, 1))
    np.testing.assert_allclose(f1 + f2 + survival, 1.0, atol=1e-12)
    assert np.all(np.diff(f1) >= -1e-15) and f1.min() >= 0 and f1.max() <= 1


def test_step_function_is_right_continuous_and_zero_before_first_jump() -> None:
    times = np.array([1.0, 3.0])
    values = np.array([[0.1, 0.4], [0.2, 0.5]])
    out = step_function_at(times, values, [0.5, 1.0, 2.9, 3.0, 10.0])
    np.testing.assert_allclose(out, [[0, 0.1, 0.1, 0.4, 0.4], [0, 0.2, 0.2, 0.5, 0.5]])


def test_risk_from_cumulative_hazard() -> None:
    np.testing.assert_allclose(risk_from_cumulative_hazard([0.0, np.log(2)]), [0.0, 0.5])


def test_prediction_origin_and_input_errors() -> None:
    assert prediction_origin(pd.DataFrame({"landmark": [5.0], "start": [1.0]})).tolist() == [5.0]
    assert prediction_origin(pd.DataFrame({"start": [2.0]})).tolist() == [2.0]
    assert prediction_origin(pd.DataFrame({"x": [1.0, 2.0]})).tolist() == [0.0, 0.0]
    with pytest.raises(ModelInputError, match="landmark"):
        prediction_origin(pd.DataFrame({"landmark": [np.nan]}))
    with pytest.raises(ModelInputError, match=r"lacks covariate column\(s\) \['b'\]"):
        check_covariates(pd.DataFrame({"a": [1.0]}), ["a", "b"])
    with pytest.raises(ModelInputError, match=r"'a' .* missing in 1 row.*\[missing_data\] method"):
        check_covariates(pd.DataFrame({"a": [1.0, None]}), ["a"])
    with pytest.raises(ModelInputError, match="beyond"):
        check_horizon(800, 730.5)
    with pytest.raises(ModelInputError, match="positive"):
        check_horizon(-1)


def test_risk_curve_from_a_model_with_only_predict_risk() -> None:
    """A model that only answers predict_risk still yields a curve, in the order of the requested times."""

    class ExponentialModel:
        def fit(self, table: pd.DataFrame) -> ExponentialModel:
            return self

        def predict_risk(self, table: pd.DataFrame, horizon: float) -> np.ndarray:
            return 1 - np.exp(-table["rate"].to_numpy() * horizon)

    table = pd.DataFrame({"rate": [0.001, 0.01]})
    curve = risk_curve(ExponentialModel(), table, [365.0, 30.0])
    np.testing.assert_allclose(curve, 1 - np.exp(-np.outer(table["rate"], [365.0, 30.0])))


def _fitted_model(name: str, stack: pd.DataFrame) -> RiskModel:
    from riskbench.models import CoxModel, LandmarkSupermodel, SurvivalForest

    if name == "cox":  # counting-process rows (start 0) from the first landmark
        first = stack[stack["landmark"] == 0]
        return CoxModel(["x1", "x2"]).fit(first.assign(start=0.0, stop=first["time"]).drop(columns="time"))
    if name == "landmark":
        return LandmarkSupermodel(["x1", "x2"]).fit(stack)
    return SurvivalForest(["x1", "x2"], n_estimators=20, random_state=1).fit(stack)


@pytest.mark.parametrize("name", ["cox", "landmark", "forest"])
def test_every_model_keeps_the_contract_on_unseen_patients(make_stack, name: str) -> None:
    """Each model answers predict_risk/predict_curve for rows of patients it never saw, holding only the
    covariates and the time s: risks in [0, 1], one per row, independent of the other rows, curves
    non-decreasing and equal to predict_risk at the same horizon, higher for a higher-hazard covariate."""
    model = _fitted_model(name, make_stack(n_patients=200, seed=31))
    assert isinstance(model, RiskModel)
    new = pd.DataFrame({"landmark": [0.0, 0.0, 182.625], "x1": [2.0, -2.0, 0.3], "x2": [0.0, 0.0, -0.5]})
    if name == "cox":
        new = new.rename(columns={"landmark": "start"})
    risk = model.predict_risk(new, 365.25)
    assert risk.shape == (3,) and np.all((risk >= 0) & (risk <= 1))
    assert risk[0] > risk[1]  # x1 carries hazard ratio e^0.7 per unit in the simulation
    np.testing.assert_allclose(model.predict_risk(new.iloc[[2]], 365.25), risk[[2]])
    curve = risk_curve(model, new, [91.3125, 365.25, 700.0])
    assert curve.shape == (3, 3) and np.all(np.diff(curve, axis=1) >= 0)
    np.testing.assert_allclose(curve[:, 1], risk)


def test_cumulative_incidence_at_equals_the_full_product_integral_read_at_times():
    """The in-place evaluator used in prediction gives exactly the full-grid Aalen–Johansen combination
    (including capped increments and times before the first jump or past the last)."""
    import numpy as np

    from riskbench.models.risk_contract import cumulative_incidence, cumulative_incidence_at, step_function_at

    rng = np.random.default_rng(1)
    n, m = 300, 200
    grid = np.sort(rng.choice(np.arange(1, 2000), m, replace=False)).astype(float)
    a = rng.uniform(0, 0.01, m) * (rng.random(m) < 0.6)
    b = rng.uniform(0, 0.01, m)
    s1, s2 = np.exp(rng.normal(0, 1.5, n)), np.exp(rng.normal(0, 1, n))
    s1[0] = 1e4  # increments past 1 are capped
    times = np.array([0.5, 100.0, 700.0, 1999.0, 5000.0])
    for competing in (True, False):
        full = cumulative_incidence(s1[:, None] * a, s2[:, None] * b if competing else None)
        expected = step_function_at(grid, full, times)
        got = cumulative_incidence_at(s1, a, s2 if competing else None, b if competing else None, grid, times)
        np.testing.assert_array_equal(got, expected)


def test_cumulative_incidence_at_without_capped_increments_equals_the_full_product_integral():
    """The path of nearly every prediction (no increment reaches 1): equal to the full-grid Aalen–Johansen
    combination, with and without a competing event, for more rows than the compiled loop advances at once."""
    import numpy as np

    from riskbench.models.risk_contract import cumulative_incidence, cumulative_incidence_at, step_function_at

    rng = np.random.default_rng(2)
    n, m = 5_000, 300
    grid = np.sort(rng.choice(np.arange(1, 3000), m, replace=False)).astype(float)
    a = rng.uniform(0, 0.004, m) * (rng.random(m) < 0.6)
    b = rng.uniform(0, 0.004, m)
    s1, s2 = np.exp(rng.normal(0, 1, n)), np.exp(rng.normal(0, 1, n))
    assert s1.max() * a.max() + s2.max() * b.max() < 1  # the premise: no cap
    times = np.array([0.5, grid[0], 100.0, 1500.0, grid[-1], 5000.0])
    for competing in (True, False):
        full = cumulative_incidence(s1[:, None] * a, s2[:, None] * b if competing else None)
        expected = step_function_at(grid, full, times)
        assert (expected[:, -1] > 0.05).mean() > 0.5  # risks large enough for rounding to be relative
        got = cumulative_incidence_at(s1, a, s2 if competing else None, b if competing else None, grid, times)
        np.testing.assert_allclose(got, expected, rtol=1e-12, atol=1e-15)


def test_a_rows_cumulative_incidence_does_not_depend_on_the_rows_predicted_with_it():
    """Saved models must reproduce a run's predictions exactly on any subset or order of its rows and whatever
    other horizons are asked: each row is summed alone, in grid order (a matrix product through BLAS, or
    pairwise sums across a block of rows, would not guarantee that)."""
    import numpy as np

    from riskbench.models.risk_contract import cumulative_incidence_at

    rng = np.random.default_rng(5)
    n, m = 3_000, 400
    grid = np.arange(1.0, m + 1)
    a, b = rng.uniform(0, 5e-4, m), rng.uniform(0, 5e-4, m)
    s1, s2 = np.exp(rng.normal(0, 1, n)), np.exp(rng.normal(0, 1, n))
    times = np.array([100.0, 365.0, 399.5])
    whole = cumulative_incidence_at(s1, a, s2, b, grid, times)
    pick = rng.permutation(n)[:777]
    np.testing.assert_array_equal(cumulative_incidence_at(s1[pick], a, s2[pick], b, grid, times), whole[pick])
    alone = cumulative_incidence_at(s1, a, s2, b, grid, times[2:])
    np.testing.assert_array_equal(alone[:, 0], whole[:, 2])  # a time read alone or with others
