"""The analysis report: one self-contained HTML page built from a run folder's tables and figures.

Figures are embedded as base64 PNG, styles are inline, there are no scripts and no links to other sites,
so the page opens offline and can be sent as one file. It reads only ``tables/*.csv`` and
``figures/*.png`` (already pseudonymised and suppressed by the stages), never the ``data/`` folder.
Every text that comes from the run (title, facts, table headers and cells, file names, captions) is
HTML-escaped; only the page's own fixed markup is live.
"""

from __future__ import annotations

import base64
import html
import io
import re
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from riskbench.report.display_format import display_table
from riskbench.report.notes import notes_html
from riskbench.report.outputs import FIGURES, TABLES, atomic_write_text, csv_text, restore_csv_cell


@dataclass(frozen=True)
class Section:
    """One report section: its anchor, heading, explanation and the figures/tables it shows.

    ``figures`` and ``tables`` are file-name patterns (``glob`` style, without extension) in the run's
    ``figures/`` and ``tables/`` folders; ``texts`` name ``tables/<name>.txt`` files shown as paragraphs
    (one per line). An ``optional`` section belongs to a model family a run may not have (the joint model):
    without its files it is left out of the page, where a missing required section says it was not produced.
    """

    anchor: str
    title: str
    text: str
    figures: tuple[str, ...] = ()
    tables: tuple[str, ...] = ()
    texts: tuple[str, ...] = ()
    optional: bool = False


CAUTION = (
    "This report was produced by research software. It is <strong>not a medical device</strong>, and the "
    "predictions in it must not be used for decisions about individual patients without proper validation "
    "in the population where they would be used. Any use of real patient data must follow local ethics "
    "approval, data-protection rules and clinical governance; those bodies, not this report, decide what "
    "may be done with it. Patients are shown only under pseudonyms and counts below {threshold} are shown "
    "as &ldquo;&lt;{threshold}&rdquo;; a count that would give a hidden one away by subtraction is shown as "
    "&ldquo;suppressed&rdquo;, and counts of the same patients at consecutive landmarks may be rounded to a "
    "multiple of {threshold} (&ldquo;~60&rdquo;)."
)

