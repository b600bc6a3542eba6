"""The paired comparison's replicates measured from the bootstrap optimism's refits equal the comparison's own.

Both draw replicate i from seed i of the same seed (``replicate_seeds``) and refit the same specs with the same
random state, so the refits are the same models; the shared path only saves fitting them twice. The checks
are against ``compare_specs`` run on its own, replicate by replicate, and against the optimism run without
a paired plan.
"""

import sys

import cloudpickle
import numpy as np
import pandas as pd
import pytest

from riskbench.validation import ExecutionConfig, ModelSpec, PrecomputedTables, compare_specs
from riskbench.validation.comparison import comparison_plan
from riskbench.validation.errors import ValidationInputError
from riskbench.validation.optimism import bootstrap_optimism_result
from riskbench.validation.parallel import run_replicates

from .conftest import simulate_stack

cloudpickle.register_pickle_by_value(sys.modules[__name__])

NO_EFFECTS = {"landmark_effects": "none"}
CLINICAL = ModelSpec("clinical", ["clinical"], params=NO_EFFECTS)
BOTH = ModelSpec("imaging + clinical", ["clinical", "imaging"], params=NO_EFFECTS)
NOISE = ModelSpec("with noise", ["clinical", "imaging", "noise"], params=NO_EFFECTS)
HORIZONS = [365.0, 730.0]


@pytest.fixture(scope="module")
def source():
    stack, cp = simulate_stack(240, seed=5)
    stack["noise"] = np.random.default_rng(0).normal(size=len(stack))
    return PrecomputedTables(stack, cp)


def _frames(comparison):
    reps = comparison.replicates.sort_values(list(comparison.replicates.columns[:6])).reset_index(drop=True)
    return comparison.performance, comparison.differences, reps


@pytest.mark.parametrize("optimism_specs", [[CLINICAL, BOTH], [CLINICAL, NOISE, BOTH]], ids=["same", "superset"])
def test_comparison_from_the_optimism_refits_equals_its_own(source, optimism_specs):
    full = source.full_tables().landmark_stack
    plan = comparison_plan([CLINICAL, BOTH], [730.0] if len(optimism_specs) > 2 else HORIZONS, full, pairs=[(0, 1)])
    result = bootstrap_optimism_result(optimism_specs, source, HORIZONS, n_boot=5, seed=21, paired=plan)
    assert sorted(result.paired) == list(range(5))
    shared = compare_specs(
        [CLINICAL, BOTH], source, plan.horizons, n_boot=5, seed=21, pairs=[(0, 1)], known=result.paired
    )
    own = compare_specs([CLINICAL, BOTH], source, plan.horizons, n_boot=5, seed=21, pairs=[(0, 1)])
    for a, b in zip(_frames(shared), _frames(own)):
        pd.testing.assert_frame_equal(a, b, check_exact=True)
    assert shared.fit_log == own.fit_log and shared.failures == own.failures
    # and the optimism table is the one computed without the paired plan (its out-of-bag column included)
    alone = bootstrap_optimism_result(optimism_specs, source, HORIZONS, n_boot=5, seed=21)
    pd.testing.assert_frame_equal(result.table, alone.table, check_exact=True)
    assert alone.paired == {}


def test_known_replicates_fill_in_the_rest_in_parallel(source):
    full = source.full_tables().landmark_stack
    plan = comparison_plan([CLINICAL, BOTH], HORIZONS, full, pairs=[(0, 1)])
    result = bootstrap_optimism_result([CLINICAL, BOTH], source, HORIZONS, n_boot=4, seed=8, paired=plan)
    some = {i: r for i, r in result.paired.items() if i % 2 == 0}  # the odd ones are computed by compare_specs
    mixed = compare_specs(
        [CLINICAL, BOTH],
        source,
        HORIZONS,
        n_boot=4,
        seed=8,
        pairs=[(0, 1)],
        known=some,
        config=ExecutionConfig(n_jobs=2),
    )
    own = compare_specs([CLINICAL, BOTH], source, HORIZONS, n_boot=4, seed=8, pairs=[(0, 1)])
    for a, b in zip(_frames(mixed), _frames(own)):
        pd.testing.assert_frame_equal(a, b, check_exact=True)


def test_run_replicates_runs_only_the_indices_asked_for_with_their_own_seeds():
    def draw(_shared, i, seed):
        return i, float(np.random.default_rng(seed).random())

    every = run_replicates(draw, None, 3, 6)
    some = run_replicates(draw, None, 3, 6, indices=[4, 1, 4])
    assert some == [every[1], every[4]]
    assert run_replicates(draw, None, 3, 6, indices=[]) == []
    with pytest.raises(ValidationInputError, match=r"0\.\.5"):
        run_replicates(draw, None, 3, 6, indices=[6])


def test_a_paired_plan_must_compare_refitted_specs(source):
    full = source.full_tables().landmark_stack
    plan = comparison_plan([CLINICAL, NOISE], HORIZONS, full, pairs=[(0, 1)])
    with pytest.raises(ValidationInputError, match="with noise"):
        bootstrap_optimism_result([CLINICAL, BOTH], source, HORIZONS, n_boot=2, seed=1, paired=plan)
    with pytest.raises(ValidationInputError, match="out-of-bag"):
        compare_specs([CLINICAL, BOTH], source, HORIZONS, n_boot=2, evaluation="apparent", known={0: None})
