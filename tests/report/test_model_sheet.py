"""The model sheet: the risk recomputed by hand from the numbers printed in the sheet equals ``predict_risk``.

The hand computation below reads only the sheet's Markdown text (coefficients, centring values, landmark scale,
baseline increments or cumulative hazard, the invented example patient) and applies the formulas the sheet
states: for a landmark super-model the Aalen–Johansen cumulative incidence from two cause-specific Cox hazards
(van Houwelingen & Putter 2012, *Dynamic Prediction in Clinical Survival Analysis*, ch. 7-8 -- **from memory**;
the product-integral as in Andersen, Borgan, Gill & Keiding 1993, *Statistical Models Based on Counting
Processes*, section IV.4 -- **from memory**), for a Cox model 1 − exp(−ΔH₀·exp(η)) (Cox 1972, JRSS B 34:187-220).
The models are fitted by the models stage on a small demo-generator cohort (tests/workflow/analysis_builder.py).
"""

from __future__ import annotations

import importlib.util
import math
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import given
from hypothesis import strategies as st

from riskbench.report.markdown_text import md_text
from riskbench.report.model_sheet import CAUTION, read_sheet_table
from riskbench.workflow.model_bundle import load_model, save_run_model

_SPEC = importlib.util.spec_from_file_location(
    "analysis_builder", Path(__file__).parents[1] / "workflow" / "analysis_builder.py"
)
B = importlib.util.module_from_spec(_SPEC)
_SPEC.loader.exec_module(B)

MODELS = (
    {"name": "stratified", "covariates": B.IMAGING, "params": {"baseline": "stratified"}},
    {"name": "smooth", "covariates": B.CLINICAL, "params": {"landmark_effects": "quadratic"}},
    {"name": "no_competing", "covariates": B.CLINICAL, "params": {"competing": False, "landmark_effects": "none"}},
    {"name": "cox", "family": "time_varying_cox", "covariates": B.CLINICAL},
)


