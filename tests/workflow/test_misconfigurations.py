"""A catalogue of misconfigurations: each is rejected by the complete check before anything runs.

Every case is checked twice: through the Python API (``load_config(path, check_data=True)`` raises a
ConfigError whose message names the key) and through the command line (``riskbench check-config`` exits
with status 2 and prints the same key words). The data are a small invented cohort written by the test:
140 patients seen at entry and on days 61, 183, 365 and 548, followed for 900 to 2985 days; every
other patient has the outcome (70 events, enough for 10 per covariate).
"""

from __future__ import annotations

import copy
import json
import math
import tomllib
from collections.abc import Callable
from datetime import date, timedelta
from pathlib import Path

import pytest

from riskbench.workflow.cli import main
from riskbench.workflow.config import ConfigError, load_config

N_PATIENTS = 140
VISIT_DAYS = (0, 61, 183, 365, 548)
ENTRY = date(2019, 1, 14)

BASE_TOML = """
seed = 11

[sources.patients]
path = "data/patients.csv"
[sources.measurements]
path = "data/measurements.csv"
[sources.outcomes]
path = "data/outcomes.csv"

[cohort]
max_carry = "3 years"
lookback = "180 days"
static = ["sex_male", "pack_years", "age_at_entry"]
exam_variables = ["nodule_volume"]

[cohort.variables.nodule_volume]
unit = "mm3"
range = [1.0, 5.0e5]
transform = "log"
change = true

[cohort.variables.suspicion_score]
range = [0.0, 1.0]

[cohort.variables.serum_marker]
unit = "ng/mL"
range = [0.0, 1000.0]

[landmarks]
landmarks = ["0 years", "4 months", "1 year"]
prediction_window = "1 year"

[[models]]
name = "clinical"
covariates = ["age_at_entry", "pack_years", "sex_male", "serum_marker"]

[[models]]
name = "imaging_clinical"
covariates = ["age_at_entry", "pack_years", "sex_male", "serum_marker", "log_nodule_volume", "suspicion_score"]

[validation]
folds = 3
bootstrap_resamples = 10
candidate = "imaging_clinical"
reference = "clinical"

[report]
report_horizons = ["6 months", "1 year"]
"""


def _entry(i: int) -> date:
    return ENTRY + timedelta(days=7 * i)