SECTIONS: tuple[Section, ...] = (
    Section(
        "methods",
        "Methods",
        "Written by the software from the configuration and the data of this run.",
        texts=("methods",),
    ),
    Section(
        "sample-size",
        "Sample size and follow-up",
        "Minimum sample size for each model by the criteria of Riley et al. (BMJ 2020;368:m441) for a "
        "time-to-event outcome, with an anticipated Cox-Snell R² of 15% of its maximum (a conservative "
        "choice), against the cohort's patients and outcomes; and the median follow-up by the reverse "
        "Kaplan-Meier method (Schemper & Smith 1996).",
        tables=("sample_size", "follow_up"),
    ),
    Section(
        "cohort-flow",
        "Cohort flow",
        "How many patients remained after each step of the cohort derivation, and what the input rows "
        "were used for (every row of every source table ends in exactly one state).",
        figures=("cohort_flow",),
        tables=("cohort_flow", "ledger_summary", "landmark_summary"),
    ),
    Section(
        "baseline",
        "Baseline characteristics by outcome status",
        "Covariates as known at entry, by how follow-up ended. Medians with interquartile ranges; "
        "groups smaller than the threshold are not described.",
        tables=("baseline_characteristics", "missing_data", "complete_cases"),
    ),
    Section(
        "timelines",
        "Example patient timelines",
        "A few patients drawn at random (with the run's seed), shown under pseudonyms with time since "
        "entry instead of dates: each covariate as it was known over follow-up and how follow-up ended.",
        figures=("example_timelines",),
    ),
    Section(
        "hazard-ratios",
        "Hazard ratios",
        "Outcome hazard ratios with 95% intervals (cluster-robust by patient) of the models fitted on the "
        "whole cohort, per a step of each covariate stated in the column 'per': by default its interquartile "
        "range over the landmark rows, 1 for a yes/no covariate, or the step set in [report] effect_units. "
        "Where an effect changes with the landmark s, the table gives it at entry and the figure of β(s) "
        "shows the hazard ratio per step against the landmark with its pointwise 95% band (delta method). "
        "The coefficient tables list every term on the log scale; a term marked × landmark (s) or × landmark "
        "squared (s²) is the change of the log hazard ratio with s/S (S: the last landmark) and has no hazard "
        "ratio of its own. The likelihood-ratio test compares the fitted landmark form with the richer one "
        "(or the richest with the simpler one), both refitted on the rows with every covariate known; it "
        "treats a patient's landmark rows as independent, so read it as a guide to parsimony.",
        figures=("hazard_ratios", "landmark_effects"),
        tables=("hazard_ratios_*", "landmark_effect_forms", "coefficients_*"),
    ),
    Section(
        "joint-model",
        "Joint model of a repeated marker",
        "Only for a joint model (family shared_trajectory_joint): every estimate with its standard error from "
        "the observed information (time in years; the marker intercept and the baseline hazards refer to the "
        "covariate means), and Patient A of the example timelines under the model: the measured marker "
        "values, the predicted true marker with its 95% band, and the risk within the prediction window asked "
        "again every three months, each time from the measurements up to then.",
        figures=("joint_patient_*",),
        tables=("joint_estimates_*",),
        optional=True,
    ),
    Section(
        "model-checks",
        "Proportional hazards and the nested likelihood-ratio test",
        "Grambsch-Therneau test of proportional hazards (scaled Schoenfeld residuals against 1 - Kaplan-Meier "
        "of time, model-based variance) for each Cox model's outcome part, refitted on the rows with every "
        "covariate known; for landmark models time runs from the landmark. A small p-value suggests an effect "
        "that changes over time. The likelihood-ratio test compares the candidate with the reference model "
        "nested in it, both fitted on the same rows; it treats the landmark rows of one patient as "
        "independent, so read it as descriptive when patients contribute several rows.",
        tables=("proportional_hazards", "likelihood_ratio_test"),
    ),
    Section(
        "discrimination",
        "Time-dependent AUC",
        "Cumulative/dynamic AUC of the cross-validated predictions against the horizon after the "
        "landmark, and the concordance and Brier scores at the report horizons. The predictions are "
        "cumulative incidences: a competing event before the horizon counts as a known non-outcome in "
        "the concordance indices, the AUC and the Brier score. The shaded band around each AUC curve is a "
        "pointwise 95% percentile interval from resampling patients (see the next section).",
        figures=("auc_curves",),
        tables=("discrimination", "brier"),
    ),
    Section(
        "landmark-performance",
        "Performance at each landmark and pooled",
        "Each measure of the cross-validated predictions among the patients at risk at one landmark, and "
        "pooled over all landmark rows, with a 95% percentile interval. A patient still at risk at several "
        "landmarks contributes one row to each, so the pooled rows are not independent patients: every "
        "interval comes from bootstrap resamples that draw patients with replacement and keep all of a "
        "drawn patient's landmark rows together, and re-evaluate the fixed cross-validated predictions. "
        "The intervals therefore cover the variation between samples of patients for these predictions, "
        "not the variation from refitting the models. For the same reason the outcome counts per landmark "
        "add up to more than the number of patients with the outcome: a patient whose outcome falls within "
        "the horizon of several landmarks is counted once at each of them (the pooled row gives both "
        "numbers). The observed/expected ratio is the calibration-in-the-large: the observed risk by the "
        "horizon (Aalen–Johansen cumulative incidence, or 1 − Kaplan–Meier for a model that predicts a "
        "cause-specific 1 − S) over the mean predicted risk. A landmark with fewer outcomes "
        "than the small-count threshold is not measured.",
        tables=("performance_by_landmark", "landmark_outcome_counts"),
    ),
    Section(
        "temporal-validation",
        "Temporal validation",
        "With [validation] develop_before, every model is refitted on the patients who entered before that "
        "date and evaluated on those who entered on or after it (a later period), with 95% percentile "
        "intervals from resampling the later patients. The first table gives the patients, landmark rows and "
        "outcomes within the prediction window of each part; counts below the threshold are hidden.",
        tables=("temporal_split", "temporal_validation"),
        texts=("temporal_plan",),
    ),
    Section(
        "calibration",
        "Calibration at each horizon",
        "Predicted against observed risk of the outcome by the horizon (cross-validated predictions), each "
        "model against what it predicts: a cumulative incidence against the Aalen–Johansen estimate with "
        "the competing event, a cause-specific 1 − S (forest, time-varying Cox, landmark model without a "
        "competing model) against 1 − Kaplan–Meier with competing events censored (column 'prediction'). "
        "Curves, slope, intercept, ICI, E50 and E90 come from pseudo-observations of that estimate "
        "(Austin, Putter, Giardiello & van Klaveren 2022); standard errors and bands treat a patient's "
        "landmark rows as one cluster. Figure and table show the same observed/expected ratio.",
        figures=("calibration_*",),
        tables=("calibration_summary",),
    ),
    Section(
        "decision-curves",
        "Decision curves",
        "Net benefit of acting on the model's risk over a range of risk thresholds (from [report] "
        "decision_threshold_min, default 0, to decision_threshold_max), against treating everyone and no "
        "one, over all landmark rows at the longest report horizon. Treating everyone is scored with the "
        "Aalen–Johansen cumulative incidence, so a patient who first has the competing event counts as "
        "never having the outcome. Shaded bands: pointwise 95% percentile intervals from resampling "
        "patients.",
        figures=("decision_curve*",),
    ),
    Section(
        "comparison",
        "Comparison of the model sets",
        "Paired comparison of the candidate model against the reference on the same patients, with "
        "intervals from resampling patients, and the bootstrap-validated performance. Every performance "
        "value says how it was obtained (column 'obtained_by'): apparent (the model scored on the patients it "
        "was fitted on: optimistic), cross-validated (scored on the patients of each fold by a model fitted "
        "without them, as in the discrimination table), optimism-corrected (apparent minus the mean optimism "
        "over bootstrap resamples; used for regression models) or out-of-bag (refits scored on the patients "
        "their resample left out; used for forests, which fit their training patients almost perfectly, so "
        "that apparent minus optimism would stay far too high). The column .632+ (Efron & Tibshirani 1997) "
        "weighs apparent and out-of-bag values; for a forest it still leans on the near-perfect apparent "
        "value, so it is shown but not used. Cross-validated and out-of-bag values come from models fitted on "
        "part of the patients and can be a little lower than those of the model fitted on all of them.",
        tables=("model_comparison", "bootstrap_optimism"),
    ),
    Section(
        "triage",
        "Triage operating point",
        "The risk threshold below which patients could be spared a procedure, chosen for a high "
        "negative predictive value, with its consequences and bootstrap intervals.",
        tables=("triage_operating_point",),
    ),
    Section(
        "limitations",
        "Limitations",
        "Written by the software from the configuration and the data of this run; the authors add what it cannot know.",
        texts=("limitations",),
    ),
    Section(
        "reporting-items",
        "Reporting items",
        "Where this report covers each item of the TRIPOD 2015 and TRIPOD+AI 2024 reporting guidelines "
        "(item numbers of each), and which items are left to the authors.",
        tables=("reporting_items",),
    ),
)


