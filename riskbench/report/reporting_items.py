"""Where the report covers each item of two open reporting standards for prediction-model studies.

TRIPOD 2015 (Collins, Reitsma, Altman & Moons, BMJ 2015;350:g7594) and TRIPOD+AI 2024 (Collins et al.,
BMJ 2024;385:e078378). The item numbers and names below are those standards' (recalled **from memory**:
check them against the published checklists); the checklist wording is not reproduced. Each item is mapped
to the report section that covers it and the files that show it; the table says "covered" when such a file
was produced in this run, "not produced in this run" when it was not (the report's notes say why), and
"for the authors" when the item is about the study rather than the analysis (title, funding, ethics ...).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from riskbench.report.outputs import FIGURES, TABLES

__all__ = ["ITEMS", "ReportingItem", "reporting_items_table"]


@dataclass(frozen=True)
class ReportingItem:
    """One reporting item: its number in each standard ("" when it has none there), name, report section and
    evidence files.

    ``evidence`` are file-name patterns (glob, no extension) in the run's ``tables/`` or ``figures/``;
    empty for items the report cannot cover.
    """

    tripod_2015: str
    tripod_ai_2024: str
    name: str
    section: str
    evidence: tuple[str, ...] = ()


_METHODS = "Methods"
_FLOW = "Cohort flow"

_BOTH: tuple[tuple[str, str, str, str, tuple[str, ...]], ...] = (
    # (TRIPOD 2015 item, TRIPOD+AI 2024 item, name, section, evidence)
    ("1", "1", "Title", "", ()),
    ("2", "2", "Abstract", "", ()),
    ("3a", "3a", "Background", "", ()),
    ("3b", "4", "Objectives", _METHODS, ("methods",)),
    ("4a", "5a", "Source of data", _FLOW, ("cohort_flow", "ledger_summary")),
    ("4b", "5b", "Source of data: dates", "", ()),
    ("5a", "6a", "Participants: setting", "", ()),
    ("5b", "6b", "Participants: eligibility", _FLOW, ("cohort_flow",)),
    ("5c", "6c", "Participants: treatments", "", ()),
    ("", "7", "Data preparation", _FLOW, ("ledger_summary",)),
    ("6a", "8a", "Outcome", _METHODS, ("methods",)),
    ("6b", "8b", "Outcome: blinding", "", ()),
    ("7a", "9a", "Predictors", _METHODS, ("methods",)),
    ("7b", "9c", "Predictors: blinding", "", ()),
    ("8", "10", "Sample size", "Sample size and follow-up", ("sample_size",)),
    ("9", "11", "Missing data", "Baseline characteristics by outcome status", ("missing_data",)),
    ("10a", "12a", "Analytical methods: handling of predictors", _METHODS, ("methods",)),
    (
        "10b",
        "12c",
        "Analytical methods: model type, building and checks",
        _METHODS,
        ("methods", "coefficients_*", "proportional_hazards"),
    ),
    ("10d", "12e", "Analytical methods: performance measures", _METHODS, ("methods", "discrimination")),
    ("11", "", "Risk groups", "Triage operating point", ("triage_operating_point",)),
    ("", "13", "Class imbalance", "", ()),
    ("", "14", "Fairness", "", ()),
    ("", "15", "Model output", _METHODS, ("methods",)),
    ("12", "16", "Development versus evaluation", _METHODS, ("methods",)),
    ("", "17", "Ethical approval", "", ()),
    ("22", "18a", "Funding", "", ()),
    ("", "18e", "Data sharing", "", ()),
    ("", "18f", "Code sharing", "", ()),
    ("", "19", "Patient and public involvement", "", ()),
    ("13a", "20a", "Participants: flow and follow-up", _FLOW, ("cohort_flow", "follow_up")),
    (
        "13b",
        "20b",
        "Participants: characteristics",
        "Baseline characteristics by outcome status",
        ("baseline_characteristics",),
    ),
    (
        "14a",
        "20c",
        "Participants and outcome events in each analysis",
        _FLOW,
        ("landmark_summary", "landmark_outcome_counts"),
    ),
    ("14b", "", "Unadjusted predictor–outcome associations", "", ()),
    ("15a", "22", "Model specification: full model", "Hazard ratios", ("coefficients_*",)),
    ("15b", "22", "Model specification: how to use it", "Hazard ratios", ("coefficients_*",)),
    (
        "16",
        "23a",
        "Model performance",
        "Time-dependent AUC",
        ("discrimination", "performance_by_landmark", "auc_by_horizon", "calibration_*"),
    ),
    ("", "23b", "Model performance in key subgroups", "", ()),
    ("17", "24", "Model updating", "", ()),
    ("18", "26", "Limitations", "Limitations", ("limitations",)),
    ("19a", "", "Interpretation: validation results", "Comparison of the model sets", ("model_comparison",)),
    ("19b", "25", "Interpretation: overall", "", ()),
    ("20", "27a", "Implications for practice", "Decision curves", ("decision_curve_*",)),
    ("21", "", "Supplementary information", "", ()),
)

#: Every item, with its number in each standard.
ITEMS: tuple[ReportingItem, ...] = tuple(ReportingItem(*row) for row in _BOTH)


def _produced(run_dir: Path, patterns: tuple[str, ...]) -> list[str]:
    found = []
    for pattern in patterns:
        for folder, suffixes in ((TABLES, (".csv", ".txt")), (FIGURES, (".png",))):
            for suffix in suffixes:
                found += [p.stem for p in sorted((run_dir / folder).glob(pattern + suffix))]
    return list(dict.fromkeys(found))


def reporting_items_table(run_dir: str | Path, items: tuple[ReportingItem, ...] = ITEMS) -> pd.DataFrame:
    """Each reporting item with the report section that covers it and whether this run produced it.

    Returns
    -------
    DataFrame ``tripod_2015, tripod_ai_2024, item, section, status, files`` (item numbers; ``files``: the
    tables/figures of this run that show it).
    """
    run_dir = Path(run_dir)
    rows = []
    for it in items:
        files = _produced(run_dir, it.evidence)
        if not it.evidence:
            status = "for the authors (not part of the analysis)"
        elif files:
            status = "covered"
        else:
            status = "not produced in this run (see the notes)"
        rows.append(
            {
                "tripod_2015": it.tripod_2015 or "—",
                "tripod_ai_2024": it.tripod_ai_2024 or "—",
                "item": it.name,
                "section": it.section or "—",
                "status": status,
                "files": ", ".join(files[:4]),
            }
        )
    return pd.DataFrame(rows, columns=["tripod_2015", "tripod_ai_2024", "item", "section", "status", "files"])
