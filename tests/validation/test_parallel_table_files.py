"""Tables handed to replicate workers as Parquet file references (riskbench.validation.table_files)."""

import pickle

import numpy as np
import pandas as pd
import pytest

from riskbench.validation.comparison import resampling_source
from riskbench.validation.errors import ValidationInputError
from riskbench.validation.model_specs import ModelSpec
from riskbench.validation.sources import PrecomputedTables
from riskbench.validation.table_files import (
    TableFile,
    TableFiles,
    clear_table_cache,
    parquet_tables,
    referenced_tables,
    table_source,
)

from .conftest import simulate_stack


@pytest.fixture()
def written(tmp_path):
    stack, cp = simulate_stack(300, seed=5)
    paths = {"landmark_stack": tmp_path / "landmark_stack.parquet", "counting_process": tmp_path / "cp.parquet"}
    stack.to_parquet(paths["landmark_stack"], index=False)
    cp.to_parquet(paths["counting_process"], index=False)
    clear_table_cache()
    yield TableFiles.of(paths), stack, cp
    clear_table_cache()


def test_a_file_backed_source_cuts_exactly_like_the_frames(written):
    files, stack, cp = written
    on_disk, in_memory = table_source(files), PrecomputedTables(stack, cp)
    np.testing.assert_array_equal(on_disk.patient_ids(), in_memory.patient_ids())
    pd.testing.assert_series_equal(on_disk.outcome_status(), in_memory.outcome_status())
    ids = in_memory.patient_ids()[::7]
    for got, expected in zip(vars(on_disk.tables(ids)).values(), vars(in_memory.tables(ids)).values()):
        pd.testing.assert_frame_equal(got, expected, check_exact=True)


def test_pickled_sources_and_mappings_are_file_references_only(written):
    """What a task carries does not grow with the cohort: a few hundred bytes against the frames' size."""
    files, stack, cp = written
    source = table_source(files)
    specs = [ModelSpec("c", ["clinical"], params={"landmark_effects": "none"})]
    stack_only = resampling_source(source, specs)
    frames_size = len(pickle.dumps(PrecomputedTables(stack, cp)))
    for payload in (files, source, stack_only):
        size = len(pickle.dumps(payload))
        assert size < 2000 < frames_size
    assert pickle.loads(pickle.dumps(source)) is source  # one source per process: read once, built once
    assert pickle.loads(pickle.dumps(files))["landmark_stack"] is files["landmark_stack"]


def test_referenced_tables_finds_files_inside_a_job(written):
    files, *_ = written
    source = table_source(files)
    job = {"plan": ("a", 1), "inner": {"source": source}, "tables": files}
    assert set(referenced_tables(job)) == set(files.files.values())
    assert referenced_tables({"frame": pd.DataFrame({"a": [1]})}) == []


def test_a_changed_file_is_refused(written, tmp_path):
    files, stack, _ = written
    path = files.files["landmark_stack"].path
    stack.iloc[:-1].to_parquet(path, index=False)  # rewritten while the run uses it
    clear_table_cache()
    with pytest.raises(ValidationInputError, match=r"bytes here|SHA-256"):
        files["landmark_stack"]


def test_same_size_other_content_is_refused(tmp_path):
    path = tmp_path / "t.parquet"
    pd.DataFrame({"x": [1.0, 2.0]}).to_parquet(path, index=False)
    table = TableFile.of(path)
    pd.DataFrame({"x": [3.0, 4.0]}).to_parquet(path, index=False)
    assert path.stat().st_size == table.size
    clear_table_cache()
    with pytest.raises(ValidationInputError, match="SHA-256 mismatch"):
        table.read()


def test_missing_file_names_the_stage_to_run(tmp_path):
    with pytest.raises(ValidationInputError, match="run that stage first"):
        TableFile.of(tmp_path / "none.parquet")


def test_parquet_tables_is_built_once_per_process(written):
    files, *_ = written
    a = parquet_tables(files.files["landmark_stack"], files.files["counting_process"])
    assert parquet_tables(files.files["landmark_stack"], files.files["counting_process"]) is a