def _find(folder: Path, patterns: Sequence[str], suffix: str) -> list[Path]:
    found: list[Path] = []
    for pattern in patterns:
        for path in sorted(folder.glob(pattern + suffix)):
            if path not in found and not path.name.startswith("."):
                found.append(path)
    return found


def _title_of(path: Path) -> str:
    words = path.stem.replace("_", " ")
    return words[:1].upper() + words[1:]


def _figure_html(path: Path) -> str:
    data = base64.b64encode(path.read_bytes()).decode("ascii")
    caption = html.escape(_title_of(path))
    return (
        f'<figure><img src="data:image/png;base64,{data}" alt="{caption}">'
        f"<figcaption>{caption} (also <code>figures/{html.escape(path.stem)}.svg</code>)</figcaption>"
        "</figure>"
    )


_NUM = ' class="num"'
_NUMERIC_CELL = re.compile(r"^[-<>~]?\d")


def _is_numeric_column(cells: pd.Series) -> bool:
    """Numbers (and suppressed counts such as "<10") are right-aligned; labels are left-aligned."""
    shown = [c for c in cells if c != ""]
    return bool(shown) and all(_NUMERIC_CELL.match(c) for c in shown)


def _csv_cells_html(csv: str | Path | io.StringIO) -> str:
    """The ``<table>`` of a table stored as CSV: cells read as text, rounded for reading, escaped."""
    table = pd.read_csv(csv, dtype=str, keep_default_na=False)
    table.columns = [restore_csv_cell(str(c)) for c in table.columns]
    table = display_table(table.map(restore_csv_cell))  # cells as the stage made them; escaped below
    numeric = [_is_numeric_column(table[c]) for c in table.columns]
    head = "".join(f"<th{_NUM if n else ''}>{html.escape(str(c))}</th>" for c, n in zip(table.columns, numeric))
    rows = "".join(
        "<tr>" + "".join(f"<td{_NUM if n else ''}>{html.escape(v)}</td>" for v, n in zip(row, numeric)) + "</tr>"
        for row in table.itertuples(index=False)
    )
    return f'<table class="data"><thead><tr>{head}</tr></thead><tbody>{rows}</tbody></table>'


def table_html(table: pd.DataFrame) -> str:
    """``table`` as the report shows it (an escaped HTML ``<table>``, numbers rounded for reading).

    The table passes through the same CSV text as ``tables/*.csv`` (:func:`~riskbench.report.outputs.csv_text`),
    so a notebook shows exactly what the report would. Small counts must already be hidden.
    """
    return _csv_cells_html(io.StringIO(csv_text(table)))