@pytest.fixture(scope="module")
def run(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("sheet")
    B.write_data(folder, 300, seed=7)
    config = B.write_config(folder, models=MODELS, validation={"candidate": "stratified", "reference": "smooth"})
    config.write_text(
        config.read_text() + '\n[missing_data]\nmethod = "multiple_imputation"\nimputations = 2\nmax_iterations = 2\n'
    )
    B.run_stages(config, folder / "run", ("cohort", "models"))
    return folder / "run"


def _plain(cell: str) -> str:
    return cell.replace("\\", "")


def _example(text: str) -> tuple[dict[str, float], float, float]:
    rows = {_plain(name): float(value) for name, value in read_sheet_table(text, "example patient")}
    return rows, rows.pop("landmark (days)"), rows.pop("horizon (days)")


def _landmark_risk_by_hand(text: str, k: int) -> float:
    values, s, w = _example(text)
    scale = float(re.search(r"S = (\S+) days", text).group(1))  # type: ignore[union-attr]
    scaled = s / scale

    def term(name: str) -> float:
        if name == "landmark_s":
            return scaled
        if name == "landmark_s2":
            return scaled**2
        base, _, power = name.partition(":")
        return values.get(base, 0.0) * (scaled if power == "s" else scaled**2 if power == "s2" else 1.0)

    scores = []
    for cause in ("outcome", "competing"):
        try:
            table = read_sheet_table(text, f"coefficients {cause} {k}")
        except KeyError:
            continue
        eta = sum(float(beta) * (term(_plain(name)) - float(mean)) for name, _, beta, mean in table)
        scores.append(math.exp(eta))
    strata = [line for line in text.splitlines() if line.startswith(f"<!-- table: baseline {k} stratum ")]
    stratum = [float(line.split()[-2]) for line in strata]
    chosen = stratum[0] if len(stratum) == 1 else min(stratum, key=lambda v: abs(v - s))
    increments = read_sheet_table(text, f"baseline {k} stratum {chosen!r}")
    survival, risk = 1.0, 0.0
    for row in increments:
        t, jumps = float(row[0]), [float(v) for v in row[1:]]
        if t > w:
            break
        d1 = scores[0] * jumps[0]
        total = d1 + (scores[1] * jumps[1] if len(scores) > 1 else 0.0)
        if total > 1.0:
            d1, total = d1 / total, 1.0
        risk += survival * d1
        survival *= 1.0 - total
    return risk


def _cox_risk_by_hand(text: str, k: int) -> float:
    values, s, w = _example(text)
    table = read_sheet_table(text, f"coefficients outcome {k}")
    eta = sum(float(beta) * (values[_plain(name)] - float(centre)) for name, _, beta, centre in table)
    # the first H0 column: the only one, or the first stratum, where the sheet puts its example patient
    grid = [(float(row[0]), float(row[1])) for row in read_sheet_table(text, f"cumulative hazard {k}")]

    def cumhaz(at: float) -> float:
        return max((h for t, h in grid if t <= at + 1e-9), default=0.0)

    return -math.expm1(-(cumhaz(s + w) - cumhaz(s)) * math.exp(eta))


@pytest.mark.parametrize("name", [m["name"] for m in MODELS])
def test_the_risk_computed_by_hand_from_the_sheet_equals_predict_risk(run: Path, name: str) -> None:
    saved = load_model(run / "models" / f"{name}.bundle.json")
    text = (run / "models" / f"{name}.md").read_text()
    values, s, w = _example(text)
    row = pd.DataFrame([{**values, "landmark": s}])
    by_hand = _cox_risk_by_hand if name == "cox" else _landmark_risk_by_hand
    parts = [by_hand(text, k) for k in range(1, len(saved.parts) + 1)]
    expected = float(saved.model.predict_risk(row, w)[0])
    assert abs(float(np.mean(parts)) - expected) < 1e-10
    assert 0.0 < expected < 1.0
    printed = float(re.search(r"\*\*(\S+)\*\*", text.split("## Worked example")[1]).group(1))  # type: ignore[union-attr]
    assert printed == expected


def test_a_stratified_cox_models_sheet_is_recomputed_in_the_examples_stratum(run: Path, tmp_path: Path) -> None:
    from riskbench.models.cox_model import CoxModel

    cp = pd.read_parquet(run / "data" / "counting_process.parquet").dropna(subset=B.CLINICAL)
    covariates = [c for c in B.CLINICAL if c != "sex_male"]
    model = CoxModel(covariates, strata="sex_male").fit(cp)
    spec = load_model(run / "models" / "cox.bundle.json").cohort_spec()
    saved = load_model(
        save_run_model(
            tmp_path,
            "strata",
            "time_varying_cox",
            model,
            cohort_rules=spec,
            development=cp,
            landmarks_days=[0.0, 365.25],
            prediction_window_days=730.5,
            horizons_days=[730.5],
        )
    )
    text = (tmp_path / "models" / "strata.md").read_text()
    assert "in stratum sex\\_male = 0\\.0" in text
    values, s, w = _example(text)
    row = pd.DataFrame([{**values, "sex_male": 0.0, "landmark": s}])
    assert abs(_cox_risk_by_hand(text, 1) - float(saved.model.predict_risk(row, w)[0])) < 1e-10


def test_the_sheet_has_the_caution_rules_equation_and_both_causes(run: Path) -> None:
    text = (run / "models" / "stratified.md").read_text()
    assert md_text(CAUTION) in text
    for heading in (
        "## Cohort rules",
        "## The equation",
        "## Baseline risk at each landmark and horizon",
        "## Worked example (an invented patient)",
    ):
        assert heading in text
    assert "coefficients competing 1" in text and "baseline 1 stratum 0.0" in text
    assert "carried forward for at most 1095.75 days" in text
    no_competing = (run / "models" / "no_competing.md").read_text()
    assert "No competing-event model" in no_competing and "coefficients competing" not in no_competing


def test_the_example_patient_is_invented_not_a_cohort_patient(run: Path) -> None:
    text = (run / "models" / "stratified.md").read_text()
    values, _, _ = _example(text)
    stack = pd.read_parquet(run / "data" / "landmark_stack.parquet")
    same = np.ones(len(stack), dtype=bool)
    for column, value in values.items():
        same &= np.isclose(stack[column].to_numpy(float), value)
    assert not same.any()


def test_a_forest_sheet_says_it_has_no_equation(run: Path, tmp_path: Path) -> None:
    from riskbench.models.forest import SurvivalForest

    stack = pd.read_parquet(run / "data" / "landmark_stack.parquet").dropna(subset=B.CLINICAL)
    forest = SurvivalForest(B.CLINICAL, n_estimators=5, random_state=1).fit(stack)
    saved = load_model(
        save_run_model(
            tmp_path,
            "forest",
            "forest",
            forest,
            cohort_rules=load_model(run / "models" / "cox.bundle.json").cohort_spec(),
            development=stack,
            landmarks_days=[0.0, 365.25],
            prediction_window_days=730.5,
            horizons_days=[730.5],
        )
    )
    text = (tmp_path / "models" / "forest.md").read_text()
    assert "no equation" in text and "n\\_estimators" in text and "| 5 |" in text
    assert "Variable importance" in text
    assert saved.family == "forest"


def test_user_strings_cannot_become_markup(run: Path, tmp_path: Path) -> None:
    saved = load_model(run / "models" / "cox.bundle.json")
    stack = pd.read_parquet(run / "data" / "counting_process.parquet")
    hostile = "<img src=x onerror=alert(1)> | [link](http://x) # head\n* item"
    bundle = save_run_model(
        tmp_path,
        hostile,
        "time_varying_cox",
        saved.parts[0],
        cohort_rules=saved.cohort_spec(),
        development=stack,
        landmarks_days=[0.0, 365.25],
        prediction_window_days=730.5,
        horizons_days=[730.5],
        labels={"age_at_entry": "Age | <b>years</b>"},
    )
    text = bundle.with_name(bundle.name.replace(".bundle.json", ".md")).read_text()
    assert "<img" not in text and "<b>" not in text and "](http" not in text
    assert "\n* item" not in text and "# head" not in text.replace("\\# head", "")
    assert "Age \\| &lt;b&gt;years&lt;/b&gt;" in text
    assert all(line.count("|") - line.count("\\|") in (0,) or line.startswith("|") for line in text.splitlines())
    assert load_model(bundle).name == hostile


# --------------------------------------------------------------------------------------------------
# properties of the Markdown escaping the sheet relies on


@given(st.text(max_size=60))
def test_escaped_text_cannot_open_markup_or_end_a_line(text: str) -> None:
    """Whatever the text, its escaped form has no line break, no raw HTML bracket, and every Markdown
    character is preceded by a backslash (CommonMark 0.31, section 2.4 "Backslash escapes": an escaped ASCII
    punctuation character is shown literally -- **from memory**)."""
    out = md_text(text)
    assert "\n" not in out and "\r" not in out and "<" not in out and ">" not in out
    unescaped = re.sub(r"\\.", "", out)
    assert not re.search(r"[`*_{}\[\]()#+\-.!|~]", unescaped)


@given(st.lists(st.floats(-1e6, 1e6, allow_nan=False), min_size=1, max_size=30))
def test_development_rows_are_never_flagged_outside_their_own_range(values: list[float]) -> None:
    from riskbench.cohort.spec import CohortSpec
    from riskbench.workflow.model_bundle import development_ranges
    from riskbench.workflow.scoring_rows import row_flags

    table = pd.DataFrame({"x": values})
    flags = row_flags(table, ["x"], development_ranges(table, ["x"]), CohortSpec(), None)
    assert (flags["outside_development_range"] == "").all()
