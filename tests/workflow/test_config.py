"""The analysis configuration: the demo file is valid, and bad keys or values are rejected by name."""

from __future__ import annotations

import dataclasses
import tomllib
from pathlib import Path

import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st

from riskbench.demo.cohort_spec import demo_cohort_spec
from riskbench.workflow.config import DAYS_PER_YEAR, AnalysisConfig, ConfigError, load_config

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "configs" / "demo.toml"


def demo_dict() -> dict:
    return tomllib.loads(DEMO.read_text())


def parse(data: dict) -> AnalysisConfig:
    return AnalysisConfig.from_dict(data, base_dir=DEMO.parent, source="demo.toml")


@pytest.fixture(autouse=True)
def _demo_files_exist():
    if not (ROOT / "demo_data" / "clean" / "patients.csv").is_file():
        pytest.skip("the committed demo cohort (demo_data/clean) is not in this checkout yet")


def test_demo_configuration_matches_the_demo_cohort_spec():
    """The [cohort] table of configs/demo.toml spells out riskbench.demo.cohort_spec.demo_cohort_spec()."""
    config = load_config(DEMO)
    assert dataclasses.replace(config.cohort, statics=()) == demo_cohort_spec()
    declared = {s.name: s for s in config.cohort.statics}
    assert (declared["pack_years"].plausible_min, declared["pack_years"].plausible_max) == (0.0, 300.0)
    assert declared["sex"].codes == {"M": "male", "F": "female"} and declared["sex"].reference == "female"
    assert config.cohort.covariate_columns == demo_cohort_spec().covariate_columns
    assert config.landmarks.horizon_days == pytest.approx(2 * DAYS_PER_YEAR)
    assert config.comparison == ("imaging_clinical", "clinical")
    assert config.report.small_count_threshold == 10  # common practice
    assert config.path == DEMO.resolve()


def test_unknown_key_is_named_with_its_value_the_allowed_keys_and_a_near_miss():
    data = demo_dict()
    data["validation"]["boostrap_resamples"] = 9
    with pytest.raises(ConfigError) as err:
        parse(data)
    message = str(err.value)
    assert "[validation] has unknown key 'boostrap_resamples' = 9" in message
    assert "did you mean 'bootstrap_resamples'?" in message


def test_wrong_type_names_key_value_and_what_is_allowed():
    data = demo_dict()
    data["validation"]["folds"] = "five"
    with pytest.raises(ConfigError, match=r"\[validation\] folds = 'five' is not allowed: expected an integer from 2"):
        parse(data)


def test_unknown_top_level_key_and_unknown_family_are_rejected():
    data = demo_dict()
    data["sed"] = 1
    with pytest.raises(ConfigError, match="unknown top-level key 'sed'"):
        parse(data)
    data = demo_dict()
    data["models"][0]["family"] = "deep_net"
    with pytest.raises(ConfigError, match=r"family = 'deep_net'.*'landmark_cox', 'time_varying_cox', 'forest'"):
        parse(data)


def test_report_horizon_beyond_the_landmark_horizon_is_rejected():
    data = demo_dict()
    data["report"]["report_horizons"] = ["1 year", "3 years"]
    with pytest.raises(ConfigError, match=r"report_horizons.*no longer than \[landmarks\] prediction_window"):
        parse(data)


def test_comparison_must_name_configured_models_and_cohort_errors_carry_the_file():
    data = demo_dict()
    data["validation"]["reference"] = "genomics"
    with pytest.raises(
        ConfigError,
        match=r"\[validation\] reference = 'genomics' is not allowed: expected one of "
        "the models: clinical, imaging_clinical",
    ):
        parse(data)
    data = demo_dict()
    data["cohort"]["max_cary_days"] = 10
    with pytest.raises(ConfigError, match=r"(?s)demo.toml: .*max_cary_days.*did you mean 'max_carry'"):
        parse(data)


def test_defaults_fill_missing_optional_sections():
    data = demo_dict()
    del data["report"], data["validation"], data["execution"]
    config = parse(data)
    assert config.report.horizons_years == (2.0,)
    assert config.report.horizons_days == (2 * DAYS_PER_YEAR,)
    assert config.validation.seed == config.seed
    assert config.execution.workers == 1 and config.execution.scheduler_address is None
    assert config.comparison == ("imaging_clinical", "clinical")  # last model against the first


@settings(max_examples=25, deadline=None)
@given(key=st.text(alphabet="abcdefghijklmnopqrstuvwxyz_", min_size=1, max_size=12))
def test_any_unknown_report_key_is_rejected(key):
    data = demo_dict()
    from riskbench.workflow.config_schema import ReportSection

    assume(key not in ReportSection.model_fields)
    data["report"][key] = 1
    with pytest.raises(ConfigError, match=f"\\[report\\] has unknown key '{key}' = 1"):
        parse(data)


def test_bad_toml_and_missing_file_are_clear(tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text("seed = = 3\n")
    with pytest.raises(ConfigError, match="not valid TOML"):
        load_config(bad)
    with pytest.raises(ConfigError, match="no such configuration file"):
        load_config(tmp_path / "absent.toml")
