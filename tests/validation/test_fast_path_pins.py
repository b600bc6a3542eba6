"""The resampling fast path gives the numbers of the code before it (issue 14).

The values below were computed on main before the replicates were reorganised (one sort and one censoring
estimate per evaluation set, shared by every measure and horizon; counting-process table left out of draws when
no spec fits on it; out-of-bag patients found by hashing; warm-started refits). They are this project's own
outputs, not published figures: the check is that the reorganisation changed no result beyond the Cox engine's
convergence tolerance. The calibration slope and ICI are left out: their method is being revised on its own
(the calibration module), and their inputs are the same risks that the pinned measures check. The tolerance,
1e-7 relative, is far above floating-point reordering (about 1e-15) and far below any difference a reader could
see (the reports print three decimals).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from riskbench.cohort import build_cohort
from riskbench.demo import DEFAULT_HORIZON_DAYS, DEFAULT_LANDMARKS_DAYS, generate_cohort
from riskbench.demo.cohort_spec import demo_cohort_spec
from riskbench.models import risk_curve
from riskbench.validation import ModelSpec, PrecomputedTables, bootstrap_optimism, compare_specs
from riskbench.validation.landmark_performance import EvaluationRows, landmark_performance
from riskbench.validation.paired import fit_all

RTOL = 1e-7
HORIZONS = [365.25, 730.5]
CURVE_DAYS = [182.625, 365.25, 547.875, 730.5]
CLINICAL = ["age_at_entry", "pack_years", "serum_marker"]
IMAGING = [*CLINICAL, "log_nodule_volume", "suspicion_score"]


@pytest.fixture(scope="module")
def scenario():
    raw = generate_cohort(700, seed=11, n_risk_paths=0)
    cohort = build_cohort(raw.patients, raw.measurements, raw.outcomes, demo_cohort_spec())
    source = PrecomputedTables.from_cohort(cohort, DEFAULT_LANDMARKS_DAYS, DEFAULT_HORIZON_DAYS)
    stratified = {"baseline": "stratified"}
    specs = [
        ModelSpec("clinical", CLINICAL, params=stratified),
        ModelSpec("imaging", IMAGING, params=stratified),
        ModelSpec("tv", IMAGING, family="time_varying_cox"),
    ]
    return source, specs


def _value(table: pd.DataFrame, column: str, **keys) -> float:
    rows = table
    for key, value in keys.items():
        rows = rows[rows[key] == value]
    assert len(rows) == 1, keys
    return float(rows[column].iloc[0])


def test_optimism_numbers_are_those_of_the_code_before(scenario):
    source, specs = scenario
    table = bootstrap_optimism(specs, source, HORIZONS, n_boot=3, seed=5, thresholds=(0.1,))
    pins = [  # (spec, metric, horizon, column, value)
        ("clinical", "harrell_c", 365.25, "apparent", 0.72752392053602122),
        ("clinical", "harrell_c", 365.25, "optimism", 0.00801567985696624),
        ("clinical", "harrell_c", 365.25, "out_of_bag", 0.71122837674941730),
        ("imaging", "scaled_brier", 730.5, "corrected", 0.14522406081271391),
        ("imaging", "oe_ratio", 730.5, "optimism", -0.03348829063048357),
        ("imaging", "harrell_c", 730.5, "dot632_plus", 0.80472969585207155),
        ("tv", "harrell_c", 365.25, "optimism", 0.01317474567168775),
        ("tv", "brier", 365.25, "out_of_bag", 0.01889507937634080),
        ("tv", "uno_c", 730.5, "corrected", 0.82119012275731240),
    ]
    for spec, metric, horizon, column, value in pins:
        got = _value(table, column, spec=spec, metric=metric, horizon_days=horizon)
        assert got == pytest.approx(value, rel=RTOL), (spec, metric, horizon, column)
    nb = table[(table["metric"] == "net_benefit") & (table["spec"] == "imaging") & (table["horizon_days"] == 730.5)]
    assert float(nb["apparent"].iloc[0]) == pytest.approx(0.01107981930617727, rel=RTOL)


def test_comparison_numbers_are_those_of_the_code_before(scenario):
    source, specs = scenario
    result = compare_specs(specs[:2], source, HORIZONS, n_boot=3, seed=5, pairs=[(0, 1)], thresholds=(0.1,))
    diff = result.differences
    pins = [
        ("harrell_c", 365.25, "estimate", 0.07446157673062226),
        ("brier", 730.5, "ci_low", -0.00200531685237127),
        ("scaled_brier", 730.5, "estimate", 0.02904342129268189),
        ("nri", 730.5, "estimate", 0.68817933137082543),
        ("idi_events", 365.25, "ci_high", 0.07364738829293895),
    ]
    for metric, horizon, column, value in pins:
        got = _value(diff, column, metric=metric, horizon_days=horizon)
        assert got == pytest.approx(value, rel=RTOL), (metric, horizon, column)
    perf = result.performance
    got = _value(perf, "estimate", spec="clinical", metric="harrell_c", horizon_days=365.25)
    assert got == pytest.approx(0.71122837674941730, rel=RTOL)


def test_landmark_performance_numbers_are_those_of_the_code_before(scenario):
    source, specs = scenario
    stack = source.full_tables().landmark_stack
    models = fit_all(specs[:2], source.full_tables(), 0)
    risks = {s.name: np.asarray(risk_curve(m, stack, CURVE_DAYS)) for s, m in zip(specs[:2], models)}
    perf = landmark_performance(
        EvaluationRows.from_stack(stack),
        CURVE_DAYS,
        risks,
        report_days=HORIZONS,
        curve_days=CURVE_DAYS,
        decision_days=730.5,
        thresholds=(0.0, 0.05, 0.1, 0.2),
        min_outcomes=10,
        n_boot=3,
        seed=9,
    )
    m = perf.measures
    pins = [
        (0.0, 365.25, "harrell_c", "estimate", 0.80412571762187413),
        (0.0, 365.25, "oe_ratio", "ci_low", 0.44637608381503047),
        (0.0, 730.5, "scaled_brier", "ci_high", 0.02006791183971656),
        (182.625, 730.5, "uno_c", "estimate", 0.66963453834543640),
        (182.625, 730.5, "auc", "ci_high", 0.76814108727514319),
    ]
    for landmark, horizon, metric, column, value in pins:
        got = _value(m[m["model"] == "clinical"], column, landmark_days=landmark, horizon_days=horizon, metric=metric)
        assert got == pytest.approx(value, rel=RTOL), (landmark, horizon, metric, column)
    pooled = m[
        (m["model"] == "imaging") & m["landmark_days"].isna() & (m["metric"] == "uno_c") & (m["horizon_days"] == 365.25)
    ]
    assert float(pooled["estimate"].iloc[0]) == pytest.approx(0.82116530282082356, rel=RTOL)
    assert float(pooled["ci_low"].iloc[0]) == pytest.approx(0.80444693342765494, rel=RTOL)
    curve = perf.auc_curve.set_index(["model", "horizon"])
    assert curve.loc[("clinical", 547.875), "auc_upper"] == pytest.approx(0.78440086490808025, rel=RTOL)
    assert curve.loc[("imaging", 182.625), "auc"] == pytest.approx(0.79909043010939096, rel=RTOL)
    nb = perf.decision_curve.set_index(["model_name", "threshold"])
    assert nb.loc[("clinical", 0.05), "model_upper"] == pytest.approx(0.01745212812111598, rel=RTOL)
    assert nb.loc[("clinical", 0.2), "treat_all_lower"] == pytest.approx(-0.20881729216769168, rel=RTOL)
