"""Missing-data methods around riskbench models (riskbench.models.missing_data, riskbench.models.imputation)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from hypothesis import given, settings
from hypothesis import strategies as st
from lifelines import NelsonAalenFitter
from scipy import stats

from riskbench.models import CoxModel, LandmarkSupermodel, ModelInputError, SurvivalForest
from riskbench.models.imputation import (
    LinearPredictiveModel,
    PredictionImputer,
    nelson_aalen_at,
    outcome_predictors,
    row_normals,
)
from riskbench.models.missing_data import MissingDataModel, MissingDataPlan, predicted_rows
from riskbench.models.rubin import pool_estimates

CONSTANT = {"landmark_effects": "none"}


def _with_missing(stack: pd.DataFrame, share: float = 0.3, column: str = "x2", seed: int = 0) -> pd.DataFrame:
    out = stack.copy()
    out.loc[np.random.default_rng(seed).uniform(size=len(out)) < share, column] = np.nan
    return out


def _counting_rows(n: int = 300, seed: int = 2) -> pd.DataFrame:
    """Two (start, stop] rows per patient, exponential hazard exp(0.7 x1 - 0.4 x2) / 800 per day."""
    rng = np.random.default_rng(seed)
    rows = []
    for i in range(n):
        x = rng.normal(size=2)
        t = rng.exponential(800 / np.exp(0.7 * x[0] - 0.4 * x[1]))
        c = rng.uniform(100, 1500)
        end, status = min(t, c), int(t <= c)
        cut = min(200.0, end / 2)
        rows.append((f"P{i}", 0.0, cut, 0, x[0], x[1]))
        rows.append((f"P{i}", cut, end, status, x[0] + rng.normal(scale=0.2), x[1]))
    return pd.DataFrame(rows, columns=["patient_id", "start", "stop", "status", "x1", "x2"])


# ----------------------------------------------------------------------------- imputation building blocks
def test_nelson_aalen_equals_lifelines_with_and_without_delayed_entry(make_stack) -> None:
    """Our Nelson–Aalen hazard at each row's time equals lifelines' NelsonAalenFitter (Nelson 1972, Aalen
    1978; lifelines' ``entry`` for delayed entry, no tie smoothing with ``nelson_aalen_smoothing=False``)."""
    rows = _counting_rows(200)
    start, stop = rows["start"].to_numpy(), rows["stop"].to_numpy()
    event = (rows["status"] == 1).to_numpy(float)
    for entry in (None, start):
        fitter = NelsonAalenFitter(nelson_aalen_smoothing=False).fit(stop, event, entry=entry)
        curve = fitter.cumulative_hazard_.iloc[:, 0]
        index = np.searchsorted(curve.index.to_numpy(), stop, side="right") - 1
        expected = curve.to_numpy()[index]
        ours = nelson_aalen_at(stop, event, start=entry)
        np.testing.assert_allclose(ours, expected, rtol=1e-10, atol=1e-12)
    # counting-process rows: each row carries its patient's outcome and the hazard from its start to the exit
    matrix, names = outcome_predictors(rows)
    assert names[:2] == ["event_1", "cumulative_hazard_1"] and names[-1] == "row_length_days"
    final = rows.groupby("patient_id")["status"].transform("last").to_numpy()
    np.testing.assert_array_equal(matrix[:, 0], (final == 1).astype(float))
    patients = rows.groupby("patient_id").agg(entry=("start", "min"), exit=("stop", "max"), status=("status", "last"))
    fitter = NelsonAalenFitter(nelson_aalen_smoothing=False).fit(
        patients["exit"], patients["status"] == 1, entry=patients["entry"]
    )
    curve = fitter.cumulative_hazard_.iloc[:, 0]
    at = lambda t: curve.to_numpy()[np.searchsorted(curve.index.to_numpy(), t, side="right") - 1]  # noqa: E731
    exits = rows["patient_id"].map(patients["exit"]).to_numpy()
    np.testing.assert_allclose(matrix[:, 1], at(exits) - at(rows["start"].to_numpy()), atol=1e-12)
    np.testing.assert_allclose(matrix[:, -1], rows["stop"] - rows["start"])
    # a landmark stack: one hazard per landmark
    stack = make_stack(n_patients=150)
    names = outcome_predictors(stack)[1]
    assert names == ["event_1", "cumulative_hazard_1", "event_2", "cumulative_hazard_2"]
    first = stack[stack["landmark"] == 0.0]
    alone = nelson_aalen_at(first["time"], (first["status"] == 1).astype(float))
    together = outcome_predictors(stack)[0][:, 1][stack["landmark"].to_numpy() == 0.0]
    np.testing.assert_allclose(together, alone)


def test_linear_predictive_model_matches_statsmodels_prediction_standard_error() -> None:
    """Predictive mean and SD equal statsmodels' OLS ``get_prediction(...).se_obs`` (the standard error of a
    new observation, sqrt(scale · (1 + x (X'X)^-1 x')))."""
    rng = np.random.default_rng(1)
    x = rng.normal(size=(120, 3)) * [1.0, 5.0, 0.1] + [0.0, 40.0, 2.0]
    y = x @ [0.5, -0.2, 3.0] + rng.normal(size=120)
    new = rng.normal(size=(7, 3)) * [1.0, 5.0, 0.1] + [0.0, 40.0, 2.0]
    mean, sd = LinearPredictiveModel(ridge=0.0).fit(x, y).predict(new, return_std=True)
    reference = sm.OLS(y, sm.add_constant(x)).fit().get_prediction(sm.add_constant(new, has_constant="add"))
    np.testing.assert_allclose(mean, reference.predicted_mean, rtol=1e-9)
    np.testing.assert_allclose(sd, reference.se_obs, rtol=1e-9)


def test_row_normals_are_standard_normal_and_keyed_by_the_row() -> None:
    """The per-row deviates are N(0, 1) (Kolmogorov–Smirnov, p > 0.01) and depend only on the row's values,
    the seed and the step."""
    rows = np.random.default_rng(0).normal(size=(4000, 3))
    z = row_normals(rows, seed=7, steps=2)
    assert stats.kstest(z[:, 0], "norm").pvalue > 0.01
    assert abs(np.corrcoef(z[:, 0], z[:, 1])[0, 1]) < 0.05
    np.testing.assert_array_equal(row_normals(rows[::-1], 7, 2)[::-1], z)
    assert not np.allclose(row_normals(rows, 8, 2), z)


def test_prediction_imputer_keeps_observed_values_and_draws_around_the_conditional_mean() -> None:
    """Imputed x2 given x1 (correlation 0.8) follows the regression: mean error small, spread ~ residual SD."""
    rng = np.random.default_rng(3)
    x1 = rng.normal(size=3000)
    x = np.column_stack([x1, 0.8 * x1 + 0.6 * rng.normal(size=3000)])
    truth = x.copy()
    x[:1000, 1] = np.nan
    imputer = PredictionImputer(seed=1, max_iterations=5).fit(x[1000:], np.zeros(2000))
    filled = imputer.transform(x, np.zeros(3000))
    np.testing.assert_array_equal(filled[1000:], truth[1000:])
    error = filled[:1000, 1] - 0.8 * x1[:1000]
    assert abs(error.mean()) < 0.06 and 0.5 < error.std() < 0.7
    # draws stay inside the range of the training values (a [0, 1] score stays a [0, 1] score)
    bounded = np.clip(x, -0.5, 0.5)
    imputer = PredictionImputer(seed=1, max_iterations=5).fit(bounded[1000:], np.zeros(2000))
    drawn = imputer.transform(bounded, np.zeros(3000))[:1000, 1]
    assert drawn.min() >= -0.5 and drawn.max() <= 0.5 and drawn.std() > 0.1


# ----------------------------------------------------------------------------------- plans and messages
def test_plan_checks_name_the_key() -> None:
    assert MissingDataPlan().method == "multiple_imputation"
    with pytest.raises(
        ModelInputError, match=r"\[missing_data\] method = 'complete_case'.*did you mean 'complete_cases'"
    ):
        MissingDataPlan("complete_case")
    with pytest.raises(ModelInputError, match=r"\[missing_data\] imputations = 1"):
        MissingDataPlan(imputations=1)
    with pytest.raises(ModelInputError, match=r"\[\[models\]\] missing_data = 'mice'"):
        MissingDataPlan.coerce("mice")
    plan = MissingDataPlan.coerce("complete_cases", default=MissingDataPlan(imputations=4))
    assert (plan.method, plan.imputations) == ("complete_cases", 4)


def test_a_bare_model_names_variable_landmarks_patients_and_the_key(make_stack) -> None:
    stack = _with_missing(make_stack(n_patients=100), column="x2")
    with pytest.raises(ModelInputError) as info:
        LandmarkSupermodel(["x1", "x2"], **CONSTANT).fit(stack)
    message = str(info.value)
    n_rows = int(stack["x2"].isna().sum())
    n_patients = stack.loc[stack["x2"].isna(), "patient_id"].nunique()
    for words in (
        "'x2'",
        f"{n_rows} row(s) of {n_patients} patient(s)",
        "landmarks 0, 0.5, 1 years",
        "[missing_data] method",
        "[[models]] missing_data",
        "complete_cases",
    ):
        assert words in message, (words, message)
    stack.loc[0, "x1"] = np.inf
    with pytest.raises(ModelInputError, match=r"non-numeric or infinite .*\[cohort.variables.x1\] range"):
        LandmarkSupermodel(["x1"], **CONSTANT).fit(stack)


def test_a_covariate_never_observed_cannot_be_imputed(make_stack) -> None:
    stack = make_stack(n_patients=80).assign(x2=np.nan)
    for method in ("multiple_imputation", "missing_indicator"):
        with pytest.raises(ModelInputError, match=r"\['x2'\] have no observed value.*\[\[models\]\] covariates"):
            MissingDataModel(LandmarkSupermodel(["x1", "x2"], **CONSTANT), method=method).fit(stack)
    with pytest.raises(ModelInputError, match="every training row misses"):
        MissingDataModel(LandmarkSupermodel(["x1", "x2"], **CONSTANT), method="complete_cases").fit(stack)


# ----------------------------------------------------------------------------------------- the methods
def test_complete_cases_fit_the_complete_rows_and_predict_nothing_for_the_rest(make_stack) -> None:
    """Equal to the bare model fitted on the complete rows; NaN risk exactly where a covariate is missing;
    the dropped rows are counted per landmark."""
    stack = _with_missing(make_stack(n_patients=300, seed=4))
    model = MissingDataModel(LandmarkSupermodel(["x1", "x2"], **CONSTANT), method="complete_cases").fit(stack)
    complete = stack.dropna(subset=["x1", "x2"])
    reference = LandmarkSupermodel(["x1", "x2"], **CONSTANT).fit(complete)
    risk = model.predict_risk(stack, 365.0)
    assert np.isnan(risk).sum() == stack["x2"].isna().sum()
    np.testing.assert_allclose(risk[~np.isnan(risk)], reference.predict_risk(complete, 365.0))
    pd.testing.assert_frame_equal(model.summary().drop(columns="fraction_missing_info"), reference.summary())
    counts = model.dropped_rows_.set_index("landmark")
    assert counts["rows_dropped"].sum() == stack["x2"].isna().sum()
    assert counts.loc[0.0, "rows"] == (stack["landmark"] == 0.0).sum()
    assert not predicted_rows([{365.0: risk}]).all()


def test_missing_indicator_equals_the_hand_made_table(make_stack) -> None:
    """Median fill plus ``x2_missing`` (1 where missing) fitted by the bare model gives the same numbers."""
    stack = _with_missing(make_stack(n_patients=300, seed=5))
    model = MissingDataModel(LandmarkSupermodel(["x1", "x2"], **CONSTANT), method="missing_indicator").fit(stack)
    assert model.indicator_columns_ == ["x2_missing"]
    hand = stack.assign(x2_missing=stack["x2"].isna().astype(float), x2=stack["x2"].fillna(stack["x2"].median()))
    reference = LandmarkSupermodel(["x1", "x2", "x2_missing"], **CONSTANT).fit(hand)
    np.testing.assert_allclose(model.models_[0].coef_, reference.coef_)
    np.testing.assert_allclose(model.predict_risk(stack, 300.0), reference.predict_risk(hand, 300.0))
    assert "x2_missing" in set(model.summary()["term"])


def test_multiple_imputation_on_complete_data_fits_once_and_equals_the_bare_model(make_stack) -> None:
    stack = make_stack(n_patients=200, seed=6)
    model = MissingDataModel(LandmarkSupermodel(["x1", "x2"], **CONSTANT), imputations=5).fit(stack)
    reference = LandmarkSupermodel(["x1", "x2"], **CONSTANT).fit(stack)
    assert model.fitted_once_ and len(model.models_) == 1 and "fitted once" in model.note_
    np.testing.assert_array_equal(
        model.predict_curve(stack, [200.0, 400.0]), reference.predict_curve(stack, [200.0, 400.0])
    )
    summary = model.summary()
    assert (summary["fraction_missing_info"] == 0).all()
    pd.testing.assert_frame_equal(summary.drop(columns="fraction_missing_info"), reference.summary())
    # a complete-data model still predicts a row with a missing value: imputed without its outcome
    gappy = _with_missing(stack, 0.2, seed=1)
    assert np.isfinite(model.predict_risk(gappy, 365.0)).all()


def test_multiple_imputation_pools_by_rubins_rules_and_predicts_row_by_row(make_stack) -> None:
    stack = _with_missing(make_stack(n_patients=300, seed=7), 0.3)
    model = MissingDataModel(
        LandmarkSupermodel(["x1", "x2"], **CONSTANT), imputations=4, max_iterations=3, random_state=11
    ).fit(stack)
    assert not model.fitted_once_ and len(model.models_) == 4
    summary = model.summary()
    inner = model.models_[0].summary()
    assert list(summary.columns) == [*inner.columns, "fraction_missing_info", "imputation_df"]
    outcome = summary["cause"] == "outcome"
    coefs = np.stack([m.outcome_.coef for m in model.models_])
    variances = np.stack([np.diag(m.outcome_.robust_var) for m in model.models_])
    pooled = pool_estimates(coefs, variances)
    np.testing.assert_allclose(summary.loc[outcome, "coef"], pooled.estimate)
    np.testing.assert_allclose(summary.loc[outcome, "se_robust"], pooled.se)
    np.testing.assert_allclose(summary.loc[outcome, "hr_lower_95"], np.exp(pooled.interval(0.95)[0]))
    assert summary.loc[outcome & (summary["term"] == "x2"), "fraction_missing_info"].iloc[0] > 0.02

    # a row's risk does not depend on the other rows predicted with it, nor on how often it is predicted
    risk = model.predict_risk(stack, 365.0)
    assert np.isfinite(risk).all()
    np.testing.assert_allclose(model.predict_risk(stack.iloc[::-1], 365.0)[::-1], risk, rtol=1e-12)
    np.testing.assert_allclose(model.predict_risk(stack.iloc[:7], 365.0), risk[:7], rtol=1e-12)
    # the same seed gives the same model; another seed other imputations
    again = MissingDataModel(
        LandmarkSupermodel(["x1", "x2"], **CONSTANT), imputations=4, max_iterations=3, random_state=11
    ).fit(stack)
    np.testing.assert_array_equal(again.predict_risk(stack, 365.0), risk)
    other = MissingDataModel(
        LandmarkSupermodel(["x1", "x2"], **CONSTANT), imputations=4, max_iterations=3, random_state=12
    ).fit(stack)
    assert not np.allclose(other.summary()["coef"], summary["coef"])


def test_time_varying_cox_on_counting_process_rows_and_the_forest(make_stack) -> None:
    """The wrapper works on (start, stop] rows (the patient's outcome from each row's start in the imputation
    model) and predicts landmark rows; around the forest it predicts too and has no summary, like the forest."""
    rows = _with_missing(_counting_rows(300), 0.25)
    cox = MissingDataModel(CoxModel(["x1", "x2"]), imputations=3, max_iterations=3).fit(rows)
    summary = cox.summary()
    assert list(summary.index) == ["x1", "x2"] and summary.loc["x1", "coef"] > 0.3
    stack = _with_missing(make_stack(n_patients=100, seed=8), 0.3)
    assert np.isfinite(cox.predict_risk(stack, 365.0)).all()

    forest = MissingDataModel(SurvivalForest(["x1", "x2"], n_estimators=10), imputations=2, max_iterations=2).fit(stack)
    assert not hasattr(forest, "summary")
    risk = forest.predict_curve(stack, [200.0, 400.0])
    assert np.isfinite(risk).all() and (risk[:, 1] >= risk[:, 0]).all()


_RNG = np.random.default_rng(9)
_TRAIN = np.column_stack([_RNG.normal(size=400), _RNG.normal(size=400)])
_TRAIN[_RNG.uniform(size=400) < 0.2, 1] = np.nan
_IMPUTER = PredictionImputer(seed=3, max_iterations=3).fit(_TRAIN, _RNG.choice([0.0, 182.625], 400))


@settings(max_examples=40, deadline=None)
@given(
    st.lists(
        st.tuples(st.floats(-3, 3), st.one_of(st.none(), st.floats(-3, 3)), st.sampled_from([0.0, 182.625])),
        min_size=1,
        max_size=30,
    ),
    st.randoms(use_true_random=False),
)
def test_prediction_imputation_is_row_wise(rows, shuffle) -> None:
    """Invariant of the prediction contract: a row's imputed values depend only on that row (not on the other
    rows, their order or how often it is imputed), observed values are kept, and draws stay in range."""
    x = np.array([[a, np.nan if b is None else b] for a, b, _ in rows])
    s = np.array([c for _, _, c in rows])
    filled = _IMPUTER.transform(x, s)
    order = list(range(len(rows)))
    shuffle.shuffle(order)
    np.testing.assert_array_equal(_IMPUTER.transform(x[order], s[order]), filled[order])
    np.testing.assert_array_equal(filled[~np.isnan(x)], x[~np.isnan(x)])
    drawn = filled[np.isnan(x)]
    assert np.isfinite(drawn).all()
    assert (drawn >= np.nanmin(_TRAIN[:, 1])).all() and (drawn <= np.nanmax(_TRAIN[:, 1])).all()
