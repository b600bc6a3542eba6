"""The configuration schema: old keys still load (with a message naming the new key), the family registry
mirrors the estimators, list-covariates, the key file's place, and the properties kept for old callers."""

from __future__ import annotations

import dataclasses
import inspect
import tomllib
from pathlib import Path

import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st

from riskbench.models.family_registry import FAMILIES, family, param_problems
from riskbench.time_units import DAYS_PER_YEAR
from riskbench.workflow.cli import main
from riskbench.workflow.config import AnalysisConfig, ConfigError, load_config
from riskbench.workflow.config_schema import SECTIONS

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "configs" / "demo.toml"
PREVIOUS = Path(__file__).parent / "configs" / "demo_previous_release.toml"


@pytest.fixture(autouse=True)
def _demo_files_exist():
    if not (ROOT / "demo_data" / "clean" / "patients.csv").is_file():
        pytest.skip("the committed demo cohort (demo_data/clean) is not in this checkout yet")


def test_the_previous_spelling_still_loads_and_means_the_same():
    old, new = load_config(PREVIOUS), load_config(DEMO)
    assert old.landmarks == new.landmarks
    assert old.landmarks.landmarks_days == pytest.approx((0.0, 182.625, 365.25, 547.875, 730.5))
    assert old.report.horizons_days == new.report.horizons_days
    assert [dataclasses.astuple(m) for m in old.models] == [dataclasses.astuple(m) for m in new.models]
    assert old.comparison == new.comparison == ("imaging_clinical", "clinical")
    assert old.validation.bootstrap_resamples == new.validation.bootstrap_resamples == 20
    assert old.execution.workers == new.execution.workers == 2
    assert old.cohort.max_carry_days == new.cohort.max_carry_days == 1095.0
    assert old.cohort.variable("nodule_volume").slope_window_days == DAYS_PER_YEAR
    assert old.validation.seed == 7  # the old key is honoured for this release
    assert new.validation.seed == new.seed  # the new spelling derives it from the one seed


@pytest.mark.parametrize(
    "old, new",
    [
        (
            "[landmarks] landmarks_years",
            "[landmarks] landmarks = ['0 days', '0.5 years', '1 year', '1.5 years', '2 years']",
        ),
        ("[landmarks] horizon_years", "prediction_window = '2 years'"),
        ("[validation] bootstrap_reps", "bootstrap_resamples = 20"),
        ("[validation] compare", "candidate = 'imaging_clinical' and reference = 'clinical'"),
        ("[validation] n_jobs", "[execution] workers = 2"),
        ("[validation] seed", "top-level seed"),
        ("[report] horizons_years", "report_horizons = ['1 year', '2 years']"),
        ("[cohort] max_carry_days", "max_carry = '1095 days'"),
        ("[cohort] lookback_days", "lookback = '180 days'"),
        ("[cohort.variables.nodule_volume] slope_window_days", "slope_window = '1 year'"),
    ],
)
def test_every_old_key_gets_a_message_naming_its_new_key(old, new):
    messages = load_config(PREVIOUS).deprecations
    assert any(m.startswith(old) and "is deprecated" in m and new in m for m in messages), messages


def test_check_config_prints_the_deprecations(capsys):
    assert main(["check-config", str(PREVIOUS), "--no-data"]) == 0
    out = capsys.readouterr().out
    assert "deprecated: [validation] bootstrap_reps = 20 is deprecated; write [validation] bootstrap_resamples" in out
    assert out.strip().endswith("models: clinical (landmark_cox), imaging_clinical (landmark_cox)")


def test_old_family_name_cox_becomes_time_varying_cox(tmp_path):
    data = tomllib.loads(DEMO.read_text())
    data["models"][0]["family"] = "cox"
    data["models"][0]["params"] = {"ties": "breslow"}
    config = AnalysisConfig.from_dict(data, base_dir=DEMO.parent)
    assert config.models[0].family == "time_varying_cox"
    assert any("family = 'cox' is deprecated; write family = 'time_varying_cox'" in m for m in config.deprecations)


def test_old_and_new_key_together_is_refused():
    data = tomllib.loads(DEMO.read_text())
    data["validation"]["bootstrap_reps"] = 5
    with pytest.raises(ConfigError, match=r"\[validation\] has unknown key 'bootstrap_reps' = 5"):
        AnalysisConfig.from_dict(data, base_dir=DEMO.parent)


def test_properties_for_old_callers():
    config = load_config(PREVIOUS)
    v = config.validation
    assert (v.bootstrap_reps, v.n_jobs, v.dask_address, v.compare) == (20, 2, None, ("imaging_clinical", "clinical"))
    assert config.landmarks.landmarks_years == pytest.approx((0.0, 0.5, 1.0, 1.5, 2.0))
    assert config.landmarks.horizon_years == pytest.approx(2.0)
    assert config.report.horizons_years == pytest.approx((1.0, 2.0))


