"""The bootstrap replicate's shared work (one sort of every risk column and of the times over all rows, one
evaluation set per landmark shared by models and horizons, ranks shared by the concordance and the AUC) gives the
numbers of a straightforward recomputation.

Two references: the same plan evaluated on the resampled rows written out as a new cohort (so every sort starts
afresh; the numbers must agree bit for bit), and every value computed on its own by the public metric functions
without any shared evaluation set (bit for bit as well, except Uno's C, whose combined pass sums its
earlier-competing pairs over fewer terms and agrees to rounding; see
:func:`riskbench.metrics.concordance.concordance_at_horizon`).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from riskbench import metrics
from riskbench.metrics.calibration import observed_expected
from riskbench.metrics.inputs import MetricInputError
from riskbench.validation.landmark_performance import (
    EvaluationPlan,
    EvaluationRows,
    evaluate_plan,
    landmark_cells,
    patient_resample,
)
from riskbench.validation.performance import HORIZON_MEASURES, evaluation_time

from .conftest import simulate_stack

HORIZONS = np.array([182.625, 365.25, 730.0])
REPORT = (365.25, 730.0)
THRESHOLDS = (0.0, 0.05, 0.2, 0.1)  # not sorted: the plan keeps its own order


def _cohort(seed: int) -> tuple[pd.DataFrame, EvaluationRows, EvaluationPlan]:
    """A small landmark stack with competing events, one smooth model and one with many tied and nearly tied
    risks (within and just beyond the concordance tolerance)."""
    stack = simulate_stack(150, seed)[0]
    rng = np.random.default_rng(seed)
    flip = (stack["status"] == 0) & (stack["time"] < 700) & (rng.random(len(stack)) < 0.3)
    stack.loc[flip, "status"] = 2
    rate = (1 / 1500) * np.exp(0.6 * stack["clinical"] + 0.8 * stack["imaging"]).to_numpy()
    smooth = 1 - np.exp(-rate[:, None] * HORIZONS)
    nudge = rng.choice([0.0, 5e-9, 2e-8], size=smooth.shape)  # below and above the 1e-8 tolerance
    coarse = np.clip(np.round(smooth, 2) + nudge, 0.0, 1.0)
    rows = EvaluationRows.from_stack(stack)
    plan = EvaluationPlan(
        HORIZONS,
        {"smooth": smooth, "coarse": coarse},
        REPORT,
        tuple(HORIZONS),
        730.0,
        THRESHOLDS,
        landmark_cells(rows, REPORT, 3),
        {"smooth": "cumulative_incidence", "coarse": "cause_specific"},
    )
    return stack, rows, plan


def _written_out(rows: EvaluationRows, plan: EvaluationPlan, index: np.ndarray):
    """The resampled rows as a cohort of their own, and the plan with their risks."""
    again = EvaluationRows(rows.time[index], rows.status[index], rows.landmark[index], rows.patient[index])
    risks = {m: r[index] for m, r in plan.risks.items()}
    return again, EvaluationPlan(
        plan.horizons,
        risks,
        plan.report_days,
        plan.curve_days,
        plan.decision_days,
        plan.thresholds,
        plan.cells,
        plan.targets,
    )


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_a_replicate_equals_its_rows_written_out(seed: int) -> None:
    _, rows, plan = _cohort(seed)
    evaluate_plan(rows, plan)  # fills the plan's shared sorts first, as the point estimate does
    for draw in range(4):
        index = patient_resample(rows.patient, np.random.default_rng([seed, draw]))
        got = evaluate_plan(rows, plan, index)
        again_rows, again_plan = _written_out(rows, plan, index)
        expected = evaluate_plan(again_rows, again_plan)
        pd.testing.assert_frame_equal(got, expected, check_exact=True)
        assert np.isfinite(got["value"].to_numpy(float)).sum() > 0.9 * len(got)


def _on_its_own(
    time: np.ndarray, status: np.ndarray, risk: np.ndarray, horizon: float, target: str
) -> dict[str, float]:
    """Each measure of one cell from the public functions, nothing shared (NaN for all when one is undefined,
    as the plan reports a cell)."""
    at = evaluation_time(horizon, time)
    try:
        harrell = metrics.concordance_harrell(
            np.minimum(time, at), np.where(time <= at, status, 0), risk, with_se=False
        ).estimate
        uno = metrics.concordance_uno(time, status, risk, at, with_se=False).estimate
        auc = float(metrics.auc_cumulative_dynamic(time, status, risk, [at]).table["auc"].iloc[0])
        brier = metrics.brier_score(time, status, risk, [at], check_direction=False).iloc[0]
        oe = observed_expected(time, status, risk, at, target=target)[0]
    except MetricInputError:
        return dict.fromkeys(HORIZON_MEASURES, np.nan)
    return {
        "harrell_c": harrell,
        "uno_c": uno,
        "auc": auc,
        "brier": float(brier["brier"]),
        "scaled_brier": float(brier["scaled_brier"]),
        "oe_ratio": oe,
    }


def _curve_point(time: np.ndarray, status: np.ndarray, risk: np.ndarray, horizon: float) -> float:
    try:
        at = evaluation_time(horizon, time)
        return float(metrics.auc_cumulative_dynamic(time, status, risk, [at]).table["auc"].iloc[0])
    except MetricInputError:
        return np.nan


def _same(got: float, expected: float, metric: str) -> bool:
    if np.isnan(expected):
        return bool(np.isnan(got))
    if metric == "uno_c":
        return got == pytest.approx(expected, rel=1e-12, abs=1e-15)
    return got == expected


@pytest.mark.parametrize("seed", [3, 4])
def test_every_value_equals_its_metric_function_alone(seed: int) -> None:
    _, rows, plan = _cohort(seed)
    evaluate_plan(rows, plan)
    index = patient_resample(rows.patient, np.random.default_rng(seed))
    table = evaluate_plan(rows, plan, index)
    time, status, landmark = rows.time[index], rows.status[index], rows.landmark[index]
    cells: dict[tuple[str, float, float], dict[str, float]] = {}
    nb: dict[str, pd.DataFrame] = {}
    checked = 0
    for part, model, lm, h, metric, threshold, value in table.itertuples(index=False):
        risk = plan.risks[model][index]
        if part == "measure":
            if (model, lm, h) not in cells:
                at = np.ones(index.size, bool) if np.isnan(lm) else landmark == lm
                target = plan.targets[model]
                cells[(model, lm, h)] = _on_its_own(time[at], status[at], risk[at, plan.column(h)], h, target)
            expected = cells[(model, lm, h)][metric]
        elif part == "auc_curve":
            expected = _curve_point(time, status, risk[:, plan.column(h)], h)
        else:
            if model not in nb:
                at = evaluation_time(730.0, time)
                nb[model] = metrics.net_benefit(
                    time, status, risk[:, plan.column(730.0)], at, list(THRESHOLDS), check_direction=False
                ).set_index("threshold")
            expected = float(nb[model].loc[threshold, metric])
        assert _same(value, expected, metric), (part, model, lm, h, metric, threshold, value, expected)
        checked += int(np.isfinite(expected))
    assert checked > 0.9 * len(table)
