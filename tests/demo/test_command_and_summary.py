"""Command line of the demo stage and the cohort summary (reverse Kaplan-Meier, Aalen-Johansen)."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from lifelines import AalenJohansenFitter, KaplanMeierFitter

from riskbench.demo import generate_cohort, read_tables, write_cohort
from riskbench.demo.summary import aalen_johansen, follow_up_table, summarise
from riskbench.workflow.cli import main


def test_simulate_then_summarise_from_the_command_line(tmp_path, capsys):
    out = tmp_path / "cohort"
    assert main(["simulate-cohort", "--patients", "220", "--seed", "3", "--variant", "messy", "--out", str(out)]) == 0
    assert (
        main(
            [
                "simulate-cohort",
                "--patients",
                "220",
                "--seed",
                "3",
                "--out",
                str(tmp_path / "clean"),
                "--risk-paths",
                "3",
            ]
        )
        == 0
    )
    for name in ("patients", "measurements", "outcomes"):
        assert (out / f"{name}.csv").exists() and (out / f"{name}.parquet").exists()
    assert json.loads((out / "defects.json").read_text())["patients"]["no_follow_up"] >= 1
    truth = json.loads((tmp_path / "clean" / "truth.json").read_text())
    assert truth["seed"] == 3 and truth["coefficients"]["suspicion_score"] == 3.5
    assert len(pd.read_parquet(tmp_path / "clean" / "true_risk.parquet")) > 220
    capsys.readouterr()
    assert main(["demo-summary", "--data", str(tmp_path / "clean"), "--out", str(tmp_path / "summary")]) == 0
    text = capsys.readouterr().out
    assert "patients: 220" in text and "median follow-up" in text
    assert (tmp_path / "summary" / "incidence.png").stat().st_size > 10_000
    assert json.loads((tmp_path / "summary" / "summary.json").read_text())["patients"] == 220


@pytest.mark.parametrize(
    ("argv", "needle"),
    [
        (["simulate-cohort", "--patients", "-4", "--out", "x"], "n_patients"),
        (["simulate-cohort", "--patients", "10", "--risk-paths", "-1", "--out", "x"], "n_risk_paths"),
        (["demo-summary", "--data", "no/such/folder", "--out", "x"], "--data"),
    ],
)
def test_command_line_errors_are_one_line(argv, needle, capsys, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    assert main(argv) == 2
    err = capsys.readouterr().err.strip()
    assert needle in err and "\n" not in err and "Traceback" not in err


def test_written_files_read_back_equal(tmp_path):
    cohort = generate_cohort(120, seed=8, n_risk_paths=0)
    write_cohort(cohort, tmp_path)
    back = read_tables(tmp_path)
    for name in ("patients", "measurements", "outcomes"):
        pd.testing.assert_frame_equal(back[name], getattr(cohort, name))
    text = read_tables(tmp_path, fmt="csv")
    np.testing.assert_array_equal(text["measurements"]["value"].astype(float), cohort.measurements["value"])
    with pytest.raises(FileNotFoundError, match="simulate-cohort"):
        read_tables(tmp_path / "empty")


def test_summary_counts_and_reverse_kaplan_meier_median():
    """Median follow-up by the reverse Kaplan-Meier method (Schemper & Smith 1996): lifelines'
    Kaplan-Meier with censoring as the event."""
    cohort = generate_cohort(300, seed=6, n_risk_paths=0)
    s = summarise(cohort.patients, cohort.measurements, cohort.outcomes)
    kinds = cohort.outcomes["kind"].value_counts()
    assert (s.patients, s.outcomes, s.competing_events) == (300, kinds.get("outcome", 0), kinds.get("competing", 0))
    assert s.exams == (cohort.measurements["variable"] == "nodule_volume").sum()
    fu = follow_up_table(cohort.patients, cohort.outcomes)
    reverse = KaplanMeierFitter().fit(fu["time"] / 365.25, event_observed=fu["status"] == 0)
    assert s.median_follow_up_years == pytest.approx(reverse.median_survival_time_)
    assert 3 < s.median_follow_up_years < 9


def test_aalen_johansen_agrees_with_lifelines_without_ties():
    """On untied times lifelines' AalenJohansenFitter needs no jitter, so both must agree to 1e-12
    (Aalen & Johansen 1978)."""
    rng = np.random.default_rng(0)
    time = rng.exponential(5.0, 400)
    status = rng.choice([0, 1, 2], size=400, p=[0.4, 0.35, 0.25])
    ours = aalen_johansen(time, status, 1)
    ref = AalenJohansenFitter(calculate_variance=False).fit(time, status, event_of_interest=1)
    ref_at = ref.cumulative_density_.iloc[:, 0]
    at = np.searchsorted(ref_at.index.to_numpy(), ours["time"].to_numpy(), side="right") - 1
    np.testing.assert_allclose(ours["cumulative_incidence"], ref_at.to_numpy()[at], atol=1e-12)
    # ties are handled exactly: all events at one time give the empirical proportion
    tied = aalen_johansen(np.ones(10), np.array([1] * 3 + [2] * 2 + [0] * 5), 1)
    assert tied["cumulative_incidence"].iloc[-1] == pytest.approx(0.3)