@pytest.mark.parametrize("name", sorted(FAMILIES))
def test_the_registry_mirrors_each_estimator_constructor(name):
    """Every registered parameter is a keyword of the estimator with the same default, and vice versa."""
    fam = family(name)
    signature = inspect.signature(fam.estimator_class().__init__)
    keywords = {k: p.default for k, p in signature.parameters.items() if k not in ("self", "covariates")}
    assert set(keywords) == {p.name for p in fam.params} | set(fam.reserved)
    for p in fam.params:
        assert keywords[p.name] == p.default, p.name
        assert p.check(p.default) is None, p.name  # every default passes its own check


def test_family_parameter_checks_name_types_choices_and_defaults():
    assert param_problems("forest", {"n_estimators": 50, "max_features": 0.5, "max_depth": None}) == []
    (problem,) = param_problems("forest", {"max_features": "all"})
    assert problem[0] == "max_features" and "one of 'sqrt', 'log2' or a number > 0" in problem[2]
    assert param_problems("landmark_cox", {"competing": False, "baseline": "smooth"}) == []
    (problem,) = param_problems("landmark_cox", {"competing": "yes"})
    assert problem[0] == "competing" and "true or false" in problem[2] and "default True" in problem[2]
    (problem,) = param_problems("cox", {"penalty": -1})
    assert "a number >= 0" in problem[2] and "default 0.0" in problem[2]


def test_list_covariates_prints_columns_labels_and_users(capsys):
    assert main(["list-covariates", str(DEMO)]) == 0
    lines = capsys.readouterr().out.splitlines()
    assert lines[0].split() == ["column", "label", "(unit)", "used", "by", "models"]
    rows = {line.split()[0]: line for line in lines[1:]}
    config = load_config(DEMO)
    assert list(rows) == list(config.cohort.covariate_columns)
    assert rows["log_nodule_volume"].rstrip().endswith("imaging_clinical")
    assert "(log mm3)" in rows["log_nodule_volume"]
    assert "Smoking (pack-years)" in rows["pack_years"] and rows["pack_years"].rstrip().endswith(
        "clinical, imaging_clinical"
    )
    assert rows["n_exams"].rstrip().endswith("-")


def test_the_key_file_defaults_beside_the_configuration(tmp_path):
    config = load_config(DEMO)
    assert config.privacy.key_file == DEMO.parent.resolve() / "demo.key"
    data = tomllib.loads(DEMO.read_text())
    data["privacy"] = {"key_file": "keys/study.key"}
    config = AnalysisConfig.from_dict(data, base_dir=DEMO.parent)
    assert config.privacy.key_file == DEMO.parent.resolve() / "keys" / "study.key"


def test_scheduler_and_tls_paths_resolve_against_the_configuration(tmp_path):
    for name in ("ca.pem", "cert.pem", "key.pem"):
        (tmp_path / name).write_text("-----BEGIN CERTIFICATE-----\n")
    data = tomllib.loads(DEMO.read_text())
    for table in data["sources"].values():
        table["path"] = str((DEMO.parent / table["path"]).resolve())
    data["execution"] = {
        "scheduler_address": "tls://10.1.2.3:8786",
        "allow_remote_scheduler": True,
        "tls_ca_file": "ca.pem",
        "tls_client_cert_file": "cert.pem",
        "tls_client_key_file": "key.pem",
    }
    config = AnalysisConfig.from_dict(data, base_dir=tmp_path)
    assert config.execution.tls_ca_file == tmp_path.resolve() / "ca.pem"
    assert config.validation.dask_address == "tls://10.1.2.3:8786"


@settings(max_examples=60, deadline=None)
@given(data=st.data())
def test_a_key_missing_one_letter_is_refused_with_a_suggestion_from_its_table(data):
    """Property: in every workflow table, a key with one letter dropped is named, with a key of that table
    suggested (difflib ratio of a one-letter drop is at least 2(n-1)/(2n-1) >= 0.6 for n >= 2)."""
    section = data.draw(st.sampled_from(sorted(SECTIONS)))
    fields = sorted(SECTIONS[section].model_fields)
    key = data.draw(st.sampled_from(fields))
    i = data.draw(st.integers(0, len(key) - 1))
    typo = key[:i] + key[i + 1 :]
    assume(typo not in fields and typo not in ("n_jobs", "dask_address", "compare", "bootstrap_reps"))
    doc = tomllib.loads(DEMO.read_text())
    doc.setdefault(section, {})[typo] = 1
    with pytest.raises(ConfigError) as err:
        AnalysisConfig.from_dict(doc, base_dir=DEMO.parent)
    (problem,) = [p for p in err.value.problems if typo in p.message]
    assert problem.message.startswith(f"[{section}] has unknown key {typo!r} = 1; allowed keys: ")
    suggested = problem.message.rsplit("did you mean ", 1)[1].strip("'?)")
    assert suggested in fields


def test_model_specs_accept_the_old_family_name():
    from riskbench.validation.model_specs import ModelSpec, build_estimator

    spec = ModelSpec("m", ["x"], family="cox")
    assert spec.family == "time_varying_cox"
    assert type(build_estimator(spec)).__name__ == "CoxModel"
