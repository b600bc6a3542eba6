"""Parsing of the [sources] and [cohort] configuration sections, and the build-tables command."""

from __future__ import annotations

import tomllib
from pathlib import Path

import pandas as pd
import pytest

from riskbench.cohort import SpecError, build_cohort
from riskbench.cohort.config_schema import read_cohort, read_sources
from riskbench.cohort.spec import DAYS_PER_YEAR
from riskbench.workflow.cli import main

COHORT_TOML = """
[cohort]
max_carry = "24 months"
lookback = "30 days"
same_day_rule = "last"
static = ["sex_male", "age_at_entry"]
exam_variables = ["vol"]

[cohort.variables.vol]
unit = "mm3"
conversions = { cm3 = 1000 }
range = [1, 100000]
transform = "log"
change = true
slope = true
slope_window = "6 months"

[cohort.variables.marker]
unit = "ng/mL"
"""


def test_cohort_section_round_trip() -> None:
    spec = read_cohort(tomllib.loads(COHORT_TOML)["cohort"])
    assert spec.max_carry_days == pytest.approx(2 * DAYS_PER_YEAR)
    assert spec.lookback_days == 30 and spec.same_day_rule == "last"
    vol = spec.variable("vol")
    assert vol.factors == {"mm3": 1.0, "cm3": 1000.0} and (vol.plausible_min, vol.plausible_max) == (1, 100000)
    assert vol.slope_window_days == pytest.approx(DAYS_PER_YEAR / 2)
    assert spec.covariate_columns[:5] == (
        "log_vol",
        "log_vol_change",
        "log_vol_slope_per_year",
        "vol_staleness_days",
        "marker",
    )


@pytest.mark.parametrize(
    "section, message",
    [
        ({"max_carry": 3}, r"\[cohort\] max_carry = 3 is not allowed: expected a duration with a unit in quotes"),
        (
            {"max_cary": "3 years"},
            r"\[cohort\] has unknown key 'max_cary' = '3 years'; allowed keys: variables.*"
            r"\(did you mean 'max_carry'\?\)",
        ),
        (
            {"same_day_rule": "median"},
            r"same_day_rule = 'median' is not allowed: expected one of 'mean', 'last', 'error'",
        ),
        ({"lookback": "90"}, r"lookback = '90' is not allowed: expected a duration with a unit"),
        ({"current_age": 1}, r"current_age = 1 is not allowed: expected true or false"),
        ({"variables": {"v": {"transform": "sqrt"}}}, r"\[cohort.variables.v\] transform = 'sqrt' is not allowed"),
        (
            {"variables": {"v": {"range": [5, 1]}}},
            r"range = \[5, 1\] is not allowed: expected \[min, max\] with min <= max",
        ),
        ({"variables": {"v": {"units": "mm"}}}, r"\[cohort.variables.v\] has unknown key 'units'.*did you mean 'unit'"),
        ({"lookback_days": 1, "lookback": "1 day"}, r"\[cohort\] has unknown key 'lookback_days'"),
        (
            {"exam_variables": ["ct"]},
            r"\[cohort\] exam_variables = 'ct' is not allowed: expected names of "
            r"\[cohort.variables.\*\] tables",
        ),
    ],
)
def test_cohort_section_errors_name_key_value_and_choices(section, message) -> None:
    with pytest.raises(SpecError, match=message):
        read_cohort(section)


def _write_sources(folder: Path) -> None:
    pd.DataFrame(
        {
            "id": ["A", "B"],
            "first_ct": ["01/02/2020", "15/03/2020"],
            "born": ["01/01/1950", "01/01/1960"],
            "sex": ["F", "M"],
        }
    ).to_csv(folder / "pts.csv", index=False)
    pd.DataFrame(
        {
            "id": ["A", "A", "B"],
            "when": ["01/02/2020", "01/05/2020", "15/03/2020"],
            "vol": [100.0, 0.2, 50.0],
            "marker": [1.0, None, 2.0],
        }
    ).to_csv(folder / "wide.csv", index=False)
    pd.DataFrame(
        {"id": ["A", "B"], "date": ["01/01/2021", "15/09/2020"], "kind": ["death", "end_of_follow_up"]}
    ).to_parquet(folder / "out.parquet")