def _table_html(path: Path) -> str:
    # the page shows rounded numbers; the CSV named under the table keeps full precision
    body = _csv_cells_html(path)
    return (
        f'<h3>{html.escape(_title_of(path))}</h3><div class="wide">{body}</div>'
        '<p class="source">Rounded for reading; full precision in '
        f"<code>tables/{html.escape(path.name)}</code>.</p>"
    )


_STYLE = """
body{font-family:system-ui,-apple-system,'Segoe UI',sans-serif;max-width:1050px;margin:2em auto;padding:0 1em;
color:#1d2731;line-height:1.45}
h1{font-size:1.6em;margin-bottom:.2em} h2{border-bottom:2px solid #d5dde5;padding-bottom:.2em;margin-top:2em}
h3{font-size:1em;margin-bottom:.3em}
.caution{border:2px solid #b35900;background:#fff4e5;padding:.8em 1em;border-radius:6px}
.caution h2{border:none;margin:0 0 .3em 0;color:#8a4500;font-size:1.15em}
table.data{border-collapse:collapse;font-size:.85em;margin:.4em 0}
table.data th,table.data td{border:1px solid #ccd5de;padding:.25em .5em;text-align:left;white-space:nowrap}
table.data th{background:#eef3f8;white-space:normal;vertical-align:bottom}
table.data .num{text-align:right;font-variant-numeric:tabular-nums}
figure{margin:1em 0} figure img{max-width:100%;height:auto;border:1px solid #e3e8ee}
figcaption,.source,.meta{font-size:.8em;color:#5a6b7b} .missing{color:#8a4500;font-style:italic}
nav ol{columns:2;font-size:.9em} .wide{overflow-x:auto}
"""


def _has_files(run_dir: Path, section: Section) -> bool:
    return bool(
        _find(run_dir / FIGURES, section.figures, ".png")
        or _find(run_dir / TABLES, section.tables, ".csv")
        or _find(run_dir / TABLES, section.texts, ".txt")
    )


def build_report(
    run_dir: str | Path,
    *,
    title: str,
    threshold: int,
    facts: Sequence[tuple[str, str]] = (),
    sections: Sequence[Section] = SECTIONS,
) -> Path:
    """Write ``report.html`` in the run folder from its tables and figures; return its path.

    Parameters
    ----------
    run_dir
        The run folder (reads ``tables/`` and ``figures/``).
    title
        Heading of the report.
    threshold
        The small-count threshold the tables were suppressed with (stated in the caution box).
    facts
        ``(label, value)`` pairs shown under the title (configuration, seeds, versions).
    sections
        What to show, in order; a section whose files are missing says so.
    """
    run_dir = Path(run_dir)
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{html.escape(title)}</title><style>{_STYLE}</style></head><body>",
        f"<h1>{html.escape(title)}</h1>",
    ]
    if facts:
        parts.append('<p class="meta">' + " · ".join(f"{html.escape(k)}: {html.escape(v)}" for k, v in facts) + "</p>")
    parts.append(
        '<section class="caution" id="caution"><h2>Caution</h2><p>'
        + CAUTION.format(threshold=int(threshold))
        + "</p></section>"
    )
    sections = [s for s in sections if not s.optional or _has_files(run_dir, s)]
    parts.append(
        "<nav><ol>"
        + "".join(f'<li><a href="#{s.anchor}">{html.escape(s.title)}</a></li>' for s in sections)
        + "</ol></nav>"
    )
    for section in sections:
        parts.append(
            f'<section id="{section.anchor}"><h2>{html.escape(section.title)}</h2><p>{html.escape(section.text)}</p>'
        )
        figures = _find(run_dir / FIGURES, section.figures, ".png")
        tables = _find(run_dir / TABLES, section.tables, ".csv")
        texts = _find(run_dir / TABLES, section.texts, ".txt")
        if not figures and not tables and not texts:
            parts.append('<p class="missing">Not produced in this run.</p>')
        parts.extend(
            f"<p>{html.escape(line)}</p>"
            for p in texts
            for line in p.read_text(encoding="utf-8").splitlines()
            if line.strip()
        )
        parts.extend(_figure_html(p) for p in figures)
        parts.extend(_table_html(p) for p in tables)
        parts.append("</section>")
    parts.append(notes_html(run_dir))  # what was left out or could not be computed, and fitting warnings
    parts.append(
        '<p class="meta">Every number above comes from the files in <code>tables/</code> and '
        "<code>figures/</code> of this run; <code>manifest.json</code> records the configuration, "
        "the input files' SHA-256, the software versions and the seeds.</p></body></html>"
    )
    return atomic_write_text(run_dir / "report.html", "\n".join(parts) + "\n")
