"""The report page: every section, the caution, figures embedded, nothing loaded from the web."""

from __future__ import annotations

import re
from pathlib import Path

import matplotlib.pyplot as plt
import pandas as pd

from riskbench.report.html_report import SECTIONS, build_report, table_html
from riskbench.report.outputs import atomic_write_text, save_figure, save_table
from riskbench.report.render_check import check_report_renders


def _fake_run(run: Path, *, broken_png: bool = False) -> None:
    for section in SECTIONS:
        for pattern in section.figures:
            fig, ax = plt.subplots(figsize=(2, 1.5))
            ax.plot([0, 1], [0, 1])
            files = save_figure(fig, run, pattern.replace("*", "_1y"))
            if broken_png:
                files.png.write_bytes(b"not a png")
        for pattern in section.tables:
            save_table(pd.DataFrame({"what": ["a", "b"], "n": ["<10", "25"]}), run, pattern.replace("*", "_x"))
        for name in section.texts:
            atomic_write_text(run / "tables" / f"{name}.txt", "A paragraph.\n")


def test_report_has_every_section_caution_and_embedded_figures(tmp_path):
    _fake_run(tmp_path)
    page = build_report(tmp_path, title="Demo <analysis>", threshold=10, facts=[("seed", "1")]).read_text()
    assert "not a medical device" in page and "ethics approval" in page and "&lt;10" in page
    for section in SECTIONS:
        assert f'id="{section.anchor}"' in page
    assert "Not produced in this run" not in page
    assert "Demo &lt;analysis&gt;" in page  # text is escaped
    n_figures = sum(len(s.figures) for s in SECTIONS)
    assert page.count('src="data:image/png;base64,') == n_figures
    assert not re.search(r"""(src|href)\s*=\s*["']?https?:""", page)
    assert "<script" not in page


def test_missing_section_says_so_and_a_missing_optional_one_is_left_out(tmp_path):
    page = build_report(tmp_path, title="t", threshold=11).read_text()
    required = [s for s in SECTIONS if not s.optional]
    assert page.count("Not produced in this run") == len(required) < len(SECTIONS)
    assert all(f'id="{s.anchor}"' not in page and f'href="#{s.anchor}"' not in page for s in SECTIONS if s.optional)
    assert "&lt;11" in page


def test_every_figure_loads_in_headless_chromium(tmp_path, chromium):
    _fake_run(tmp_path / "good")
    good = check_report_renders(build_report(tmp_path / "good", title="t", threshold=10), chromium)
    assert good.images == sum(len(s.figures) for s in SECTIONS) and good.broken == 0
    # the check can fail: a figure whose bytes are not an image is reported broken
    _fake_run(tmp_path / "bad", broken_png=True)
    bad = check_report_renders(build_report(tmp_path / "bad", title="t", threshold=10), chromium)
    assert bad.broken == bad.images > 0


def test_a_table_in_a_notebook_looks_as_in_the_report(tmp_path: Path):
    """``table_html`` (the notebook display) passes a table through the same CSV text and formatting as the
    report page: the same cells, escaped, formula-looking text shown as written."""
    table = pd.DataFrame(
        {
            "model": ["<b>m</b>", "=cmd()"],
            "horizon_years": [2.0, 2.0],
            "harrell_c": [0.725288, 0.7],
            "n_patients": ["<10", "120"],
        }
    )
    save_table(table, tmp_path, "discrimination")
    page = build_report(tmp_path, title="t", threshold=10).read_text()
    shown = table_html(table)
    assert shown in page
    assert "&lt;b&gt;m&lt;/b&gt;" in shown and "<b>" not in shown and "=cmd()" in shown
    assert "0.725" in shown and "0.725288" not in shown and "&lt;10" in shown
