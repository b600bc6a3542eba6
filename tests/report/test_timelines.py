"""Example timelines and the cohort flow read at a glance: labelled panels with units, one legend off the data
naming only the endings shown, no empty competing-event box or column (the report's own conventions; no external
source)."""

from __future__ import annotations

import matplotlib

matplotlib.use("Agg")

import pandas as pd

from riskbench.report.flow_diagram import flow_figure
from riskbench.report.timelines import timeline_figure


def _cp() -> pd.DataFrame:
    return pd.DataFrame(
        {
            "patient_id": ["a", "a", "b"],
            "start": [0.0, 100.0, 0.0],
            "stop": [100.0, 400.0, 300.0],
            "status": [0, 1, 0],
            "log_nodule_volume": [5.0, 5.5, 4.0],
        }
    )


def test_panels_carry_labels_and_one_legend_below_without_absent_endings():
    fig = timeline_figure(_cp(), ["a", "b"], ["log_nodule_volume"], labels=lambda c: "log nodule volume (log mm3)")
    assert fig.axes[0].get_title() == "log nodule volume (log mm3)"
    assert all(ax.get_legend() is None for ax in fig.axes)  # no legend inside a panel
    (legend,) = fig.legends
    names = [t.get_text() for t in legend.get_texts()]
    assert names == ["new value known", "end of follow-up", "outcome"]  # no competing event: none shown
    fig.canvas.draw()
    legend_box = legend.get_window_extent()
    assert all(legend_box.y1 <= ax.get_tightbbox().y0 + 1 for ax in fig.axes)  # below every panel


def test_timeline_titles_without_labels_lose_underscores():
    fig = timeline_figure(_cp(), ["a"], ["log_nodule_volume"])
    assert fig.axes[0].get_title() == "log nodule volume"


def test_flow_without_competing_events_has_no_competing_box():
    from riskbench.workflow.stage_cohort import patient_flow

    flow = pd.DataFrame(
        {"table": ["patients", "patients"], "state": ["read", "used"], "remaining": [60, 60], "excluded": [0, 0]}
    )
    patients = pd.DataFrame({"patient_id": range(60), "end_status": [1] * 20 + [0] * 40})
    table = patient_flow(flow, patients)
    assert "Competing event" not in set(table["step"]) and "Outcome" in set(table["step"])
    texts = [t.get_text() for t in flow_figure(table).axes[0].texts]
    assert not any("Competing" in t for t in texts)


def test_baseline_table_has_no_competing_column_without_competing_events():
    from riskbench.report.baseline_table import baseline_table

    patients = pd.DataFrame({"patient_id": range(40), "end_days": [300.0] * 40, "end_status": [1] * 15 + [0] * 25})
    covs = pd.DataFrame({"patient_id": range(40), "age_at_entry": [50.0 + i for i in range(40)]})
    table = baseline_table(patients, covs, ["age_at_entry"], threshold=10)
    assert list(table.columns) == ["characteristic", "Outcome", "Censored", "All"]
    patients.loc[:11, "end_status"] = 2
    assert "Competing event" in baseline_table(patients, covs, ["age_at_entry"], threshold=10).columns
