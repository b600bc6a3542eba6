"""Hostile inputs to the cohort stage's reading and contract checks: nothing is guessed, lost or quoted.

Each test reproduces one of the reading defects found by probing (a ``#`` line taken for a comment, blank
lines shifting row numbers, implausible or undeclared static values used silently, non-UTF-8 and binary files
giving tracebacks, dates with a time zone silently shifted) and checks the rule that replaced it. A property
test mutates CSV files at random (remarks, blank lines, ragged lines, quotes, encodings) and checks that
every line after the header lands in the ledger exactly once, with a named state.
"""

from __future__ import annotations

import datetime
from pathlib import Path

import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from riskbench.cohort import CohortInputError, CohortSpec, TableSource, VariableSpec, build_cohort
from riskbench.cohort import RowState as S

SPEC = CohortSpec(
    variables=(VariableSpec("vol", unit="mm3", plausible_min=1, plausible_max=1e6),),
    static=("sex_male", "pack_years", "age_at_entry"),
    lookback_days=30,
)
RUN_DAY = datetime.date(2024, 6, 1)


def _tables(n: int) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    ids = [f"P{i:05d}" for i in range(n)]
    patients = pd.DataFrame(
        {
            "patient_id": ids,
            "entry_date": "2020-01-01",
            "birth_date": "1955-03-04",
            "sex": ["F", "M"] * (n // 2) + ["F"] * (n % 2),
            "pack_years": "12.5",
        }
    )
    meas = pd.DataFrame({"patient_id": ids, "date": "2020-01-01", "variable": "vol", "value": "120"})
    outcomes = pd.DataFrame({"patient_id": ids, "date": "2021-01-01", "kind": "end_of_follow_up"})
    return patients, meas, outcomes


def _write(frames, folder: Path) -> list[Path]:
    paths = []
    for name, frame in zip(("patients", "measurements", "outcomes"), frames):
        path = folder / f"{name}.csv"
        frame.to_csv(path, index=False)
        paths.append(path)
    return paths


def _build(paths, spec: CohortSpec = SPEC):
    return build_cohort(*paths, spec, run_day=RUN_DAY)


def _states(cohort, table: str) -> list[str]:
    return cohort.ledger.query("table == @table").state.tolist()


def test_first_line_remark_is_a_header_problem(tmp_path) -> None:
    """Probe: a first line ``# exported ...`` made the reader guess '#' as a comment character."""
    paths = _write(_tables(4), tmp_path)
    paths[0].write_text("# exported from the registry\n" + paths[0].read_text())
    with pytest.raises(CohortInputError, match=r"patients\.csv: line 1 starts with '#'.*header") as info:
        _build(paths)
    assert "registry" not in str(info.value) and "\n" not in str(info.value)  # one line, remark not quoted


def test_data_row_starting_with_hash_is_data(tmp_path) -> None:
    """Probe: 3001 data lines gave 2999 ledger rows; the patient whose id began with '#' lost its outcome."""
    patients, meas, outcomes = _tables(3001)
    for frame in (patients, meas, outcomes):
        frame.loc[1500, "patient_id"] = "#1500"
    cohort = _build(_write((patients, meas, outcomes), tmp_path))
    assert (cohort.ledger.table == "patients").sum() == 3001
    assert (cohort.ledger.table == "outcomes").sum() == 3001
    assert set(cohort.ledger.state) == {S.USED}
    assert "#1500" in set(cohort.counting_process.patient_id)


def test_blank_lines_keep_line_numbers(tmp_path) -> None:
    """Probe: blank lines shifted the ledger's row numbers off the file's line numbers."""
    paths = _write(_tables(6), tmp_path)
    lines = paths[0].read_text().splitlines()
    lines[3:3] = ["", "   "]  # two blank lines before the patient on (old) line 4
    paths[0].write_text("\n".join(lines) + "\n\n")  # and one at the end
    ledger = _build(paths).ledger.query("table == 'patients'").set_index("row_number")
    assert ledger.state.to_dict() == {
        2: S.USED,
        3: S.USED,
        4: S.BLANK_LINE,
        5: S.BLANK_LINE,
        6: S.USED,
        7: S.USED,
        8: S.USED,
        9: S.USED,
        10: S.BLANK_LINE,
    }
    assert ledger.loc[6, "patient_id"] == "P00002"  # line 6 of the file holds P00002


def test_ragged_lines_are_ledger_rows(tmp_path) -> None:
    paths = _write(_tables(4), tmp_path)
    lines = paths[2].read_text().splitlines()
    lines[2] += ",extra"
    lines[3] = "P00002,2021-01-01"
    paths[2].write_text("\n".join(lines) + "\n")
    cohort = _build(paths)
    outcomes = cohort.ledger.query("table == 'outcomes'").set_index("row_number").state
    assert outcomes.to_dict() == {2: S.USED, 3: S.WRONG_FIELD_COUNT, 4: S.WRONG_FIELD_COUNT, 5: S.USED}
    # their patients have no outcome left: no follow-up, never a silent drop
    assert _states(cohort, "patients") == [S.USED, S.NO_FOLLOW_UP, S.NO_FOLLOW_UP, S.USED]


def test_implausible_birth_dates_and_negative_pack_years(tmp_path) -> None:
    """Probe: birth year 0954 gave an age of 1061.7, a birth after entry -14.5, pack-years -3 was used."""
    patients, meas, outcomes = _tables(5)
    patients.loc[1, "birth_date"] = "0954-03-04"
    patients.loc[2, "birth_date"] = "2034-07-01"  # after entry (and after the run day)
    patients.loc[3, "birth_date"] = "2021-01-01"  # after entry, not in the future
    patients.loc[4, "pack_years"] = "-3"
    cohort = _build(_write((patients, meas, outcomes), tmp_path))
    assert _states(cohort, "patients") == [
        S.USED,
        S.IMPLAUSIBLE_DATE,
        S.FUTURE_DATE,
        S.IMPLAUSIBLE_STATIC,
        S.IMPLAUSIBLE_STATIC,
    ]
    assert _states(cohort, "measurements") == [S.USED] + [S.PATIENT_EXCLUDED] * 4
    assert cohort.counting_process.age_at_entry.between(0, 120).all()
    flow = cohort.flow.set_index("label")
    assert flow.loc["patients: excluded, implausible_static", "excluded"] == 2


def test_text_in_numeric_static_is_a_reason(tmp_path) -> None:
    patients, meas, outcomes = _tables(3)
    patients.loc[1, "pack_years"] = "heavy"
    patients.loc[2, "pack_years"] = ""
    cohort = _build(_write((patients, meas, outcomes), tmp_path))
    assert _states(cohort, "patients") == [S.USED, S.UNPARSEABLE_STATIC, S.USED]
    assert cohort.patients.pack_years.isna().tolist() == [False, True]  # blank stays missing


@pytest.mark.parametrize("codes", [["0", "1"], ["U", "M"]])
def test_undeclared_sex_codes_are_a_reason(tmp_path, codes) -> None:
    """Probe: sex coded 0/1 or U passed as used and became missing later."""
    patients, meas, outcomes = _tables(2)
    patients["sex"] = codes
    cohort = _build(_write((patients, meas, outcomes), tmp_path))
    expected = [S.UNDECLARED_CODE] * 2 if codes[0] == "0" else [S.UNDECLARED_CODE, S.USED]
    assert _states(cohort, "patients") == expected


def test_latin1_file_names_the_encoding_key(tmp_path) -> None:
    """Probe: a Latin-1 file gave a DuckDB traceback whose advice named an option the configuration lacked."""
    patients, meas, outcomes = _tables(4)
    patients.loc[2, "patient_id"] = "Pé002"
    outcomes.loc[2, "patient_id"] = "Pé002"
    paths = _write((patients, meas, outcomes), tmp_path)
    for path in (paths[0], paths[2]):
        path.write_bytes(path.read_text(encoding="utf-8").encode("latin-1"))
    with pytest.raises(CohortInputError) as info:
        _build(paths)
    message = str(info.value)
    assert "patients.csv: line 4 is not valid utf-8" in message
    assert 'encoding = "latin-1"' in message and "[sources.patients]" in message
    assert "Pé" not in message and "\n" not in message
    sources = [TableSource(paths[0], encoding="latin-1"), paths[1], TableSource(paths[2], encoding="latin-1")]
    cohort = _build(sources)
    assert "Pé002" in set(cohort.counting_process.patient_id)


def test_utf16_file_with_encoding_reads(tmp_path) -> None:
    paths = _write(_tables(3), tmp_path)
    paths[2].write_bytes(paths[2].read_text().encode("utf-16"))
    cohort = _build([paths[0], paths[1], TableSource(paths[2], encoding="utf-16")])
    assert _states(cohort, "outcomes") == [S.USED] * 3


@pytest.mark.parametrize(
    "content", [bytes(range(256)) * 40, b"PAR1" + bytes(200) + b"PAR1", b"\x89PNG\r\n\x1a\n" + bytes(300)]
)
def test_binary_file_is_one_line(tmp_path, content) -> None:
    paths = _write(_tables(3), tmp_path)
    paths[1].write_bytes(content)
    with pytest.raises(CohortInputError, match=r"measurements\.csv: .*(not a text|Parquet file)") as info:
        _build(paths)
    assert "\n" not in str(info.value)


def test_empty_and_non_tabular_files(tmp_path) -> None:
    paths = _write(_tables(3), tmp_path)
    paths[2].write_text("")
    with pytest.raises(CohortInputError, match=r"outcomes\.csv: the file is empty"):
        _build(paths)
    paths[2].write_text("Dear colleague, here are the data you asked for.\nBest wishes\n")
    with pytest.raises(
        CohortInputError,
        match=r"outcomes\.csv: required column 'patient_id' is missing; the "
        r"file's columns are \['Dear colleague'\] and 1 name\(s\) that look "
        r"like data, not shown",
    ):
        _build(paths)


def test_headerless_file_does_not_show_its_first_row(tmp_path) -> None:
    """Probe: a headerless patients file's error quoted its first row (an id and dates)."""
    paths = _write(_tables(3), tmp_path)
    paths[0].write_text("\n".join(paths[0].read_text().splitlines()[1:]) + "\n")
    with pytest.raises(
        CohortInputError,
        match=r"patients\.csv: required column 'patient_id' is missing; the "
        r"file's columns are \['F'\] and 4 name\(s\) that look like data, "
        r"not shown \(is line 1 a data row",
    ) as info:
        _build(paths)
    assert "P0000" not in str(info.value) and "2020" not in str(info.value)


def test_dates_with_time_zone_before_1900_and_future(tmp_path) -> None:
    patients, meas, outcomes = _tables(2)
    extra = pd.DataFrame(
        {
            "patient_id": "P00000",
            "variable": "vol",
            "value": "130",
            "date": [
                "2020-02-01T10:00+02:00",
                "2020-02-02 08:30Z",
                "2020-02-03T10:00:00 UTC",
                "1899-12-31",
                "2024-06-02",
                "2024-06-01",
                "2020-02-04T10:00",
            ],
        }
    )
    meas = pd.concat([meas, extra], ignore_index=True)
    outcomes.loc[1, "date"] = "2025-01-01"
    cohort = _build(_write((patients, meas, outcomes), tmp_path))
    assert _states(cohort, "measurements") == [
        S.USED,
        S.PATIENT_EXCLUDED,
        S.DATE_WITH_TIME_ZONE,
        S.DATE_WITH_TIME_ZONE,
        S.DATE_WITH_TIME_ZONE,
        S.IMPLAUSIBLE_DATE,
        S.FUTURE_DATE,
        S.AFTER_FOLLOW_UP,
        S.USED,
    ]  # the run day itself is not the future
    assert _states(cohort, "outcomes") == [S.USED, S.FUTURE_DATE]
    assert _states(cohort, "patients") == [S.USED, S.NO_FOLLOW_UP]  # its only outcome row is refused


def test_missing_static_column_lists_the_files_columns(tmp_path) -> None:
    """Probe: a missing static column was reported with the columns riskbench had loaded."""
    patients, meas, outcomes = _tables(2)
    patients = patients.drop(columns="pack_years").assign(smoking_history="x")
    with pytest.raises(
        CohortInputError,
        match=r"column \(read by a static covariate\) 'pack_years' is missing; "
        r"the file's columns are \[.*'smoking_history'.*\]",
    ):
        _build(_write((patients, meas, outcomes), tmp_path))


def test_messages_name_lines_not_ids(tmp_path) -> None:
    patients, meas, outcomes = _tables(4)
    patients.loc[3, "patient_id"] = "P00001"
    patients.loc[3, "pack_years"] = "20"
    with pytest.raises(
        CohortInputError,
        match=r"patients\.csv: 1 patient id\(s\) appear on more than one line "
        r".*lines \[3, 5\]",
    ) as info:
        _build(_write((patients, meas, outcomes), tmp_path))
    assert "P0000" not in str(info.value)


def test_unreadable_quoting_is_one_line_naming_the_line(tmp_path) -> None:
    paths = _write(_tables(4), tmp_path)
    lines = paths[1].read_text().splitlines()
    lines.insert(2, "")
    lines[3] = '"P00001"x,2020-01-01,vol,120'  # text after a closing quote
    paths[1].write_text("\n".join(lines) + "\n")
    with pytest.raises(CohortInputError, match=r"measurements\.csv: line 4: the quoting cannot be read") as info:
        _build(paths)
    assert "P00001" not in str(info.value)


# --- property test: random CSV mutations --------------------------------------------------------------------

MUTATIONS = (
    "remark",
    "blank",
    "spaces",
    "more_fields",
    "fewer_fields",
    "quoted",
    "quoted_comma",
    "quoted_newline",
    "hash_id",
)


def _mutate(lines: list[str], mutations: list[tuple[str, int]]) -> list[str]:
    """Apply mutations to the data lines (never the header); each element stays one record (a quoted line
    break makes one record of two physical lines)."""
    for kind, at in mutations:
        i = 1 + at % len(lines) if len(lines) > 1 else 1
        if kind == "remark":
            lines.insert(i, "# remark, with a comma")
        elif kind == "blank":
            lines.insert(i, "")
        elif kind == "spaces":
            lines.insert(i, "  \t ")
        elif i >= len(lines) or not lines[i].strip() or lines[i][0] in '#"':
            continue
        elif kind == "more_fields":
            lines[i] += ",surplus"
        elif kind == "fewer_fields":
            lines[i] = lines[i].rsplit(",", 1)[0]
        elif kind == "hash_id":
            lines[i] = "#" + lines[i]
        else:
            first, _, rest = lines[i].partition(",")
            inside = {"quoted": "", "quoted_comma": ', x ""quoted""', "quoted_newline": "\nsecond line"}[kind]
            lines[i] = f'"{first}{inside}",{rest}'
    return lines


@settings(
    max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture]
)
@given(
    mutations=st.lists(
        st.tuples(
            st.sampled_from(("patients", "measurements", "outcomes")), st.sampled_from(MUTATIONS), st.integers(0, 50)
        ),
        max_size=12,
    ),
    encoding=st.sampled_from(("utf-8", "latin-1", "cp1252", "utf-16")),
    accent=st.booleans(),
    crlf=st.booleans(),
)
def test_every_line_is_accounted_for(tmp_path_factory, mutations, encoding, accent, crlf) -> None:
    folder = tmp_path_factory.mktemp("mutated")
    patients, meas, outcomes = _tables(6)
    if accent:
        for frame in (patients, meas, outcomes):
            frame.loc[2, "patient_id"] = "Pé-ü"
    sources, records = [], {}
    for name, frame in zip(("patients", "measurements", "outcomes"), (patients, meas, outcomes)):
        lines = frame.to_csv(index=False, lineterminator="\n").splitlines()
        lines = _mutate(lines, [(k, a) for t, k, a in mutations if t == name])
        text = ("\r\n" if crlf else "\n").join(lines) + "\n"
        path = folder / f"{name}.csv"
        path.write_bytes(text.encode(encoding))
        sources.append(TableSource(path, encoding=encoding))
        records[name] = len(lines) - 1  # records after the header (blank lines included)
    cohort = _build(sources)
    named = {str(s) for s in S}
    for table, n in records.items():
        rows = cohort.ledger[cohort.ledger["table"] == table]
        assert len(rows) == n  # input lines = used + excluded
        assert rows.state.isin(named).all()
        assert rows.row_number.is_unique and rows.row_number.min() >= 2
        flow = cohort.flow.query("table == @table").set_index("state")
        assert flow.loc["read", "remaining"] == flow.excluded.sum() + flow.loc["used", "remaining"] == n


