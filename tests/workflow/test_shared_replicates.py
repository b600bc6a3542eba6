"""Saving the paired comparison's replicates in stage 3 and reading them in stage 4
(riskbench.workflow.shared_replicates): a faithful round trip, and nothing read unless the key matches."""

import json

import numpy as np
import pandas as pd
import pytest

from riskbench.models.fit_warnings import FitWarning
from riskbench.validation import ModelSpec
from riskbench.validation.comparison import ReplicateLog, collect_replicates, failed_replicate, tagged_replicate
from riskbench.validation.paired import Evaluation
from riskbench.workflow.shared_replicates import forget_replicates, load_replicates, replicate_key, save_replicates

SPECS = (ModelSpec("clinical", ("age",)), ModelSpec("imaging", ("age", "volume"), params={"baseline": "stratified"}))
PLAN = Evaluation.build(SPECS, [365.25, 730.5], pairs=[(0, 1)])


def _replicate(i: int) -> tuple:
    rng = np.random.default_rng(i)
    per_spec = pd.DataFrame(
        {
            "spec": ["clinical", "imaging"] * 2,
            "metric": ["harrell_c"] * 4,
            "horizon_days": [365.25, 365.25, 730.5, 730.5],
            "threshold": np.nan,
            "value": rng.random(4),
        }
    )
    per_pair = pd.DataFrame(
        {
            "reference": "clinical",
            "candidate": "imaging",
            "metric": ["harrell_c", "nri"],
            "horizon_days": [730.5, 730.5],
            "threshold": np.nan,
            "value": rng.normal(size=2),
        }
    )
    log = ReplicateLog(fits=[("clinical", []), ("imaging", [FitWarning("separation", ("volume",), "β → ∞ 'x'")])])
    return tagged_replicate(i, per_spec, per_pair, log=log)


@pytest.fixture
def saved(tmp_path):
    failed_log = ReplicateLog(fits=[("clinical", [])], failed_spec="imaging")
    replicates = {0: _replicate(0), 1: failed_replicate(1, ValueError("singular"), failed_log), 2: _replicate(2)}
    key = replicate_key(PLAN, seed=7, n_boot=3, stack_sha256="ab" * 32)
    save_replicates(tmp_path, key, replicates)
    return tmp_path, key, replicates


def test_round_trip_gives_the_same_replicates(saved):
    run, key, replicates = saved
    loaded = load_replicates(run, key)
    assert sorted(loaded) == [0, 1, 2]
    for i, original in replicates.items():
        back = loaded[i]
        assert back[0] == i and back[3] == original[3]
        assert back[4].fits == original[4].fits and back[4].failed_spec == original[4].failed_spec
        for a, b in zip(back[1:3], original[1:3]):
            if b is None:
                assert a is None
            else:
                pd.testing.assert_frame_equal(a, b, check_exact=True)
    # what the summaries are made of is unchanged
    for a, b in zip(collect_replicates(list(loaded.values())), collect_replicates(list(replicates.values()))):
        if isinstance(b, pd.DataFrame):
            pd.testing.assert_frame_equal(a, b, check_exact=True)
        else:
            assert a == b


@pytest.mark.parametrize(
    "change",
    [
        {"seed": 8},
        {"n_boot": 4},
        {"landmark_stack_sha256": "cd" * 32},
        {"horizons_days": [730.5]},
        {"specs": [repr(SPECS[0]), repr(ModelSpec("imaging", ("age", "volume")))]},  # one setting differs
    ],
)
def test_nothing_is_read_when_the_key_differs(saved, change):
    run, key, _ = saved
    assert load_replicates(run, {**key, **change}) == {}


def test_a_damaged_or_missing_file_is_ignored(saved):
    run, key, _ = saved
    index = run / "data" / "paired_replicates.json"
    text = json.loads(index.read_text())
    text["replicates"]["0"]["fits"] = "not a list of fits"
    index.write_text(json.dumps(text))
    assert load_replicates(run, key) == {}
    index.write_text("{ not json")
    assert load_replicates(run, key) == {}
    forget_replicates(run)
    assert not list((run / "data").glob("paired_replicates*"))
    assert load_replicates(run, key) == {}
