"""Resampling refits of a landmark super-model started from the whole-cohort estimates (``fit(start=...)``)
reach the optimum of a refit from zero, and skip only the robust covariance (``robust=False``).

The cause-specific partial likelihoods are concave (Cox 1972), so where Newton–Raphson starts cannot change
the maximiser: the two refits may differ only by the convergence tolerance. The check: coefficients, model-based
covariances, baselines and predicted risks equal to 1e-8 on bootstrap resamples of patients, with fewer
iterations, for both causes and for the missing-data wrapper.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from riskbench.models import cox_engine, landmark
from riskbench.models.landmark import LandmarkSupermodel
from riskbench.models.missing_data import MissingDataModel
from riskbench.validation import ModelSpec
from riskbench.validation.model_specs import fit_spec, starting_values
from riskbench.validation.sources import ValidationTables

from .conftest import simulate_stack


def _bootstrap(stack: pd.DataFrame, seed: int) -> pd.DataFrame:
    ids = stack["patient_id"].unique()
    drawn = np.random.default_rng(seed).choice(ids, ids.size)
    parts = [stack[stack["patient_id"] == pid].assign(patient_id=f"{pid}#{k}") for k, pid in enumerate(drawn)]
    return pd.concat(parts, ignore_index=True)


@pytest.fixture(scope="module")
def stacks():
    stack = simulate_stack(400, beta_slope=(0.3, 0.0), seed=4)
    return stack, [_bootstrap(stack, seed) for seed in (1, 2)]


@pytest.fixture
def iterations(monkeypatch):
    """Newton–Raphson iterations of every Cox fit, in order."""
    seen: list[int] = []
    real = cox_engine.fit_cox

    def counted(*args, **kwargs):
        fit = real(*args, **kwargs)
        seen.append(fit.n_iter)
        return fit

    monkeypatch.setattr(landmark, "fit_cox", counted)
    return seen


@pytest.mark.parametrize("baseline", ["smooth", "stratified"])
def test_warm_started_refits_equal_refits_from_zero(stacks, iterations, baseline):
    stack, resamples = stacks
    model = LandmarkSupermodel(["x1", "x2"], baseline=baseline)
    whole = model.fit(stack)
    start = whole.starting_values()
    assert set(start) == {"outcome", "competing event"}
    for boot in resamples:
        iterations.clear()
        cold = LandmarkSupermodel(["x1", "x2"], baseline=baseline).fit(boot)
        warm = LandmarkSupermodel(["x1", "x2"], baseline=baseline).fit(boot, start=start, robust=False)
        cold_iter, warm_iter = iterations[:2], iterations[2:]
        assert all(w <= c for w, c in zip(warm_iter, cold_iter)) and sum(warm_iter) < sum(cold_iter), iterations
        for a, b in ((warm.outcome_, cold.outcome_), (warm.competing_, cold.competing_)):
            np.testing.assert_allclose(a.coef, b.coef, rtol=0, atol=1e-8)
            np.testing.assert_allclose(a.var, b.var, rtol=1e-8, atol=0)
            assert np.isnan(a.robust_var).all() and np.isfinite(b.robust_var).all()
            for stratum, (times, increments) in b.baseline.items():
                np.testing.assert_array_equal(a.baseline[stratum][0], times)
                np.testing.assert_allclose(a.baseline[stratum][1], increments, rtol=1e-8, atol=0)
        np.testing.assert_allclose(
            warm.predict_risk(stack, 365.25), cold.predict_risk(stack, 365.25), rtol=0, atol=1e-8
        )


def test_a_start_for_other_design_columns_is_ignored(stacks):
    stack, (boot, _) = stacks
    other = LandmarkSupermodel(["x1"]).fit(stack).starting_values()
    cold = LandmarkSupermodel(["x1", "x2"]).fit(boot)
    warm = LandmarkSupermodel(["x1", "x2"]).fit(boot, start=other)
    np.testing.assert_array_equal(warm.coef_, cold.coef_)


def test_fit_spec_makes_resampling_refits_through_the_missing_data_wrapper(stacks):
    stack, _ = stacks
    holes = stack.copy()
    holes.loc[holes.index[::17], "x2"] = np.nan
    spec = ModelSpec("m", ("x1", "x2"), missing="multiple_imputation")
    whole = fit_spec(spec, ValidationTables(holes, None), seed=3)
    assert isinstance(whole, MissingDataModel)
    start = starting_values(whole)
    boot_holes = _bootstrap(holes, 1)
    cold = fit_spec(spec, ValidationTables(boot_holes, None), seed=3)
    warm = fit_spec(spec, ValidationTables(boot_holes, None), seed=3, start=start)
    assert len(warm.models_) == len(cold.models_) > 1
    for a, b in zip(warm.models_, cold.models_):
        np.testing.assert_allclose(a.coef_, b.coef_, rtol=0, atol=1e-8)
        assert np.isnan(a.robust_var_).all()
    np.testing.assert_allclose(
        warm.predict_risk(holes, 365.25), cold.predict_risk(holes, 365.25), rtol=0, atol=1e-8, equal_nan=True
    )
    forest = ModelSpec("f", ("x1", "x2"), family="forest", params={"n_estimators": 5})
    assert starting_values(fit_spec(forest, ValidationTables(stack, None), seed=1)) is None


def test_a_cause_whose_fit_did_not_converge_offers_no_start(stacks):
    """A covariate carried by one patient with the outcome runs off to infinity (monotone likelihood): that
    cause's fit does not converge, and a refit must not start from its runaway coefficient."""
    stack, _ = stacks
    carrier = stack.loc[stack["status"] == 1, "patient_id"].iloc[0]
    rare = stack.assign(rare=(stack["patient_id"] == carrier).astype(float))
    with pytest.warns(Warning):
        whole = LandmarkSupermodel(["x1", "rare"], competing=False).fit(rare)
    assert not whole.outcome_.converged
    assert whole.starting_values() == {}
    assert LandmarkSupermodel(["x1", "x2"]).fit(stack).outcome_.converged
