"""Stage 1, cohort: source tables -> pseudonymised survival tables, flow, ledger summary, baseline, timelines.

Writes ``data/counting_process``, ``data/landmark_stack``, ``data/patients`` (Parquet, run pseudonyms only,
no dates), ``tables/cohort_flow``, ``tables/ledger_summary``, ``tables/landmark_summary``,
``tables/baseline_characteristics`` (CSV, small counts hidden) and ``figures/cohort_flow``,
``figures/example_timelines`` (PNG and SVG).
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

import pandas as pd

from riskbench.cohort import Cohort, build_cohort
from riskbench.report.baseline_table import baseline_table
from riskbench.report.flow_diagram import flow_figure
from riskbench.report.flow_suppression import suppress_flow
from riskbench.report.outputs import save_data, save_figure, save_table
from riskbench.report.suppression import coarsen_sequence
from riskbench.report.timelines import choose_example_patients, timeline_figure
from riskbench.time_units import DAYS_PER_YEAR
from riskbench.workflow.config import AnalysisConfig
from riskbench.workflow.model_factory import missing_data_tables
from riskbench.workflow.pseudonyms import config_key, pseudonym_map, replace_ids
from riskbench.workflow.stage_result import CohortStageResult
from riskbench.workflow.temporal_parts import mark_parts

PATIENT_COLUMNS = ("patient_id", "end_days", "end_status")


def build_stage_cohort(config: AnalysisConfig, temp_folder: str | Path | None = None) -> Cohort:
    """Build the cohort of the configuration with the cohort stage (its ``Cohort`` object)."""
    src = config.sources
    return build_cohort(src.patients, src.measurements, src.outcomes, config.cohort, temp_folder=temp_folder)


STATE_LABELS = {
    "read": "Patients in the source table",
    "used": "Patients included",
}
END_LABELS = {1: "Outcome", 2: "Competing event", 0: "Censored (end of follow-up)"}


def patient_flow(flow: pd.DataFrame, patients: pd.DataFrame) -> pd.DataFrame:
    """Patients remaining after each exclusion step, from the cohort stage's row flow (patients table).

    Returns ``step, n_patients, n_excluded, level`` (level 1: the included patients by end of follow-up); steps
    that excluded nobody are left out, and the included patients are split by how follow-up ended.
    """
    excluded = _excluded_column(flow)
    rows = []
    for r in flow[flow["table"] == "patients"].to_dict("records"):
        if r["state"] in STATE_LABELS:
            rows.append((STATE_LABELS[r["state"]], int(r["remaining"]), 0, 0))
        elif r[excluded] > 0:
            rows.append((f"after excluding: {r['state'].replace('_', ' ')}", int(r["remaining"]), int(r[excluded]), 0))
    rows[-1] = (STATE_LABELS["used"], len(patients), 0, 0)
    for code, label in END_LABELS.items():
        n_end = int((patients["end_status"] == code).sum())
        if n_end or code != 2:  # no empty competing-event box when the cohort has none
            rows.append((label, n_end, 0, 1))
    return pd.DataFrame(rows, columns=["step", "n_patients", "n_excluded", "level"])


def ledger_summary(rows_flow: pd.DataFrame, threshold: int) -> pd.DataFrame:
    """Rows read, excluded per reason and used, per source table, with small counts hidden.

    ``rows_flow`` has ``table, state, rows_remaining, rows_excluded`` (states ``read`` and ``used`` plus the
    reasons that excluded rows). Within a table the counts are linked by subtraction, so each table goes
    through :func:`~riskbench.report.flow_suppression.suppress_flow` (small reasons merged).
    """
    parts = []
    for table, rows in rows_flow.groupby("table", sort=False):
        flow = pd.DataFrame(
            {
                "step": rows["state"].to_numpy(),
                "n_patients": rows["rows_remaining"].to_numpy(),
                "n_excluded": rows["rows_excluded"].to_numpy(),
                "level": 0,
            }
        )
        shown = suppress_flow(flow, threshold, prefix="")
        parts.append(
            pd.DataFrame(
                {
                    "table": table,
                    "state": shown["step"],
                    "rows_remaining": shown["n_patients"],
                    "rows_excluded": shown["n_excluded"],
                }
            )
        )
    return pd.concat(parts, ignore_index=True)


def _excluded_column(flow: pd.DataFrame) -> str:
    return "excluded" if "excluded" in flow.columns else "n_rows"


def time_varying_columns(config: AnalysisConfig) -> list[str]:
    """Covariate columns of the configured time-varying variables (what the timelines draw)."""
    return [v.column for v in config.cohort.variables]


LANDMARK_COUNTS = ("at_risk", "outcomes", "competing_events")


def landmark_counts(stack: pd.DataFrame) -> pd.DataFrame:
    """Patients at risk and events within the horizon at each landmark (years), as numbers."""
    rows = []
    for s, g in stack.groupby("landmark", sort=True):
        rows.append(
            {
                "landmark_years": round(float(s) / DAYS_PER_YEAR, 4),
                "at_risk": int(g["patient_id"].nunique()),
                "outcomes": int((g["status"] == 1).sum()),
                "competing_events": int((g["status"] == 2).sum()),
            }
        )
    return pd.DataFrame(rows, columns=["landmark_years", *LANDMARK_COUNTS])


def landmark_summary(stack: pd.DataFrame, threshold: int) -> pd.DataFrame:
    """:func:`landmark_counts` with small counts hidden and no small difference between landmarks.

    Consecutive landmarks count the same patients, so a difference of a few between two shown counts would
    reveal a few patients leaving; each count column is shown with
    :func:`~riskbench.report.suppression.coarsen_sequence` (rounded to multiples of the threshold when
    such a difference occurs).
    """
    table = landmark_counts(stack)
    if not table["competing_events"].any():  # no empty competing-event column when the cohort has none
        table = table.drop(columns="competing_events")
    for column in [c for c in LANDMARK_COUNTS if c in table.columns]:
        table[column] = coarsen_sequence(table[column].to_numpy(float), threshold)
    return table


def covariate_labels(config: AnalysisConfig) -> Callable[[str], str]:
    """Readable label of a covariate column: ``config.cohort.label`` when the cohort has it, else the name."""
    label = getattr(config.cohort, "label", None)
    if not callable(label):
        return str

    def safe(column: str) -> str:
        try:
            return str(label(column))
        except (KeyError, ValueError):
            return column

    return safe


def run_cohort_stage(config: AnalysisConfig, run_dir: str | Path) -> CohortStageResult:
    """Run stage 1 (see the module docstring); return what it wrote."""
    run_dir = Path(run_dir)
    threshold = config.report.small_count_threshold
    key = config_key(config, run_dir)  # before the long work: a bad key file stops the run at once
    cohort = build_stage_cohort(config, temp_folder=run_dir / ".tmp")  # spill files stay inside the run

    ids = pd.concat([cohort.ledger["patient_id"], cohort.counting_process["patient_id"]], ignore_index=True)
    mapping = pseudonym_map(ids, key)
    cp = replace_ids(cohort.counting_process, mapping)
    stack = replace_ids(
        cohort.landmark_stack(list(config.landmarks.landmarks_days), config.landmarks.horizon_days), mapping
    )
    static = [c for c in config.cohort.static_columns if c in cohort.patients.columns]
    patients = replace_ids(cohort.patients[[*PATIENT_COLUMNS, *static]], mapping)  # no dates leave the stage
    patients = mark_parts(patients, cohort.patients["entry_date"], config.validation.develop_before)
    save_data(cp, run_dir, "counting_process")
    save_data(stack, run_dir, "landmark_stack")
    save_data(patients, run_dir, "patients")

    flow = patient_flow(cohort.flow, patients)
    result = CohortStageResult(
        stage="cohort",
        run_dir=run_dir,
        counting_process=cp,
        landmark_stack=stack,
        patients=patients,
        cohort=cohort,
        flow=flow,
        threshold=threshold,
    )
    result.tables["cohort_flow"] = suppress_flow(flow, threshold)
    result.figures["cohort_flow"] = save_figure(flow_figure(flow, threshold=threshold), run_dir, "cohort_flow")
    # the full row ledger, summarised: every input row of every table in exactly one state
    rows_flow = cohort.flow[["table", "state", "remaining", _excluded_column(cohort.flow)]]
    rows_flow.columns = ["table", "state", "rows_remaining", "rows_excluded"]
    rows_flow = rows_flow[rows_flow["state"].isin(["read", "used"]) | (rows_flow["rows_excluded"] > 0)]
    result.tables["ledger_summary"] = ledger_summary(rows_flow, threshold)
    result.tables["landmark_summary"] = landmark_summary(stack, threshold)

    covariates = list(dict.fromkeys(c for m in config.models for c in m.covariates))
    at_entry = cp.sort_values(["patient_id", "start"]).groupby("patient_id", sort=True).head(1)
    at_entry = at_entry.drop(columns=[c for c in ("start", "stop", "status") if c in at_entry.columns])
    labels = covariate_labels(config)
    result.tables["baseline_characteristics"] = baseline_table(
        patients, at_entry, covariates, threshold=threshold, labels=labels
    )

    if getattr(config.report, "example_timelines", True) and config.report.example_patients > 0:
        chosen = choose_example_patients(cp, config.report.example_patients, config.seed)
        columns = time_varying_columns(config)
        figure = timeline_figure(cp, chosen, columns, labels)  # panel titles: labels with units
        result.figures["example_timelines"] = save_figure(figure, run_dir, "example_timelines")
    else:
        result.notes.append("Example timelines are switched off ([report] example_patients = 0).")

    result.tables.update(missing_data_tables(config, stack, labels))  # tables/missing_data (+ complete_cases)
    for name, table in result.tables.items():
        save_table(table, run_dir, name)
    return result
