"""The resampling pipeline on small synthetic cohorts with a known hazard (see conftest.simulate_stack)."""

import sys

import cloudpickle
import numpy as np
import pandas as pd
import pytest

from riskbench.validation import (
    ExecutionConfig,
    ModelSpec,
    PrecomputedTables,
    ValidationInputError,
    bootstrap_optimism,
    compare_specs,
    draw_tables,
    evaluate_model,
    evaluate_splits,
    external_validation,
    fit_spec,
    leave_group_out,
    patient_folds,
    permutation_importance,
    temporal_split,
)

from .conftest import simulate_stack

cloudpickle.register_pickle_by_value(sys.modules[__name__])

NO_EFFECTS = {"landmark_effects": "none"}
CLINICAL = ModelSpec("clinical", ["clinical"], params=NO_EFFECTS)
BOTH = ModelSpec("imaging + clinical", ["clinical", "imaging"], params=NO_EFFECTS)
HORIZONS = [365.0, 730.0]


@pytest.fixture(scope="module")
def source():
    stack, cp = simulate_stack(300, seed=3)
    return PrecomputedTables(stack, cp)


def test_draw_tables_repeats_patients_as_distinct_copies(source):
    ids = source.patient_ids()
    drawn = np.concatenate([ids[:3], ids[:1], ids[:1]])  # first patient three times
    tables = draw_tables(source, drawn)
    stack = tables.landmark_stack
    first = ids[0]
    copies = sorted({p for p in stack["patient_id"] if p.startswith(first + "#")})
    assert copies == [f"{first}#1", f"{first}#2", f"{first}#3"]
    full = source.full_tables().landmark_stack
    expected_rows = 3 * (full["patient_id"] == first).sum() + (full["patient_id"].isin(ids[1:3])).sum()
    assert len(stack) == expected_rows
    assert len(tables.counting_process) == 5


def test_optimism_table_is_consistent_and_parallel_equals_serial(source):
    serial = bootstrap_optimism([CLINICAL, BOTH], source, HORIZONS, n_boot=4, seed=11)
    two = bootstrap_optimism([CLINICAL, BOTH], source, HORIZONS, n_boot=4, seed=11, config=ExecutionConfig(n_jobs=2))
    pd.testing.assert_frame_equal(serial, two)
    assert set(serial["metric"]) >= {"harrell_c", "uno_c", "auc", "brier", "scaled_brier", "calibration_slope", "ici"}
    np.testing.assert_allclose(serial["corrected"], serial["apparent"] - serial["optimism"])
    assert (serial["n_boot"] == 4).all()
    other_seed = bootstrap_optimism([CLINICAL], source, HORIZONS, n_boot=4, seed=12)
    assert not np.allclose(other_seed["optimism"], serial.loc[serial["spec"] == "clinical", "optimism"])


def test_paired_interval_excludes_zero_for_a_strong_imaging_effect(source):
    """Imaging hazard ratio e^0.8 per SD: the out-of-bag C gain is ~0.1, far above its bootstrap spread."""
    res = compare_specs(
        [CLINICAL, BOTH], source, [365.0], n_boot=15, seed=2, thresholds=[0.1, 0.2], nri_categories=[0.1, 0.3]
    )
    d = res.differences.set_index("metric")
    for metric in ("harrell_c", "uno_c", "auc", "idi", "nri"):
        assert d.loc[metric, "ci_low"] > 0, metric
    assert d.loc["brier", "estimate"] < 0
    assert {"nri_events", "nri_nonevents", "nri_cat", "idi_events", "idi_nonevents", "net_benefit"} <= set(d.index)
    assert res.n_failed == 0


def test_cross_validation_and_temporal_split(source):
    splits = patient_folds(
        source.full_tables().counting_process["patient_id"], source.full_tables().counting_process["status"], 3, seed=1
    )
    per_spec, _per_pair = evaluate_splits([CLINICAL, BOTH], source, splits, [365.0])
    assert per_spec["split"].nunique() == 3
    c = per_spec[per_spec["metric"] == "harrell_c"].groupby("spec")["value"].mean()
    assert c["imaging + clinical"] > c["clinical"]
    ids = source.patient_ids()
    entry = pd.Series(pd.date_range("2015-01-01", periods=len(ids), freq="7D"), index=ids)
    split = temporal_split(ids, entry.to_numpy(), fit_fraction=0.6)
    per_spec_t, _ = evaluate_splits([BOTH], source, [split], [365.0])
    assert (per_spec_t["split"] == split.label).all()