def test_wide_layout_keeps_line_numbers(tmp_path) -> None:
    """A wide measurement file: one ledger row per filled cell, numbered by its line; blank cells are no
    measurement; blank and ragged lines are ledger rows."""
    paths = _write(_tables(2), tmp_path)
    paths[1].write_text(
        "patient_id,date,vol,note\nP00000,2020-01-01,100,\n\nP00001,2020-01-01,,a\n"
        "P00001,2020-01-02,90,b,surplus\nP00001,2020-01-03,95,c\n"
    )
    spec = CohortSpec(variables=SPEC.variables, static=("age_at_entry",), measurement_layout="wide")
    ledger = _build(paths, spec).ledger.query("table == 'measurements'")
    assert ledger[["row_number", "state"]].values.tolist() == [
        [2, S.USED],
        [3, S.BLANK_LINE],
        [5, S.WRONG_FIELD_COUNT],
        [6, S.USED],
    ]


def test_typed_dates_time_zone_aware_is_one_line_and_old_dates_are_implausible() -> None:
    patients, meas, outcomes = _tables(2)
    meas["date"] = pd.to_datetime(meas["date"]).dt.tz_localize("Europe/Paris")
    with pytest.raises(CohortInputError, match=r"measurements DataFrame: column 'date' holds time-zone-aware"):
        build_cohort(patients, meas, outcomes, SPEC, run_day=RUN_DAY)
    meas["date"] = pd.to_datetime(["2020-01-01", "1850-01-01"])
    cohort = build_cohort(patients, meas, outcomes, SPEC, run_day=RUN_DAY)
    assert _states(cohort, "measurements") == [S.USED, S.IMPLAUSIBLE_DATE]


def test_sample_of_the_first_lines(tmp_path) -> None:
    """``max_lines`` reads the header and that many lines (plain and gzip files), numbered as in the file."""
    import gzip

    from riskbench.cohort.csv_lines import read_csv_lines

    path = _write(_tables(50), tmp_path)[1]
    lines = path.read_text().splitlines()
    lines.insert(3, "")
    path.write_text("\n".join(lines) + "\n")
    packed = tmp_path / "measurements.csv.gz"
    packed.write_bytes(gzip.compress(path.read_bytes()))
    for source in (path, packed):
        sample = read_csv_lines(source, "measurements", max_lines=10)
        assert sample.rows.column("row_number").to_pylist() == [2, 3, *range(5, 12)]
        assert sample.other_lines.to_pylist() == [{"row_number": 4, "state": "blank_line"}]
    assert read_csv_lines(path, "measurements", max_lines=1000).rows.num_rows == 50
