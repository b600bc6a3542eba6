"""Hostile strings reaching the outputs: file names, CSV cells, the report page and the exported notebooks.

Sources: OWASP "CSV Injection" (cells starting with =, +, -, @, tab or carriage return are prefixed with a
single quote); the HTML checks parse the page with Python's ``html.parser`` and look for live markup.
"""

from __future__ import annotations

import base64
import csv
import io
import re
from html.parser import HTMLParser
from pathlib import Path

import matplotlib.pyplot as plt
import nbformat
import numpy as np
import pandas as pd
import pytest
from hypothesis import given
from hypothesis import strategies as st

from riskbench.report.html_report import build_report
from riskbench.report.outputs import (
    csv_text,
    neutralise_csv_cell,
    restore_csv_cell,
    safe_file_stem,
    save_data,
    save_figure,
    save_table,
)
from riskbench.workflow.notebook_html import export_html
from riskbench.workflow.stage_result import StageResult, show

IMG = "<img src=x onerror=alert(1)>"
SCRIPT = "<script>alert(1)</script>"
ESCAPE = "x/../../../../escaped_outside"
FORMULAS = ['=HYPERLINK("http://x","y")', "+1+1", "-2+3", "@SUM(A1:A2)", "\tcmd", "\rcmd", "=1", "-cmd|' /C calc'!A0"]


# ---------------------------------------------------------------------------------------------------------
# File names are derived, never taken


@given(st.text(max_size=200))
def test_a_derived_file_stem_is_safe_and_short(name):
    stem = safe_file_stem(name)
    assert re.fullmatch(r"[A-Za-z0-9_]{1,80}", stem)


@given(st.text(max_size=60), st.text(max_size=60))
def test_different_names_give_different_stems(a, b):
    if a != b:
        assert safe_file_stem(a) != safe_file_stem(b)


def test_a_safe_name_is_kept_and_a_changed_one_gets_a_hash():
    assert safe_file_stem("coefficients_clinical") == "coefficients_clinical"
    assert safe_file_stem("a/b") != safe_file_stem("a_b") == "a_b"
    assert re.fullmatch(r"x_escaped_outside_[0-9a-f]{8}", safe_file_stem(ESCAPE))
    assert len(safe_file_stem("a" * 300)) == 80


def test_a_model_name_that_climbs_out_writes_inside_the_run_folder(tmp_path):
    run = tmp_path / "a" / "b" / "run"
    fig, ax = plt.subplots()
    ax.plot([0, 1])
    figure = save_figure(fig, run, f"calibration_{ESCAPE}_1y")
    paths = [
        save_table(pd.DataFrame({"x": [1]}), run, f"coefficients_{ESCAPE}"),
        save_data(pd.DataFrame({"x": [1]}), run, ESCAPE),
        figure.png,
        figure.svg,
    ]
    for path in paths:
        assert run.resolve() in path.resolve().parents, path
    outside = [p for p in tmp_path.rglob("*") if p.is_file() and run not in p.parents]
    assert outside == []
    assert not list(tmp_path.rglob("escaped_outside*"))


# ---------------------------------------------------------------------------------------------------------
# CSV injection


def _cells(text: str) -> list[str]:
    return [c for row in csv.reader(io.StringIO(text)) for c in row]