def test_external_validation_fits_on_a_and_evaluates_on_b():
    stack_a, cp_a = simulate_stack(250, seed=21)
    stack_b, cp_b = simulate_stack(250, seed=22)
    for frame in (stack_b, cp_b):
        frame["patient_id"] = "B" + frame["patient_id"]
    res = external_validation(
        [CLINICAL, BOTH], PrecomputedTables(stack_a, cp_a), PrecomputedTables(stack_b, cp_b), [365.0], n_boot=10, seed=4
    )
    perf = res.performance.set_index(["spec", "metric"])
    assert perf.loc[("imaging + clinical", "harrell_c"), "estimate"] > 0.65
    # The estimate is the C on all of B of the model fitted once on A: recomputed with scikit-survival's
    # concordance_index_censored (outcome by the horizon; scored just inside it when nobody is followed beyond).
    from sksurv.metrics import concordance_index_censored

    model = fit_spec(CLINICAL, PrecomputedTables(stack_a, cp_a).full_tables())
    time, status = stack_b["time"].to_numpy(), stack_b["status"].to_numpy()
    t_eval = 365.0 - 1e-6 if time.max() <= 365.0 else 365.0
    expected = concordance_index_censored(
        (status == 1) & (time <= t_eval), np.minimum(time, t_eval), model.predict_risk(stack_b, 365.0)
    )[0]
    row = perf.loc[("clinical", "harrell_c")]
    assert row["estimate"] == pytest.approx(expected, abs=1e-12)
    assert row["ci_low"] < row["estimate"] < row["ci_high"] and row["ci_high"] - row["ci_low"] < 0.2
    with pytest.raises(ValidationInputError, match="both cohorts"):
        external_validation(
            [CLINICAL], PrecomputedTables(stack_a, cp_a), PrecomputedTables(stack_a, cp_a), [365.0], n_boot=2
        )


def test_importance_ranks_the_strong_group_and_not_noise():
    stack, cp = simulate_stack(300, seed=5)
    rng = np.random.default_rng(0)
    noise = pd.Series(rng.normal(size=cp["patient_id"].nunique()), index=cp["patient_id"].unique())
    stack["noise"] = stack["patient_id"].map(noise)
    src = PrecomputedTables(stack, cp)
    spec = ModelSpec("all", ["clinical", "imaging", "noise"], params=NO_EFFECTS)
    groups = {"imaging": ["imaging"], "noise": ["noise"]}
    logo = leave_group_out(spec, groups, src, [365.0], n_boot=10, seed=1).set_index(["group", "metric"])
    assert logo.loc[("imaging", "harrell_c"), "ci_low"] > 0
    assert logo.loc[("noise", "harrell_c"), "ci_low"] < 0.01  # noise cannot show a clear gain
    perm = permutation_importance(spec, groups, src, [365.0], n_boot=8, seed=1).set_index(["group", "metric"])
    assert perm.loc[("imaging", "harrell_c"), "ci_low"] > 0
    assert perm.loc[("noise", "harrell_c"), "drop"] < perm.loc[("imaging", "harrell_c"), "drop"]


def test_spec_and_argument_errors(source):
    with pytest.raises(ValidationInputError, match="family"):
        ModelSpec("x", ["a"], family="boosting")
    with pytest.raises(ValidationInputError, match="repeat"):
        ModelSpec("x", ["a", "a"])
    with pytest.raises(ValidationInputError, match="at least two"):
        compare_specs([CLINICAL], source, [365.0], n_boot=3)
    with pytest.raises(ValidationInputError, match="beyond"):
        bootstrap_optimism(CLINICAL, source, [2000.0], n_boot=2)
    with pytest.raises(ValidationInputError, match="unique"):
        compare_specs([CLINICAL, CLINICAL], source, [365.0], n_boot=3)
    assert BOTH.without(["imaging"]).covariates == ("clinical",)


def test_cox_and_forest_families_run_through_the_same_pipeline(source):
    """The counting-process Cox model and the forest are validated by the same code as the super-model."""
    splits = patient_folds(
        source.full_tables().counting_process["patient_id"], source.full_tables().counting_process["status"], 2, seed=3
    )[:1]
    cox = ModelSpec("cox", ["clinical", "imaging"], family="cox")
    forest = ModelSpec("forest", ["clinical", "imaging"], family="forest", params={"n_estimators": 25})
    per_spec, per_pair = evaluate_splits([cox, forest], source, splits, [365.0])
    c = per_spec[per_spec["metric"] == "harrell_c"].set_index("spec")["value"]
    assert c["cox"] > 0.65 and c["forest"] > 0.6
    assert set(per_pair["metric"]) >= {"nri", "idi", "harrell_c"}
    no_cp = PrecomputedTables(source.full_tables().landmark_stack)
    with pytest.raises(ValidationInputError, match="counting-process"):
        evaluate_splits([cox], no_cp, splits, [365.0])


def test_apparent_mode_estimates_are_the_full_data_values(source):
    res = compare_specs([CLINICAL, BOTH], source, [365.0], n_boot=3, seed=1, evaluation="apparent", thresholds=[0.1])
    full = source.full_tables()
    direct = evaluate_model(fit_spec(CLINICAL, full), full.landmark_stack, [365.0], thresholds=[0.1])
    got = res.performance[res.performance["spec"] == "clinical"].set_index(["metric", "threshold"])["estimate"]
    want = direct.set_index(["metric", "threshold"])["value"]
    pd.testing.assert_series_equal(got.sort_index(), want.sort_index(), check_names=False)
    assert res.performance["estimate"].notna().all()
