"""Test helper (not a test module): a synthetic cohort from the demo generator written as CSV files beside a
small analysis configuration, and the stage functions run on it in-process (no papermill).

Loaded by path from tests/workflow/test_report_parts.py and tests/hostile/test_numerics.py.
"""

from __future__ import annotations

import json
import shutil
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from riskbench.demo import GeneratorParameters, generate_cohort
from riskbench.workflow.config import load_config
from riskbench.workflow.stages import STAGE_FUNCTIONS

CLINICAL = ["age_at_entry", "pack_years", "sex_male", "serum_marker"]
IMAGING = [*CLINICAL, "log_nodule_volume", "log_nodule_volume_change", "suspicion_score"]
STATIC = ["sex_male", "pack_years", "age_at_entry"]

DEFAULT_MODELS = (
    {"name": "clinical", "covariates": CLINICAL, "params": {"baseline": "stratified"}},
    {"name": "imaging_clinical", "covariates": IMAGING, "params": {"baseline": "stratified"}},
)

_COHORT = """
[cohort]
max_carry = "3 years"
lookback = "180 days"
same_day_rule = "mean"
static = {static}
exam_variables = ["nodule_volume", "suspicion_score"]
current_age = true

[cohort.variables.nodule_volume]
unit = "mm3"
conversions = {{ cm3 = 1000.0 }}
range = [1.0, 5.0e5]
transform = "log"
change = true
slope = true
slope_window = "1 year"

[cohort.variables.suspicion_score]
unit = "1"
range = [0.0, 1.0]

[cohort.variables.serum_marker]
unit = "ng/mL"
conversions = {{ "ug/L" = 1.0 }}
range = [0.0, 1000.0]
"""

DEFAULTS: dict[str, dict[str, Any]] = {
    "landmarks": {
        "landmarks": ["0 years", "6 months", "1 year", "18 months", "2 years"],
        "prediction_window": "2 years",
    },
    "validation": {"folds": 3, "bootstrap_resamples": 3, "candidate": "imaging_clinical", "reference": "clinical"},
    "execution": {"workers": 1},
    "report": {
        "title": "Synthetic surveillance cohort (test)",
        "report_horizons": ["1 year", "2 years"],
        "small_count_threshold": 10,
        "example_patients": 2,
    },
}


def _value(v: Any) -> str:
    if isinstance(v, Mapping):
        return "{ " + ", ".join(f"{k} = {_value(x)}" for k, x in v.items()) + " }"
    return json.dumps(v)  # strings, numbers, booleans and lists of them are written alike in TOML


def write_data(folder: Path, n_patients: int, *, seed: int = 5, competing: bool = True, rare_patients: int = 0) -> Path:
    """Demo-generator cohort as CSV files in ``folder/data``.

    ``competing=False`` switches the competing hazard off (no competing events). ``rare_patients`` > 0 adds a
    0/1 static column ``rare`` equal to 1 for that many patients.
    """
    parameters = GeneratorParameters() if competing else GeneratorParameters(gompertz_b=0.0)
    cohort = generate_cohort(n_patients, seed, n_risk_paths=0, parameters=parameters)
    data = folder / "data"
    data.mkdir(parents=True, exist_ok=True)
    patients = cohort.patients.copy()
    if rare_patients:
        patients["rare"] = (np.arange(len(patients)) < rare_patients).astype(int)
    patients.to_csv(data / "patients.csv", index=False)
    cohort.measurements.to_csv(data / "measurements.csv", index=False)
    cohort.outcomes.to_csv(data / "outcomes.csv", index=False)
    return data


def write_config(
    folder: Path,
    *,
    models: Sequence[Mapping[str, Any]] = DEFAULT_MODELS,
    static: Sequence[str] = STATIC,
    name: str = "analysis",
    seed: int = 11,
    **sections: Mapping[str, Any],
) -> Path:
    """An analysis configuration reading ``folder/data``; ``sections`` override keys of the defaults
    (e.g. ``report={"triage": False}``)."""
    lines = [f"seed = {seed}"]
    for table in ("patients", "measurements", "outcomes"):
        lines += [f"[sources.{table}]", f'path = "data/{table}.csv"']
    lines.append(_COHORT.format(static=json.dumps(list(static))))
    for section in ("landmarks", "validation", "execution", "report"):
        values = {**DEFAULTS[section], **sections.get(section, {})}
        lines.append(f"[{section}]")
        lines += [f"{k} = {_value(v)}" for k, v in values.items()]
    for model in models:
        lines.append("[[models]]")
        lines += [f"{k} = {_value(v)}" for k, v in {"family": "landmark_cox", **model}.items()]
    path = folder / f"{name}.toml"
    path.write_text("\n".join(lines) + "\n")
    return path


def run_stages(config_path: Path, run_dir: Path, stages: Sequence[str] = tuple(STAGE_FUNCTIONS)) -> dict:
    """Run the named stage functions in order on ``run_dir``; return their results by stage."""
    config = load_config(config_path)
    run_dir.mkdir(parents=True, exist_ok=True)
    return {name: STAGE_FUNCTIONS[name](config, run_dir) for name in stages}


def copy_run(cohort_run: Path, run_dir: Path) -> Path:
    """A fresh run folder holding only what the cohort stage of ``cohort_run`` wrote."""
    run_dir.mkdir(parents=True)
    for folder in ("data", "tables", "figures"):
        if (cohort_run / folder).is_dir():
            shutil.copytree(cohort_run / folder, run_dir / folder)
    for stale in ("cv_predictions", "apparent_predictions"):
        (run_dir / "data" / f"{stale}.parquet").unlink(missing_ok=True)
    return run_dir


def notes_of(run_dir: Path) -> pd.DataFrame:
    """Every saved note of a run folder as a table (``stage, part, text, model, kind``)."""
    from riskbench.report.notes import load_notes

    notes, _ = load_notes(run_dir)
    return pd.DataFrame([n.__dict__ for n in notes], columns=["stage", "part", "text", "model", "kind"])
