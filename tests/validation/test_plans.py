"""Resampling plans keep every patient's rows on one side of each split."""

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from riskbench.validation.errors import ValidationInputError
from riskbench.validation.plans import (
    bootstrap_patient_draw,
    patient_folds,
    patient_outcome_status,
    temporal_split,
)


def _rows(n_patients: int, rows_per: list[int], status_per: list[int]) -> tuple[np.ndarray, np.ndarray]:
    ids, status = [], []
    for p in range(n_patients):
        k = rows_per[p % len(rows_per)]
        s = status_per[p % len(status_per)]
        ids += [f"P{p:04d}"] * k
        # Only the last row of a patient carries its terminal status (counting-process layout).
        status += [0] * (k - 1) + [s]
    return np.array(ids), np.array(status)


@settings(max_examples=40, deadline=None)
@given(
    n_patients=st.integers(4, 60),
    rows_per=st.lists(st.integers(1, 5), min_size=1, max_size=6),
    status_per=st.lists(st.sampled_from([0, 1, 2]), min_size=1, max_size=7),
    k=st.integers(2, 4),
    repeats=st.integers(1, 2),
    seed=st.integers(0, 2**31 - 1),
)
def test_no_patient_on_both_sides_and_every_patient_evaluated_once(n_patients, rows_per, status_per, k, repeats, seed):
    """Invariant of grouped cross-validation: no patient in both the fitting and the evaluation part."""
    ids, status = _rows(n_patients, rows_per, status_per)
    splits = patient_folds(ids, status, k, seed, repeats=repeats)
    assert len(splits) == k * repeats
    all_ids = set(ids)
    for rep in range(repeats):
        evaluated = []
        for split in splits[rep * k : (rep + 1) * k]:
            assert not set(split.fit_ids) & set(split.eval_ids)
            assert set(split.fit_ids) | set(split.eval_ids) == all_ids
            evaluated += list(split.eval_ids)
        assert sorted(evaluated) == sorted(all_ids)


def test_folds_are_stratified_and_repeatable():
    ids, status = _rows(100, [3], [1, 0, 0, 2, 0])  # 20 outcomes, 20 competing, 60 censored
    a = patient_folds(ids, status, 5, seed=7)
    b = patient_folds(ids, status, 5, seed=7)
    c = patient_folds(ids, status, 5, seed=8)
    assert all(np.array_equal(x.eval_ids, y.eval_ids) for x, y in zip(a, b))
    assert not all(np.array_equal(x.eval_ids, y.eval_ids) for x, y in zip(a, c))
    per_patient = patient_outcome_status(ids, status)
    for split in a:
        counts = per_patient.loc[split.eval_ids].value_counts()
        assert counts[1] == 4 and counts[2] == 4 and counts[0] == 12


def test_patient_status_prefers_outcome_over_competing():
    s = patient_outcome_status(["a", "a", "b", "c"], [0, 1, 2, 0])
    assert s.to_dict() == {"a": 1, "b": 2, "c": 0}


def test_bad_inputs_raise_clear_errors():
    with pytest.raises(ValidationInputError, match="status must be 0"):
        patient_folds(["a", "b"], [0, 3], 2, 0)
    with pytest.raises(ValidationInputError, match="k must be"):
        patient_folds(["a", "b"], [0, 1], 3, 0)


def test_temporal_split_by_cutoff_and_fraction():
    ids = np.array([f"P{i}" for i in range(10)])
    dates = pd.date_range("2018-01-01", periods=10, freq="90D")
    s = temporal_split(ids, dates, cutoff="2019-01-01")
    assert set(s.fit_ids) == {f"P{i}" for i in range(5)}  # 2018-01-01 + 4*90 days = 2018-12-27
    assert not set(s.fit_ids) & set(s.eval_ids)
    f = temporal_split(ids, dates, fit_fraction=0.7)
    assert len(f.fit_ids) == 7 and len(f.eval_ids) == 3
    with pytest.raises(ValidationInputError, match="one side empty"):
        temporal_split(ids, dates, cutoff="2030-01-01")
    with pytest.raises(ValidationInputError, match="exactly one"):
        temporal_split(ids, dates)


def test_bootstrap_draw_has_original_size_and_ids():
    ids = np.array(["a", "b", "c", "d"])
    draw = bootstrap_patient_draw(ids, np.random.default_rng(0))
    assert len(draw) == 4 and set(draw) <= set(ids)
