"""Run pseudonyms: stable for a seed, one per source id, and free of the source id's characters."""

from __future__ import annotations

import pandas as pd
from hypothesis import given
from hypothesis import strategies as st

from riskbench.workflow.pseudonyms import pseudonym_map, replace_ids


@given(st.sets(st.from_regex(r"P\d{6}", fullmatch=True), min_size=1, max_size=40), st.integers(0, 2**31))
def test_pseudonyms_are_one_to_one_stable_and_reveal_no_id(ids, seed):
    mapping = pseudonym_map(ids, seed)
    assert set(mapping) == ids and len(set(mapping.values())) == len(ids)
    assert mapping == pseudonym_map(sorted(ids, reverse=True), seed)  # order of input does not matter
    assert not set(mapping.values()) & ids
    assert all(v.startswith("R") for v in mapping.values())


def test_replace_ids_keeps_missing_ids_missing():
    table = pd.DataFrame({"patient_id": ["P1", None, "P2", "P1"], "x": [1, 2, 3, 4]})
    out = replace_ids(table, pseudonym_map(["P1", "P2"], seed=5))
    assert out["patient_id"].isna().tolist() == [False, True, False, False]
    assert out["patient_id"].iloc[0] == out["patient_id"].iloc[3] != out["patient_id"].iloc[2]
    assert table["patient_id"].iloc[0] == "P1"  # the input is not changed