def write_data(
    folder: Path,
    *,
    patient_dates: Callable[[date], str] = date.isoformat,
    kinds: tuple[str, ...] = ("end_of_follow_up", "outcome"),
) -> None:
    """The invented cohort: patients, long measurements and outcomes as CSV files."""
    folder.mkdir(parents=True, exist_ok=True)
    lines = ["patient_id,entry_date,birth_date,sex,pack_years"]
    for i in range(N_PATIENTS):
        lines.append(
            f"Q{i:03d},{patient_dates(_entry(i))},{patient_dates(date(1950 + i % 20, 1 + i % 12, 3))},"
            f"{'MF'[i % 2]},{(i * 7) % 60}"
        )
    (folder / "patients.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    lines = ["patient_id,date,variable,value,unit"]
    for i in range(N_PATIENTS):
        for k, day in enumerate(VISIT_DAYS):
            when = (_entry(i) + timedelta(days=day)).isoformat()
            lines += [
                f"Q{i:03d},{when},nodule_volume,{100 + 5 * k + i},mm3",
                f"Q{i:03d},{when},suspicion_score,{(i % 10) / 10},1",
                f"Q{i:03d},{when},serum_marker,{10 + i % 7},ng/mL",
            ]
    (folder / "measurements.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    lines = ["patient_id,date,kind"]
    for i in range(N_PATIENTS):
        lines.append(f"Q{i:03d},{(_entry(i) + timedelta(days=900 + 15 * i)).isoformat()},{kinds[i % len(kinds)]}")
    (folder / "outcomes.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")


INLINE = ("params", "columns", "conversions", "codes", "kind_map")


def _value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float) and not math.isfinite(v):
        return "nan" if math.isnan(v) else ("inf" if v > 0 else "-inf")
    if isinstance(v, (int, float)):
        return repr(v)
    if isinstance(v, str):
        return '"' + v.replace("\\", "\\\\").replace('"', '\\"').replace("\n", "\\n") + '"'
    if isinstance(v, list):
        return "[" + ", ".join(_value(x) for x in v) + "]"
    return "{ " + ", ".join(f'"{k}" = {_value(x)}' for k, x in v.items()) + " }"


def to_toml(data: dict, prefix: str = "") -> str:
    """A small TOML writer for these tests: tables, arrays of tables (models), inline tables (params...)."""
    lines = [f"[{prefix}]"] if prefix else []
    later: list[str] = []
    for key, v in data.items():
        name = f'{prefix}."{key}"' if prefix else f'"{key}"'
        if isinstance(v, dict) and key not in INLINE:
            later.append(to_toml(v, name))
        elif isinstance(v, list) and v and all(isinstance(x, dict) for x in v):
            later += [f"[[{name}]]\n" + "".join(f'"{k}" = {_value(x)}\n' for k, x in item.items()) for item in v]
        else:
            lines.append(f'"{key}" = {_value(v)}')
    return "\n".join(lines) + "\n" + "".join(later)


@pytest.fixture(scope="module")
def study(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("study")
    write_data(folder / "data")
    return folder


def base() -> dict:
    return tomllib.loads(BASE_TOML)


def write_config(folder: Path, data: dict, name: str = "analysis.toml") -> Path:
    path = folder / name
    path.write_text(to_toml(data), encoding="utf-8")
    assert json.dumps(tomllib.loads(path.read_text()), sort_keys=True) == json.dumps(data, sort_keys=True)
    return path


def test_the_base_configuration_is_valid(study):
    config = load_config(write_config(study, base()), check_data=True)
    assert config.comparison == ("imaging_clinical", "clinical")
    assert config.warnings == () and config.deprecations == ()


# --------------------------------------------------------------------------------------------------
# The catalogue: (case id, change to the configuration (and data), key words every message must contain)


def _add(path: list, value):
    def change(d: dict, folder: Path) -> None:
        target = d
        for p in path[:-1]:
            target = target.setdefault(p, {}) if isinstance(p, str) else target[p]
        target[path[-1]] = value

    return change


def _delete(path: list):
    def change(d: dict, folder: Path) -> None:
        target = d
        for p in path[:-1]:
            target = target[p]
        del target[path[-1]]

    return change


def _model(index: int, **fields):
    def change(d: dict, folder: Path) -> None:
        d["models"][index].update(fields)

    return change


def _both(*changes):
    def change(d: dict, folder: Path) -> None:
        for c in changes:
            c(d, folder)

    return change


def _day_first(d: dict, folder: Path) -> None:
    write_data(folder / "dayfirst", patient_dates=lambda x: x.strftime("%d/%m/%Y"))
    d["sources"]["patients"]["path"] = "dayfirst/patients.csv"


def _ambiguous(d: dict, folder: Path) -> None:
    write_data(folder / "ambiguous", patient_dates=lambda x: x.replace(day=min(x.day, 12)).strftime("%d/%m/%Y"))
    d["sources"]["patients"]["path"] = "ambiguous/patients.csv"


def _latin1(d: dict, folder: Path) -> None:
    (folder / "latin").mkdir(exist_ok=True)
    text = (folder / "data" / "patients.csv").read_text().replace("sex,pack_years", "sex,pack_years,site")
    lines = text.splitlines()
    lines = [lines[0]] + [line + ",Malmö" for line in lines[1:]]
    (folder / "latin" / "patients.csv").write_bytes(("\n".join(lines) + "\n").encode("latin-1"))
    d["sources"]["patients"]["path"] = "latin/patients.csv"


def _renamed_entry(d: dict, folder: Path) -> None:
    (folder / "renamed").mkdir(exist_ok=True)
    text = (folder / "data" / "patients.csv").read_text().replace("entry_date", "first_visit", 1)
    (folder / "renamed" / "patients.csv").write_text(text)
    d["sources"]["patients"]["path"] = "renamed/patients.csv"


def _died(d: dict, folder: Path) -> None:
    write_data(folder / "died", kinds=("end_of_follow_up", "died"))
    d["sources"]["outcomes"]["path"] = "died/outcomes.csv"


def _sex_zero_one(d: dict, folder: Path) -> None:
    (folder / "zero_one").mkdir(exist_ok=True)
    lines = (folder / "data" / "patients.csv").read_text().splitlines()
    lines = [lines[0]] + [line.replace(",M,", ",1,").replace(",F,", ",0,") for line in lines[1:]]
    (folder / "zero_one" / "patients.csv").write_text("\n".join(lines) + "\n")
    d["sources"]["patients"]["path"] = "zero_one/patients.csv"


def _decimal_ids(d: dict, folder: Path) -> None:
    """Measurement ids written as decimals ('Q001' stays, but numeric ids 1.0 vs 1): here every id of the
    measurements file gets a '.0', as a spreadsheet or a float column writes it."""
    (folder / "decimal").mkdir(exist_ok=True)
    for name in ("patients", "outcomes"):
        text = (folder / "data" / f"{name}.csv").read_text().replace("Q", "")
        (folder / "decimal" / f"{name}.csv").write_text(text)
    lines = (folder / "data" / "measurements.csv").read_text().replace("Q", "").splitlines()
    lines = [lines[0]] + [line.replace(",", ".0,", 1) for line in lines[1:]]
    (folder / "decimal" / "measurements.csv").write_text("\n".join(lines) + "\n")
    for name in ("patients", "measurements", "outcomes"):
        d["sources"][name]["path"] = f"decimal/{name}.csv"


def _run_folder(d: dict, folder: Path) -> None:
    (folder / "old_run").mkdir(exist_ok=True)
    (folder / "old_run" / "manifest.json").write_text("{}")
    d["privacy"] = {"key_file": "old_run/pseudonyms.key"}


CASES: list[tuple[str, Callable, tuple[str, ...]]] = [
    (
        "misspelled covariate",
        _model(1, covariates=["age_at_entry", "log_nodule_volum"]),
        (
            "[[models]] #2 (imaging_clinical) covariates = 'log_nodule_volum'",
            "did you mean 'log_nodule_volume'?",
            "list-covariates",
        ),
    ),
    (
        "unknown forest parameter n_trees",
        _model(0, family="forest", params={"n_trees": 100}),
        (
            "[[models]] #1 (clinical) params.n_trees = 100",
            "not a parameter of family 'forest'",
            "n_estimators (default 200)",
        ),
    ),
    (
        "landmark_effects spline",
        _model(0, params={"landmark_effects": "spline"}),
        ("params.landmark_effects = 'spline'", "'none', 'linear', 'quadratic'", "default 'linear'"),
    ),
    (
        "forest parameter of the wrong type",
        _model(0, family="forest", params={"min_samples_leaf": 2.5}),
        ("params.min_samples_leaf = 2.5", "an integer >= 1", "default 15"),
    ),
    (
        "parameter the run sets itself",
        _model(0, family="forest", params={"random_state": 3}),
        ("params.random_state = 3", "set by the run from the configuration's seed"),
    ),
    (
        "missing static list (no demo default)",
        _delete(["cohort", "static"]),
        ("covariates = 'pack_years'", "[cohort] static lists none"),
    ),
    (
        "one bootstrap resample",
        _add(["validation", "bootstrap_resamples"], 1),
        ("[validation] bootstrap_resamples = 1", "at least 2 resamples"),
    ),
    (
        "optimism without resamples",
        _both(_add(["validation", "bootstrap_resamples"], 0), _add(["validation", "optimism"], True)),
        ("[validation] optimism = True", "bootstrap_resamples >= 2"),
    ),
    ("one fold", _add(["validation", "folds"], 1), ("[validation] folds = 1", "an integer from 2")),
    (
        "more folds than outcome events",
        _add(["validation", "folds"], 80),
        ("[validation] folds = 80", "at most the number of patients with an outcome event"),
    ),
    (
        "range with nan",
        _add(["cohort", "variables", "suspicion_score", "range"], [float("nan"), 1.0]),
        ("[cohort.variables.suspicion_score] range = [nan, 1.0]", "finite numbers"),
    ),
    (
        "range upside down",
        _add(["cohort", "variables", "suspicion_score", "range"], [1.0, 0.0]),
        ("[cohort.variables.suspicion_score] range = [1.0, 0.0]", "min <= max"),
    ),
    (
        "infinite conversion factor",
        _add(["cohort", "variables", "nodule_volume", "conversions"], {"cm3": math.inf}),
        ("[cohort.variables.nodule_volume] conversions", "finite"),
    ),
    (
        "landmark beyond all follow-up",
        _add(["landmarks", "landmarks"], ["0 years", "4 months", "10 years"]),
        ("[landmarks] landmarks = '10 years'", "no patient is still followed"),
    ),
    (
        "landmark with too few at risk",
        _add(["landmarks", "landmarks"], ["0 years", "4 months", "2900 days"]),
        ("[landmarks] landmarks = '2900 days'", "fewer than 10 patients are still followed"),
    ),
    (
        "day-first dates without date_format",
        _day_first,
        ("[sources.patients] date_format", "do not parse", "'%d/%m/%Y'"),
    ),
    (
        "dates ambiguous day-first or month-first",
        _ambiguous,
        ("[sources.patients] date_format", "both day-first", "month-first"),
    ),
    (
        "static not in the patients file",
        _add(["cohort", "static"], ["sex_male", "pack_years", "age_at_entry", "bmi"]),
        ("[cohort] static = 'bmi'", "the file's columns: patient_id, entry_date"),
    ),
    (
        "required column missing",
        _renamed_entry,
        ("[sources.patients]", "no column 'entry_date'", "columns = { entry_date", "did you mean"),
    ),
    ("file in another encoding", _latin1, ("[sources.patients] encoding = 'utf-8'", "latin-1")),
    (
        "sex coded 0/1 without declared codes",
        _sex_zero_one,
        ("[cohort.statics.sex] codes", "column 'sex'", "codes outside them", "140 of 140 sampled values"),
    ),
    ("unknown outcome kind", _died, ("[cohort] kind_map", "'died'", '"competing"')),
    (
        "unsafe model name",
        _model(0, name="x/../../escaped"),
        ("[[models]] #1 (x/../../escaped) name = 'x/../../escaped'", "letters, digits and underscores"),
    ),
    (
        "unsafe variable name",
        _add(["cohort", "variables", "nodule volume"], {}),
        ("[cohort.variables] the variable name 'nodule volume' is not allowed", "letters, digits and underscores"),
    ),
    (
        "unsafe level name",
        _add(["cohort", "statics"], {"sex": {"codes": {"M": "male!", "F": "female"}, "reference": "female"}}),
        ("[cohort.statics.sex] codes", "letters, digits and underscores"),
    ),
    (
        "landmark effects need more landmarks",
        _both(
            _add(["landmarks", "landmarks"], ["0 years", "1 year"]), _model(0, params={"landmark_effects": "quadratic"})
        ),
        ("params.landmark_effects = 'quadratic'", "at least 3 distinct landmarks"),
    ),
    (
        "remote scheduler without opt-in",
        _add(["execution"], {"scheduler_address": "tls://10.1.2.3:8786"}),
        ("[execution] scheduler_address", "allow_remote_scheduler = true"),
    ),
    (
        "remote scheduler with missing TLS files",
        _add(
            ["execution"],
            {
                "scheduler_address": "tls://10.1.2.3:8786",
                "allow_remote_scheduler": True,
                "tls_ca_file": "ca.pem",
                "tls_client_cert_file": "c.pem",
                "tls_client_key_file": "k.pem",
            },
        ),
        ("[execution]", "tls_ca_file"),
    ),
    (
        "report horizon beyond the prediction window",
        _add(["report", "report_horizons"], ["1 year", "2 years"]),
        ("[report] report_horizons", "no longer than [landmarks] prediction_window = '1 year'"),
    ),
    (
        "candidate equals reference",
        _add(["validation", "reference"], "imaging_clinical"),
        ("[validation] reference = 'imaging_clinical'", "other than the candidate"),
    ),
    (
        "unknown candidate",
        _add(["validation", "candidate"], "imaging"),
        ("[validation] candidate = 'imaging'", "did you mean 'imaging_clinical'?"),
    ),
    ("key file inside a run folder", _run_folder, ("[privacy] key_file", "inside the run folder")),
    (
        "duration without a unit",
        _add(["cohort", "max_carry"], "3"),
        ("[cohort] max_carry = '3'", "a duration with a unit"),
    ),
    (
        "landmarks as bare numbers under the new key",
        _add(["landmarks", "landmarks"], [0, 0.5]),
        ("[landmarks] landmarks = [0, 0.5]", "a duration with a unit"),
    ),
    (
        "misspelled top-level table",
        lambda d, f: d.update(valdation={"folds": 3}),
        ("unknown top-level key 'valdation'", "did you mean 'validation'?"),
    ),
    (
        "unknown family",
        _model(0, family="cox_ph"),
        ("[[models]] #1 (clinical) family = 'cox_ph'", "'time_varying_cox'"),
    ),
    (
        "misspelled key",
        _add(["validation", "bootstrap_resample"], 5),
        ("[validation] has unknown key 'bootstrap_resample'", "did you mean 'bootstrap_resamples'?"),
    ),
    (
        "unknown exam variable",
        _add(["cohort", "exam_variables"], ["ct_scan"]),
        ("[cohort] exam_variables = 'ct_scan'", "[cohort.variables.*]"),
    ),
    ("one imputation", _add(["missing_data"], {"imputations": 1}), ("[missing_data] imputations = 1", "from 2")),
    (
        "unknown per-model missing-data method",
        _model(0, missing_data="mean_imputation"),
        ("missing_data = 'mean_imputation'", "'multiple_imputation'"),
    ),
    (
        "triage target above 1",
        _add(["report", "triage_target_npv"], 1.5),
        ("[report] triage_target_npv = 1.5", "a number from 0.5 to 1"),
    ),
    (
        "negative lowest decision threshold",
        _add(["report", "decision_threshold_min"], -0.01),
        ("[report] decision_threshold_min = -0.01", "a number from 0 up to"),
    ),
    (
        "decision curves from above where they stop",
        _both(_add(["report", "decision_threshold_min"], 0.3), _add(["report", "decision_threshold_max"], 0.2)),
        ("[report] decision_threshold_min = 0.3", "below decision_threshold_max = 0.2"),
    ),
    (
        "stratifying on a column that does not exist",
        _model(0, family="time_varying_cox", params={"strata": "site"}),
        ("params.strata = 'site'", "a column of the counting-process table"),
    ),
    (
        "two models with one name",
        _model(1, name="clinical"),
        ("[[models]] name = 'clinical'", "not used by another model"),
    ),
    (
        "label with a line break",
        _add(["cohort", "variables", "serum_marker", "label"], "Serum\nmarker"),
        ("[cohort.variables.serum_marker] label", "control characters"),
    ),
    (
        "variable absent from the data with a near miss",
        _add(["cohort", "variables", "serum_markr"], {}),
        ("[cohort.variables.serum_markr]", "did you mean 'serum_marker'?"),
    ),
    ("integer written as text", _add(["validation", "folds"], "5"), ("[validation] folds = '5'", "an integer from 2")),
    (
        "hazard-ratio step of zero",
        _add(["report", "effect_units"], {"age_at_entry": 0}),
        ("[report] effect_units", "expected steps > 0", "'iqr' or 'sd'"),
    ),
    (
        "hazard-ratio step for no covariate",
        _add(["report", "effect_units"], {"age_at_entr": 10}),
        ("[report] effect_units names 'age_at_entr'", "did you mean 'age_at_entry'?"),
    ),
    ("model name with a final line break", _model(0, name="clinical\n"), ("[[models]] #1", "name", "letters, digits")),
    (
        "no time-varying variable",
        lambda d, f: (
            d["cohort"].pop("variables"),
            d["cohort"].pop("exam_variables"),
            d["models"][1].update(covariates=["age_at_entry"]),
        ),
        ("[cohort.variables] is empty", "at least one variable"),
    ),
    (
        "patient ids written as decimals in the measurements file",
        _decimal_ids,
        ("[sources.measurements] columns", "not in the patients file", "written as decimals"),
    ),
    (
        "outcomes keyed by the wrong column",
        _add(["sources", "outcomes", "columns"], {"patient_id": "kind", "kind": "patient_id"}),
        ("[sources.outcomes] columns", "not in the patients file"),
    ),
]


@pytest.mark.parametrize("change, words", [(c, w) for _, c, w in CASES], ids=[i for i, _, _ in CASES])
def test_misconfiguration_is_rejected_naming_its_key(study, tmp_path, capsys, change, words):
    data = copy.deepcopy(base())
    change(data, study)
    path = write_config(study, data, name=f"case_{tmp_path.name}.toml")
    with pytest.raises(ConfigError) as err:
        load_config(path, check_data=True)
    message = str(err.value)
    for word in words:
        assert word in message, f"{word!r} not in {message!r}"
    assert err.value.problems and all(p.is_error for p in err.value.problems)

    assert main(["check-config", str(path)]) == 2
    printed = capsys.readouterr().err
    for word in words:
        assert word in printed


def test_the_catalogue_is_large_and_every_case_distinct():
    assert len(CASES) >= 25
    assert len({i for i, _, _ in CASES}) == len(CASES)


def test_every_problem_is_reported_at_once(study):
    data = base()
    data["validation"]["folds"] = 1
    data["report"]["triage_target_npv"] = 2.0
    data["cohort"]["same_day_rule"] = "median"
    data["models"][0]["name"] = "bad name"
    with pytest.raises(ConfigError) as err:
        load_config(write_config(study, data, "many.toml"))
    keys = {p.key for p in err.value.problems}
    assert {"[validation] folds", "[report] triage_target_npv", "[cohort] same_day_rule"} <= keys
    assert any(k.endswith("name") for k in keys)
    assert str(err.value).count("\n") == len(err.value.problems)  # a header line, then one line each


def test_covariates_and_parameters_are_checked_even_when_another_section_fails(study):
    data = base()
    data["validation"]["folds"] = 1
    data["models"][1]["covariates"].append("log_nodule_volum")
    data["models"][0]["params"] = {"landmark_effects": "spline"}
    with pytest.raises(ConfigError) as err:
        load_config(write_config(study, data, "partial.toml"))
    keys = {p.key for p in err.value.problems}
    assert keys == {
        "[validation] folds",
        "[[models]] #2 (imaging_clinical) covariates",
        "[[models]] #1 (clinical) params.landmark_effects",
    }


# --------------------------------------------------------------------------------------------------
# Warnings: the run goes ahead, check-config says what is doubtful


def test_carry_forward_limit_just_before_a_landmark_warns(study, capsys):
    data = base()
    data["cohort"]["max_carry"] = "1095 days"
    data["landmarks"] = {"landmarks": ["0 years", "1 year", "3 years"], "prediction_window": "1 year"}
    data["report"]["report_horizons"] = ["1 year"]
    data["models"][0]["params"] = data["models"][1]["params"] = {"landmark_effects": "linear"}
    data["validation"]["folds"] = 2
    path = write_config(study, data, "carry.toml")
    config = load_config(path, check_data=True)
    assert any(
        "[cohort] max_carry = '1095 days' ends 0.75 days before the landmark '3 years'" in w for w in config.warnings
    )
    assert main(["check-config", str(path)]) == 0
    assert "warning: [cohort] max_carry" in capsys.readouterr().out
    data["cohort"]["max_carry"] = "3 years"  # 1095.75 days: the values of entry reach the landmark
    assert load_config(write_config(study, data, "carry_ok.toml"), check_data=True).warnings == ()


def test_landmark_just_before_a_common_visit_day_warns(study):
    data = base()
    data["landmarks"]["landmarks"] = ["0 years", "2 months", "6 months"]  # 60.875 and 182.625 days
    config = load_config(write_config(study, data, "visits.toml"), check_data=True)
    text = "\n".join(config.warnings)
    assert "'2 months' (60.875 days) falls 0.125 days before day 61" in text
    assert "(182.625 days) falls 0.375 days before day 183" in text
    assert 'write "183 days"' in text


def test_too_few_events_per_covariate_warns_and_no_event_is_an_error(study, tmp_path):
    """About 10 outcome events per covariate is common practice (for Cox models: Peduzzi et al. 1995, J Clin
    Epidemiol 48:1503-1510, from memory); a cohort without any outcome event has nothing to predict."""
    write_data(tmp_path / "few", kinds=("end_of_follow_up",) * 6 + ("outcome",))  # 20 events
    data = base()
    for table in ("patients", "measurements", "outcomes"):
        data["sources"][table]["path"] = str(tmp_path / "few" / f"{table}.csv")
    config = load_config(write_config(tmp_path, data), check_data=True)
    assert any(
        w.startswith(
            "[[models]] #2 (imaging_clinical) covariates = '6 covariates' is doubtful: about 10 "
            "outcome events per covariate"
        )
        for w in config.warnings
    )
    write_data(tmp_path / "none", kinds=("end_of_follow_up",))
    for table in ("patients", "measurements", "outcomes"):
        data["sources"][table]["path"] = str(tmp_path / "none" / f"{table}.csv")
    with pytest.raises(
        ConfigError,
        match=r"\[cohort\] kind_map = \{\} is not allowed: no patient of .* has an "
        "outcome row of kind 'outcome'",
    ):
        load_config(write_config(tmp_path, data), check_data=True)


def _warnings_on(data_dir: Path, tmp_path: Path) -> tuple[str, ...]:
    """The warnings of the base configuration pointed at the three files of ``data_dir``."""
    data = base()
    for table in ("patients", "measurements", "outcomes"):
        data["sources"][table]["path"] = str(data_dir / f"{table}.csv")
    return load_config(write_config(tmp_path, data), check_data=True).warnings


def test_rare_data_defects_are_warnings_with_counts(study, tmp_path):
    """A few unmapped outcome kinds, implausible statics or unknown units: the ledger will exclude them."""
    data_dir = tmp_path / "rare"
    write_data(data_dir)
    outcomes = (data_dir / "outcomes.csv").read_text().splitlines()
    outcomes[5] = outcomes[5].rsplit(",", 1)[0] + ",transferred"  # 1 of 140 rows (0.7%)
    (data_dir / "outcomes.csv").write_text("\n".join(outcomes) + "\n")
    patients = (data_dir / "patients.csv").read_text().splitlines()
    patients[3] = patients[3].rsplit(",", 1)[0] + ",-4"  # a negative pack-years value
    (data_dir / "patients.csv").write_text("\n".join(patients) + "\n")
    with (data_dir / "measurements.csv").open("a") as fh:
        fh.write(f"Q001,{_entry(1).isoformat()},nodule_volume,0.2,cm³\n")
    text = "\n".join(_warnings_on(data_dir, tmp_path))
    assert "[cohort] kind_map = {} is doubtful: the outcome kind 'transferred' (0.7% of the sampled rows" in text
    assert (
        "[cohort.statics.pack_years] range (at least 0): column 'pack_years'" in text
        and "1 of 140 sampled values" in text
    )
    assert "[cohort.variables.nodule_volume] conversions: 1 unit(s)" in text and "1 of 701 sampled values" in text


def test_a_few_unknown_patient_ids_are_a_warning(study, tmp_path):
    """The ledger excludes rows of unknown patients; a few of them should not stop the run."""
    data_dir = tmp_path / "unknown"
    write_data(data_dir)
    with (data_dir / "measurements.csv").open("a") as fh:
        fh.write(f"Z999,{_entry(1).isoformat()},serum_marker,12,ng/mL\n")
    text = "\n".join(_warnings_on(data_dir, tmp_path))
    assert "[sources.measurements] columns: 1 of 2101 sampled rows" in text
    assert "ledger: unknown_patient" in text and "Z999" not in text


def test_the_demo_carry_forward_limit_is_clear_of_its_landmarks():
    """configs/demo.toml keeps max_carry = "1095 days" (the demo's rule); its landmarks end at 2 years."""
    demo = Path(__file__).resolve().parents[2] / "configs" / "demo.toml"
    if not (demo.parent.parent / "demo_data" / "clean" / "patients.csv").is_file():
        pytest.skip("the demo cohort is not in this checkout")
    config = load_config(demo, check_data=True)
    assert config.cohort.max_carry_days == 1095.0
    assert config.warnings == () and config.deprecations == ()


def test_parquet_sources_with_typed_dates_and_wide_measurements(study, tmp_path):
    """Typed (Parquet) date columns need no date_format; a wide table needs a column per variable."""
    import pandas as pd

    folder = tmp_path / "typed"
    folder.mkdir()
    patients = pd.read_csv(study / "data" / "patients.csv", parse_dates=["entry_date", "birth_date"])
    outcomes = pd.read_csv(study / "data" / "outcomes.csv", parse_dates=["date"])
    long = pd.read_csv(study / "data" / "measurements.csv")
    wide = long.pivot_table(index=["patient_id", "date"], columns="variable", values="value").reset_index()
    patients.to_parquet(folder / "patients.parquet")
    outcomes.to_parquet(folder / "outcomes.parquet")
    wide.to_csv(folder / "wide.csv", index=False)
    data = base()
    data["sources"] = {
        "date_format": "%d/%m/%Y",  # for text columns only; the Parquet dates are typed
        "patients": {"path": str(folder / "patients.parquet")},
        "measurements": {"path": str(folder / "wide.csv"), "layout": "wide", "date_format": "%Y-%m-%d"},
        "outcomes": {"path": str(folder / "outcomes.parquet")},
    }
    config = load_config(write_config(tmp_path, data), check_data=True)
    assert config.sources.measurements.layout == "wide"
    wide.drop(columns="serum_marker").to_csv(folder / "wide.csv", index=False)
    with pytest.raises(ConfigError, match=r"\[sources.measurements\] .*wide.csv has no column 'serum_marker'"):
        load_config(write_config(tmp_path, data), check_data=True)


def test_ragged_lines_and_blank_lines_do_not_stop_the_check(study, tmp_path):
    """The cohort stage gives such lines a ledger reason; the check must not refuse the file for them."""
    folder = tmp_path / "ragged"
    write_data(folder)
    lines = (folder / "measurements.csv").read_text().splitlines()
    lines[10] += ",surplus"
    lines.insert(20, "")
    (folder / "measurements.csv").write_text("\n".join(lines) + "\n")
    data = base()
    for table in ("patients", "measurements", "outcomes"):
        data["sources"][table]["path"] = str(folder / f"{table}.csv")
    assert load_config(write_config(tmp_path, data), check_data=True).warnings == ()
