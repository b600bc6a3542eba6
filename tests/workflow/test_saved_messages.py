"""Saved error text keeps words, names and line numbers and drops raw values (ids, dates, measurements)."""

from __future__ import annotations

import nbformat
from hypothesis import given
from hypothesis import strategies as st
from nbformat.v4 import new_code_cell, new_notebook, new_output

from riskbench.workflow.saved_messages import REDACTED, scrub_notebook, scrub_text


def test_ids_dates_and_values_are_replaced_line_numbers_and_counts_kept():
    text = (
        "/data/study 2/patients.csv: patient id P000017 is repeated on lines 3, 9 and 12; 41 missing values; "
        "columns present: P000017, 2016-07-08, 1954-10-10, F, 43.5"
    )
    saved = scrub_text(text, names=["patients.csv"], paths=["/data/study 2/patients.csv"])
    assert saved == (
        f"patients.csv: patient id {REDACTED} is repeated on lines 3, 9 and 12; 41 missing values; "
        f"columns present: {REDACTED}, F, {REDACTED}"
    )


def test_quoted_values_go_known_names_stay_and_an_apostrophe_is_not_a_quote():
    text = (
        "required column 'patient_id' is missing; the file's columns are ['1954-10-10', 'Smith', 'F']; "
        "could not convert \"12/31/2019\" in column 'entry_date'"
    )
    saved = scrub_text(text, names=["patient_id", "entry_date"])
    assert saved == (
        f"required column 'patient_id' is missing; the file's columns are ['{REDACTED}', '{REDACTED}', "
        f"'{REDACTED}']; could not convert \"{REDACTED}\" in column 'entry_date'"
    )


def test_multi_line_tracebacks_become_one_line():
    assert "\n" not in scrub_text("Traceback:\n  File x, line 3\nValueError: bad value 1961")


@given(
    st.lists(st.from_regex(r"[A-Z]{1,2}[0-9]{3,8}", fullmatch=True), min_size=1, max_size=5),
    st.sampled_from(["id {} is repeated", "columns present: {}", "bad row '{}'", "value {} at line 7"]),
)
def test_no_mixed_letter_digit_identifier_survives(ids, template):
    """An identifier with digits never survives, whatever message it is quoted in."""
    saved = scrub_text(template.format(", ".join(ids)))
    assert not any(i in saved for i in ids)


def test_notebook_error_outputs_and_stderr_are_scrubbed(tmp_path):
    cell = new_code_cell("x")
    cell.outputs = [
        new_output("stream", name="stderr", text="warning for P000123 on 2020-01-02\n"),
        new_output(
            "error",
            ename="CohortInputError",
            evalue="duplicate id P000123 on line 5",
            traceback=["\x1b[31mCohortInputError\x1b[0m: duplicate id P000123 on line 5"],
        ),
    ]
    path = tmp_path / "stage.ipynb"
    nbformat.write(new_notebook(cells=[cell]), str(path))
    scrub_notebook(path)
    text = path.read_text()
    assert "P000123" not in text and "2020-01-02" not in text
    error = nbformat.read(str(path), as_version=4).cells[0].outputs[1]
    assert error["ename"] == "CohortInputError" and error["evalue"] == f"duplicate id {REDACTED} on line 5"