def _is_float(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def test_formula_cells_are_neutralised_and_negative_numbers_kept(tmp_path):
    table = pd.DataFrame(
        {
            "model": FORMULAS,
            "=label": ["ok"] * len(FORMULAS),
            "coef": np.linspace(-2.5, 1.0, len(FORMULAS)),
            "as_text": ["-0.25", "-1e-3", "+3", "-inf", "12", "-7", "0", "-0.5 (-1.2 to 0.1)"],
        }
    )
    path = save_table(table, tmp_path, "coefficients_hostile")
    cells = _cells(path.read_text())
    for cell in cells:
        if cell.startswith(("=", "+", "-", "@", "\t", "\r")):
            assert _is_float(cell), repr(cell)
    assert "'=label" in cells and "'=1" in cells and "'\tcmd" in cells and "'-2+3" in cells
    assert "-2.5" in cells and "-0.25" in cells and "-1e-3" in cells and "-7" in cells  # numbers untouched
    assert "'-0.5 (-1.2 to 0.1)" in cells  # text that is not a number is neutralised, even a negative interval


@given(st.text(max_size=30))
def test_neutralising_is_undone_exactly_for_reading(cell):
    shown = neutralise_csv_cell(cell)
    assert restore_csv_cell(shown) == cell
    if shown.startswith(("=", "+", "-", "@", "\t", "\r")):
        assert _is_float(shown)


def test_csv_text_leaves_numeric_columns_alone():
    text = csv_text(pd.DataFrame({"x": [-1.5, 2.0], "n": [-3, 4]}))
    assert text == "x,n\n-1.5,-3\n2,4\n"


# ---------------------------------------------------------------------------------------------------------
# No live markup from user strings


class _Tags(HTMLParser):
    """Every start tag with its attributes, and the text inside each script."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict]] = []
        self.scripts: list[str] = []
        self._in_script = False

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))
        self._in_script = tag == "script"
        if self._in_script:
            self.scripts.append("")

    def handle_endtag(self, tag):
        if tag == "script":
            self._in_script = False

    def handle_data(self, data):
        if self._in_script:
            self.scripts[-1] += data


def live_user_markup(page: str) -> list:
    """Tags or handlers that a hostile string would have produced."""
    parser = _Tags()
    parser.feed(page)
    bad = [(t, a) for t, a in parser.tags if t == "img" and not str(a.get("src", "")).startswith("data:image/")]
    bad += [(t, a) for t, a in parser.tags if any(k.startswith("on") for k in a)]
    bad += [("script", s) for s in parser.scripts if "alert(1)" in s]
    return bad


def _hostile_run(run: Path) -> None:
    save_table(
        pd.DataFrame({"model": [IMG, SCRIPT], "term": ["=cmd", "x"], "coef": [0.1, -0.2], IMG: ["a", "b"]}),
        run,
        f"coefficients_{IMG}",
    )
    save_table(
        pd.DataFrame({"characteristic": [f"{SCRIPT}, median (IQR)"], "All": ["1 (0–2)"]}),
        run,
        "baseline_characteristics",
    )
    fig, ax = plt.subplots()
    ax.set_title(IMG)
    save_figure(fig, run, f"calibration_{IMG}_1y")


def test_the_report_shows_hostile_names_and_titles_as_text(tmp_path):
    _hostile_run(tmp_path)
    page = build_report(
        tmp_path, title=f"Study {SCRIPT}", threshold=10, facts=[("configuration", IMG), (SCRIPT, "1")]
    ).read_text()
    assert live_user_markup(page) == []
    assert "<script" not in page
    assert "&lt;img src=x onerror=alert(1)&gt;" in page and "&lt;script&gt;" in page
    assert "=cmd" in page and "'=cmd" not in page  # the CSV guard is undone for reading, the text escaped


def test_a_stage_notebook_exported_to_html_has_no_live_user_markup(tmp_path, monkeypatch):
    """What show() displays (captured from IPython's display), exported as the runner does."""
    import IPython.display

    _hostile_run(tmp_path)
    fig, ax = plt.subplots()
    ax.plot([0, 1])
    result = StageResult(
        stage="models",
        run_dir=tmp_path,
        notes=[f"Model {IMG} failed {SCRIPT}"],
        tables={f"coefficients_{IMG}": pd.DataFrame({"model": [IMG], SCRIPT: [1.0]})},
        figures={f"hazard_ratios_{IMG}": save_figure(fig, tmp_path, f"hazard_ratios_{IMG}")},
    )
    shown = []
    monkeypatch.setattr(IPython.display, "display", lambda obj: shown.append(obj))
    show(result)
    outputs = []
    for obj in shown:
        bundle = {"text/plain": repr(obj)[:40]}
        for mime, method in (
            ("text/html", "_repr_html_"),
            ("text/markdown", "_repr_markdown_"),
            ("image/png", "_repr_png_"),
        ):
            value = getattr(obj, method, lambda: None)()
            if value is not None:
                bundle[mime] = value if isinstance(value, str) else base64.b64encode(value).decode()
        assert "text/markdown" not in bundle  # user strings never go through Markdown
        outputs.append(nbformat.v4.new_output("display_data", data=bundle))
    cell = nbformat.v4.new_code_cell("stages.show(result)", outputs=outputs)
    # a Markdown cell with raw markup, as an older notebook might hold: the export sanitises it
    nb = nbformat.v4.new_notebook(cells=[nbformat.v4.new_markdown_cell(f"# Title {SCRIPT} {IMG}"), cell])
    source = tmp_path / "nb.ipynb"
    nbformat.write(nb, str(source))
    page = export_html(source, tmp_path / "nb.html").read_text()
    assert live_user_markup(page) == []
    assert "alert(1)" in page  # the strings are there, as text
    assert 'src="data:image/png;base64,' in page  # the figure survives the sanitising


@pytest.mark.parametrize("name", [IMG, SCRIPT, ESCAPE])
def test_show_names_the_derived_file(name, tmp_path, monkeypatch):
    import IPython.display

    shown = []
    monkeypatch.setattr(IPython.display, "display", lambda obj: shown.append(obj))
    show(StageResult(stage="x", run_dir=tmp_path, tables={name: pd.DataFrame({"a": [1]})}))
    html = shown[0]._repr_html_()
    assert f"tables/{safe_file_stem(name)}.csv" in html and "<img" not in html and "<script" not in html


# ---------------------------------------------------------------------------------------------------------
# Through the stages: models named with markup and with a path, a title with a script (library API, which
# bypasses the configuration's name check)


@pytest.fixture(scope="module")
def hostile_stage_run(tmp_path_factory):
    import dataclasses

    from riskbench.demo.generator import generate_cohort
    from riskbench.demo.storage import write_cohort
    from riskbench.workflow.config import load_config
    from riskbench.workflow.stage_cohort import run_cohort_stage
    from riskbench.workflow.stage_models import run_models_stage

    root = Path(__file__).resolve().parents[2]
    base = tmp_path_factory.mktemp("hostile")
    data = write_cohort(generate_cohort(400, seed=3), base / "data")
    text = (root / "configs" / "demo.toml").read_text().replace("../demo_data/clean/", f"{data}/")
    (base / "study.toml").write_text(text)
    config = load_config(base / "study.toml")
    models = tuple(dataclasses.replace(m, name=name) for m, name in zip(config.models, (IMG, ESCAPE)))
    report = dataclasses.replace(config.report, title=f"Study {SCRIPT}")
    hostile_labels = {"serum_marker": f'=HYPERLINK("http://x") {IMG}', "suspicion_score": "@SUM(A1) $\\frac{1}{0$"}
    variables = tuple(
        dataclasses.replace(v, label=hostile_labels.get(v.name, v.label)) for v in config.cohort.variables
    )
    cohort = dataclasses.replace(config.cohort, variables=variables)
    config = dataclasses.replace(config, models=models, report=report, cohort=cohort)
    run = base / "deep" / "er" / "run"
    results = [run_cohort_stage(config, run), run_models_stage(config, run)]
    page = build_report(run, title=config.report.title, threshold=10).read_text()
    return {"base": base, "run": run, "results": results, "page": page}


def test_stage_outputs_stay_in_the_run_folder_with_derived_names(hostile_stage_run):
    base, run = hostile_stage_run["base"], hostile_stage_run["run"]
    written = [p for p in base.rglob("*") if p.is_file()]
    outside = [
        p
        for p in written
        if run not in p.parents and p.parent.name != "data" and p.suffix != ".key" and p.name != "study.toml"
    ]
    assert outside == []
    for path in run.rglob("*"):
        if path.is_file():
            # saved models: <stem>[.part<k>|.bundle|.imputer].<json|md|joblib>[.sha256] (workflow/model_bundle.py)
            assert re.fullmatch(
                r"[A-Za-z0-9_]+(\.part\d+|\.bundle|\.imputer)?\.(csv|png|svg|parquet|html|json|md|"
                r"joblib)(\.sha256)?",
                path.name,
            ), path
    assert any(p.name.startswith("coefficients_x_escaped_outside_") for p in (run / "tables").iterdir())
    sheets = [p.read_text() for p in (run / "models").glob("*.md")]  # model sheets show the names as text
    assert len(sheets) == 2 and not any("<img" in text or "<script" in text for text in sheets)


def test_stage_outputs_show_hostile_names_as_text(hostile_stage_run, monkeypatch):
    import IPython.display

    page = hostile_stage_run["page"]
    assert live_user_markup(page) == [] and "<script" not in page
    assert "&lt;script&gt;" in page
    baseline = _cells((hostile_stage_run["run"] / "tables" / "baseline_characteristics.csv").read_text())
    assert any(c.startswith("'=HYPERLINK") for c in baseline) and any(c.startswith("'@SUM") for c in baseline)
    assert "=HYPERLINK(&quot;http://x&quot;) &lt;img src=x onerror=alert(1)&gt;" in page  # the label, as text
    for table in (hostile_stage_run["run"] / "tables").glob("*.csv"):
        for cell in _cells(table.read_text()):
            assert not cell.startswith(("=", "+", "-", "@", "\t", "\r")) or _is_float(cell), (table.name, cell)
    shown = []
    monkeypatch.setattr(IPython.display, "display", lambda obj: shown.append(obj))
    for result in hostile_stage_run["results"]:
        show(result)
    html = "".join(getattr(obj, "_repr_html_", lambda: "")() or "" for obj in shown)
    assert "&lt;img src=x onerror=alert(1)&gt;" in html
    assert live_user_markup(html) == []
