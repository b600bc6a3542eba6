"""Performance per landmark and pooled with patient-level bootstrap intervals.

Per-landmark values are checked against the metric functions applied to that landmark's rows (Harrell's C as
in Wolbers et al. 2009, Uno's C, the cumulative/dynamic AUC of Blanche et al. 2013, the IPCW Brier score);
the treat-all decision curve against :func:`riskbench.metrics.net_benefit` on the pooled rows; the resampling
against its definition (whole patients drawn with replacement, Davison & Hinkley 1997, section 3.8).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from riskbench import metrics
from riskbench.metrics.censoring import aalen_johansen
from riskbench.validation.errors import ValidationInputError
from riskbench.validation.landmark_performance import (
    EvaluationRows,
    landmark_performance,
    patient_resample,
)
from riskbench.validation.performance import evaluation_time

from .conftest import simulate_stack

HORIZONS = np.array([182.625, 365.25, 730.0])
YEAR = 365.25


def _with_competing(stack: pd.DataFrame, seed: int) -> pd.DataFrame:
    """A quarter of the censored rows ending before the horizon become competing events (status 2)."""
    rng = np.random.default_rng(seed)
    out = stack.copy()
    flip = (out["status"] == 0) & (out["time"] < 700) & (rng.random(len(out)) < 0.25)
    out.loc[flip, "status"] = 2
    return out


def _risks(stack: pd.DataFrame) -> dict[str, np.ndarray]:
    rate = (1 / 1500) * np.exp(0.6 * stack["clinical"] + 0.8 * stack["imaging"]).to_numpy()
    clinical = (1 / 1500) * np.exp(0.6 * stack["clinical"]).to_numpy()
    return {"both": 1 - np.exp(-rate[:, None] * HORIZONS), "clinical": 1 - np.exp(-clinical[:, None] * HORIZONS)}


@pytest.fixture(scope="module")
def evaluated():
    stack = _with_competing(simulate_stack(500, 4)[0], 4)
    rows = EvaluationRows.from_stack(stack)
    result = landmark_performance(
        rows,
        HORIZONS,
        _risks(stack),
        report_days=[YEAR, 730.0],
        curve_days=list(HORIZONS),
        decision_days=730.0,
        thresholds=[0.0, 0.1, 0.2, 0.4],
        min_outcomes=10,
        n_boot=30,
        seed=8,
    )
    return stack, result


def test_each_landmark_equals_the_metric_functions_on_its_rows(evaluated) -> None:
    stack, result = evaluated
    risks = _risks(stack)
    table = result.measures.set_index(["model", "landmark_days", "horizon_days", "metric"])["estimate"]
    for landmark in (0.0, 180.0, 365.0):
        rows = stack[stack["landmark"] == landmark]
        time, status = rows["time"].to_numpy(float), rows["status"].to_numpy(int)
        risk = risks["both"][(stack["landmark"] == landmark).to_numpy(), 1]
        at = evaluation_time(YEAR, time)
        key = ("both", landmark, YEAR)
        by_h = np.where(time <= at, status, 0)
        assert table[(*key, "harrell_c")] == pytest.approx(
            metrics.concordance_harrell(np.minimum(time, at), by_h, risk, with_se=False).estimate, abs=1e-12
        )
        assert table[(*key, "uno_c")] == pytest.approx(
            metrics.concordance_uno(time, status, risk, at, with_se=False).estimate, abs=1e-12
        )
        assert table[(*key, "auc")] == pytest.approx(
            float(metrics.auc_cumulative_dynamic(time, status, risk, [at]).table["auc"].iloc[0]), abs=1e-12
        )
        brier = metrics.brier_score(time, status, risk, [at], check_direction=False)
        assert table[(*key, "brier")] == pytest.approx(float(brier["brier"].iloc[0]), abs=1e-12)
        assert table[(*key, "scaled_brier")] == pytest.approx(float(brier["scaled_brier"].iloc[0]), abs=1e-12)
        observed = float(aalen_johansen(time, status, cause=1)(at))  # competing events present
        assert table[(*key, "oe_ratio")] == pytest.approx(observed / risk.mean(), abs=1e-12)
    # The pooled row is the same functions on every landmark row.
    time, status = stack["time"].to_numpy(float), stack["status"].to_numpy(int)
    at = evaluation_time(730.0, time)
    pooled = float(metrics.auc_cumulative_dynamic(time, status, risks["clinical"][:, 2], [at]).table["auc"].iloc[0])
    assert table[("clinical", np.nan, 730.0, "auc")] == pytest.approx(pooled, abs=1e-12)


def test_intervals_surround_the_estimates_and_count_resamples(evaluated) -> None:
    _, result = evaluated
    m = result.measures.dropna(subset=["ci_low"])
    assert len(m) == len(result.measures)
    assert (m["resamples"] == 30).all()
    assert (m["ci_low"] <= m["ci_high"]).all()
    # Percentile intervals need not contain the estimate, but with 30 draws of a smooth statistic they do here.
    inside = (m["ci_low"] <= m["estimate"] + 1e-9) & (m["estimate"] - 1e-9 <= m["ci_high"])
    assert inside.mean() > 0.9
    c = result.auc_curve
    assert list(c["horizon"]) == list(HORIZONS) * 2
    assert ((c["auc_lower"] <= c["auc"]) & (c["auc"] <= c["auc_upper"])).all()


def test_decision_curve_treat_all_equals_net_benefit_on_the_pooled_rows(evaluated) -> None:
    stack, result = evaluated
    time, status = stack["time"].to_numpy(float), stack["status"].to_numpy(int)
    direct = metrics.net_benefit(
        time,
        status,
        _risks(stack)["both"][:, 2],
        evaluation_time(730.0, time),
        [0.0, 0.1, 0.2, 0.4],
        check_direction=False,
    )
    mine = result.decision_curve[result.decision_curve["model_name"] == "both"].reset_index(drop=True)
    np.testing.assert_allclose(mine["treat_all"], direct["treat_all"], atol=1e-12)
    np.testing.assert_allclose(mine["model"], direct["model"], atol=1e-12)
    assert (mine["model_lower"] <= mine["model_upper"]).all()
    assert (mine["treat_all_lower"] <= mine["treat_all_upper"]).all()


def test_a_landmark_with_few_outcomes_is_not_measured() -> None:
    stack = simulate_stack(200, 2)[0]
    rows = EvaluationRows.from_stack(stack)
    few = (stack["landmark"] == 365.0) & (stack["status"] == 1)
    result = landmark_performance(
        rows, HORIZONS, _risks(stack), report_days=[YEAR], n_boot=0, min_outcomes=int(few.sum()) + 1
    )
    assert 365.0 not in set(result.measures["landmark_days"])
    assert result.measures["ci_low"].isna().all() and (result.measures["resamples"] == 0).all()


def test_nothing_to_measure_gives_empty_tables() -> None:
    stack = simulate_stack(120, 3)[0]
    rows = EvaluationRows.from_stack(stack)
    result = landmark_performance(rows, HORIZONS, _risks(stack), report_days=[], n_boot=3, seed=1)
    assert result.measures.empty and result.auc_curve.empty and result.decision_curve.empty


def test_same_seed_same_intervals_and_a_bad_matrix_is_refused() -> None:
    stack = simulate_stack(150, 9)[0]
    rows = EvaluationRows.from_stack(stack)

    def run(seed: int) -> pd.DataFrame:
        return landmark_performance(rows, HORIZONS, _risks(stack), report_days=[730.0], n_boot=5, seed=seed).measures

    pd.testing.assert_frame_equal(run(1), run(1))
    assert not run(1)["ci_low"].equals(run(2)["ci_low"])
    with pytest.raises(ValidationInputError, match="rows × horizons"):
        landmark_performance(rows, HORIZONS, {"m": np.zeros((3, 3))}, report_days=[730.0])


@settings(max_examples=40, deadline=None)
@given(st.lists(st.integers(0, 6), min_size=1, max_size=40), st.integers(0, 2**31))
def test_a_resample_takes_whole_patients(patients: list[int], seed: int) -> None:
    patient = pd.factorize(np.asarray(patients))[0]
    index = patient_resample(patient, np.random.default_rng(seed))
    counts = np.bincount(patient)
    drawn = pd.Series(patient[index]).value_counts()
    # Every drawn patient brings all their rows, as often as the patient was drawn; as many patients as before.
    for p, n in drawn.items():
        assert n % counts[p] == 0
        assert sorted(index[patient[index] == p]) == sorted(np.repeat(np.flatnonzero(patient == p), n // counts[p]))
    assert sum(n // counts[p] for p, n in drawn.items()) == counts.size


def test_a_cause_specific_model_is_judged_against_one_minus_kaplan_meier(evaluated) -> None:
    """One O/E everywhere: a model predicting a cause-specific 1 − S is compared with 1 − Kaplan–Meier with
    competing events censored (lifelines' KaplanMeierFitter, a reference library)."""
    from lifelines import KaplanMeierFitter

    stack, _ = evaluated
    rows = EvaluationRows.from_stack(stack)
    risk = _risks(stack)["both"]
    result = landmark_performance(
        rows, HORIZONS, {"both": risk}, report_days=[YEAR], n_boot=0, targets={"both": "cause_specific"}
    )
    oe = result.measures.set_index(["landmark_days", "metric"])["estimate"]
    at_zero = (stack["landmark"] == 0.0).to_numpy()
    time, status = stack["time"].to_numpy(float)[at_zero], stack["status"].to_numpy(int)[at_zero]
    km = KaplanMeierFitter().fit(time, (status == 1).astype(int))
    observed = 1 - float(km.survival_function_at_times([evaluation_time(YEAR, time)]).iloc[0])
    assert oe[(0.0, "oe_ratio")] == pytest.approx(observed / risk[at_zero, 1].mean(), rel=1e-10)