SOURCES_TOML = """
[sources]
date_format = "%d/%m/%Y"
[sources.patients]
path = "data/pts.csv"
columns = { patient_id = "id", entry_date = "first_ct", birth_date = "born" }
[sources.measurements]
path = "data/wide.csv"
layout = "wide"
columns = { patient_id = "id", date = "when" }
[sources.outcomes]
path = "data/out.parquet"
columns = { patient_id = "id" }
"""


def test_sources_section_wide_layout_column_maps_and_date_format(tmp_path) -> None:
    (tmp_path / "data").mkdir()
    _write_sources(tmp_path / "data")
    sources = read_sources(tomllib.loads(SOURCES_TOML)["sources"], tmp_path)
    spec = read_cohort({**tomllib.loads(COHORT_TOML)["cohort"], "kind_map": {"death": "competing"}})
    cohort = build_cohort(sources.patients, sources.measurements, sources.outcomes, spec)
    cp = cohort.counting_process
    a = cp[cp.patient_id == "A"]
    # A enters 2020-02-01; the second volume (0.2, no unit column: canonical mm3) is implausible (< 1 mm3).
    assert a[["start", "stop", "status"]].to_numpy().tolist() == [[0, 335, 2]]
    ledger = cohort.ledger[cohort.ledger.table == "measurements"]
    assert len(ledger) == 5  # wide cells with a value: 3 volumes + 2 markers
    assert (ledger.state == "implausible_value").sum() == 1


def test_sources_section_errors(tmp_path) -> None:
    with pytest.raises(SpecError, match=r"\[sources\] needs 'patients' \(a \[sources.patients\] table"):
        read_sources({}, tmp_path)
    with pytest.raises(SpecError, match=r"\[sources.measurements\] needs 'path' \(a file path"):
        read_sources({"patients": {"path": "nope.csv"}, "measurements": {}, "outcomes": {}}, tmp_path)
    with pytest.raises(SpecError, match=r"\[sources.patients\] path = 'nope.csv': file .*nope.csv does not exist"):
        read_sources({t: {"path": "nope.csv"} for t in ("patients", "measurements", "outcomes")}, tmp_path)
    (tmp_path / "p.csv").write_text("patient_id\n")
    with pytest.raises(SpecError, match=r"\[sources.patients\] has unknown key 'layout' = 'wide'; allowed keys: path"):
        read_sources({"patients": {"path": "p.csv", "layout": "wide"}, "measurements": {}, "outcomes": {}}, tmp_path)
    with pytest.raises(SpecError, match=r"\[sources.patients\] columns = 3 is not allowed: expected a table"):
        read_sources({"patients": {"path": "p.csv", "columns": 3}, "measurements": {}, "outcomes": {}}, tmp_path)


def test_build_tables_command(tmp_path, capsys) -> None:
    (tmp_path / "data").mkdir()
    _write_sources(tmp_path / "data")
    config = tmp_path / "analysis.toml"
    config.write_text(SOURCES_TOML + COHORT_TOML + '\n[cohort.kind_map]\ndeath = "competing"\n', encoding="utf-8")
    out = tmp_path / "tables"
    assert (
        main(
            [
                "build-tables",
                str(config),
                "--out",
                str(out),
                "--landmark-every-months",
                "6",
                "--landmark-up-to-years",
                "1",
                "--horizon-years",
                "1",
            ]
        )
        == 0
    )
    printed = capsys.readouterr().out
    assert "measurements: excluded, implausible_value" in printed and "Top exclusion reasons" in printed
    cp = pd.read_parquet(out / "counting_process.parquet")
    assert set(cp.patient_id) == {"A", "B"}
    stack = pd.read_parquet(out / "landmark_stack.parquet")
    # nobody is still followed at one year (A ends on day 335, B on day 184)
    assert sorted(stack.landmark.unique()) == pytest.approx([0, DAYS_PER_YEAR / 2])
    assert main(["build-tables", str(tmp_path / "missing.toml"), "--out", str(out)]) == 2
    assert "does not exist" in capsys.readouterr().err
