"""How the counting-process table is produced and stored: blocks, order, the Parquet file and hash grouping.

None of these choices may change a single value of the tables, so each test compares against the same
cohort built the plain way.
"""

from __future__ import annotations

import pandas as pd
import pytest

from riskbench.cohort import CohortSpec, VariableSpec, build_cohort, contract, counting

# Private on purpose: which reading path a frame takes (numbered Arrow table or DuckDB reading the frame
# itself) is an internal choice with no public handle; the public result is the same either way.
from riskbench.cohort.reading import _numbered_arrow

SPEC = CohortSpec(
    variables=(VariableSpec("v0", transform="log", change=True, slope=True, slope_window_days=200), VariableSpec("v1")),
    max_carry_days=300,
    lookback_days=30,
    exam_variables=("v0",),
    static=("sex_male",),
)


@pytest.fixture(scope="module")
def cohort_tables(make_random_cohort):
    patients, meas, outcomes = make_random_cohort(60, seed=11)
    # A few exact copies and same-day conflicts, so the crowded-group steps have work to do.
    extra = meas.iloc[::7].copy()
    extra.loc[extra.index[::2], "value"] += 1.0
    return patients, pd.concat([meas, extra], ignore_index=True), outcomes


@pytest.fixture(scope="module")
def plain(cohort_tables):
    cohort = build_cohort(*cohort_tables, SPEC)
    return cohort.counting_process, cohort.ledger, cohort.landmark_stack([0.0, 100.0, 365.0], 400.0)


def test_small_blocks_give_the_same_tables(cohort_tables, plain, monkeypatch) -> None:
    monkeypatch.setattr(counting, "BLOCK_PATIENTS", 7)  # 60 patients: 9 blocks, the last one short
    cohort = build_cohort(*cohort_tables, SPEC)
    pd.testing.assert_frame_equal(cohort.counting_process, plain[0])
    pd.testing.assert_frame_equal(cohort.landmark_stack([0.0, 100.0, 365.0], 400.0), plain[2])


def test_every_row_colliding_in_one_hash_group_changes_nothing(cohort_tables, plain, monkeypatch) -> None:
    # The crowded-group search groups on a hash; make every row collide so every group looks crowded.
    monkeypatch.setattr(contract, "_GROUP_HASH", "0::UBIGINT")
    cohort = build_cohort(*cohort_tables, SPEC)
    pd.testing.assert_frame_equal(cohort.counting_process, plain[0])
    pd.testing.assert_frame_equal(cohort.ledger, plain[1])


def test_stored_file_holds_the_table_in_order(cohort_tables, plain, tmp_path) -> None:
    cohort = build_cohort(*cohort_tables, SPEC)
    stored = pd.read_parquet(cohort.counting_process_file)
    stored["status"] = stored["status"].astype("int64")
    pd.testing.assert_frame_equal(stored, plain[0])
    # Plain text, not a dictionary type, for any reader.
    assert not isinstance(stored["patient_id"].dtype, pd.CategoricalDtype)
    written = cohort.write_parquet(tmp_path)
    assert written["counting_process"].read_bytes() == cohort.counting_process_file.read_bytes()


def test_mixed_type_frame_is_read_by_duckdb_directly() -> None:
    mixed = pd.DataFrame({"patient_id": ["A", "B"], "value": [1.5, "x"]})
    assert _numbered_arrow(mixed) is None
    numbered = _numbered_arrow(pd.DataFrame({"patient_id": ["A", "B"], "value": [1.5, 2.0]}))
    assert numbered is not None and numbered.column(numbered.num_columns - 1).to_pylist() == [1, 2]


def test_empty_cohort_has_an_empty_table_with_the_columns() -> None:
    patients = pd.DataFrame(
        {"patient_id": ["A"], "entry_date": ["2020-01-01"], "birth_date": ["1960-01-01"], "sex": ["F"]}
    )
    outcomes = pd.DataFrame({"patient_id": ["A"], "date": ["2020-01-01"], "kind": ["outcome"]})  # zero follow-up
    meas = pd.DataFrame({"patient_id": ["A"], "date": ["2020-01-01"], "variable": ["v0"], "value": [1.0]})
    cohort = build_cohort(patients, meas, outcomes, SPEC)
    cp = cohort.counting_process
    assert len(cp) == 0
    assert list(cp.columns) == ["patient_id", "start", "stop", "status", *SPEC.covariate_columns]


def test_typed_columns_are_read_like_text(cohort_tables, plain) -> None:
    # Integer patient ids, real dates and numeric values (as Parquet or a typed DataFrame brings them) give
    # the same table as the same data written as text.
    patients, meas, outcomes = (t.copy() for t in cohort_tables)
    number = {pid: int(pid[1:]) for pid in patients["patient_id"]}
    for table in (patients, meas, outcomes):
        table["patient_id"] = table["patient_id"].map(number)
    meas["date"] = pd.to_datetime(meas["date"])
    cohort = build_cohort(patients, meas, outcomes, SPEC)
    expected = plain[0].assign(patient_id=plain[0]["patient_id"].map(lambda p: str(number[p])))
    got = cohort.counting_process.sort_values(
        ["patient_id", "start"], key=lambda s: s.astype(float) if s.name == "patient_id" else s, ignore_index=True
    )
    expected = expected.sort_values(
        ["patient_id", "start"], key=lambda s: s.astype(float) if s.name == "patient_id" else s, ignore_index=True
    )
    pd.testing.assert_frame_equal(got, expected)
