"""A short description of a cohort folder: counts, median follow-up and an incidence figure.

Median follow-up is estimated by the reverse Kaplan-Meier method (Schemper & Smith 1996, "A note on
quantifying follow-up in studies of failure time", Controlled Clinical Trials 17:343-346): the
Kaplan-Meier estimator with the roles of event and censoring swapped. The figure shows one minus the
Kaplan-Meier estimate of time to the outcome (competing deaths censored) beside the Aalen-Johansen
cumulative incidence of the outcome and of the competing death (Aalen & Johansen 1978, "An
empirical transition matrix for non-homogeneous Markov chains based on censored observations",
Scandinavian Journal of Statistics 5:141-150).
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from pathlib import Path

import matplotlib

matplotlib.use("Agg")  # figures are written to files; no display needed
import matplotlib.pyplot as plt
import numpy as np
import pandas as pd
from lifelines import KaplanMeierFitter

from riskbench.demo.parameters import DAYS_PER_YEAR

STATUS = {"outcome": 1, "competing": 2, "end_of_follow_up": 0}


@dataclass(frozen=True)
class CohortSummary:
    """Counts of a cohort folder; follow-up in years."""

    patients: int
    exams: int
    lab_draws: int
    outcomes: int
    competing_events: int
    censored: int
    median_follow_up_years: float

    def lines(self) -> list[str]:
        return [
            f"patients: {self.patients}",
            f"CT exams: {self.exams}",
            f"lab draws: {self.lab_draws}",
            f"outcomes (confirmed malignancy): {self.outcomes}",
            f"competing events (death from another cause): {self.competing_events}",
            f"censored (discharge, loss, study close): {self.censored}",
            f"median follow-up (reverse Kaplan-Meier): {self.median_follow_up_years:.2f} years",
        ]


def follow_up_table(patients: pd.DataFrame, outcomes: pd.DataFrame) -> pd.DataFrame:
    """One row per patient with a terminal row: ``time`` (days from entry to the first terminal
    event) and ``status`` (0/1/2). Rows with unparseable dates, unknown kinds or unknown patients are
    skipped (the cohort stage accounts for them; this is only a description)."""
    entry = pd.to_datetime(
        patients.drop_duplicates("patient_id").set_index("patient_id")["entry_date"], errors="coerce"
    )
    o = outcomes[outcomes["kind"].isin(list(STATUS))].copy()
    o["when"] = pd.to_datetime(o["date"], errors="coerce", format="%Y-%m-%d")
    o = o[o["when"].notna() & o["patient_id"].isin(entry.index)]
    o["time"] = (o["when"] - entry.loc[o["patient_id"]].to_numpy()).dt.days.astype(float)
    o = o[o["time"] >= 0].sort_values(["patient_id", "time"], kind="stable").drop_duplicates("patient_id")
    return pd.DataFrame(
        {
            "patient_id": o["patient_id"].to_numpy(),
            "time": o["time"].to_numpy(),
            "status": o["kind"].map(STATUS).to_numpy(),
        }
    )


def summarise(patients: pd.DataFrame, measurements: pd.DataFrame, outcomes: pd.DataFrame) -> CohortSummary:
    """Counts and median follow-up of a cohort's input tables."""
    fu = follow_up_table(patients, outcomes)
    reverse = KaplanMeierFitter().fit(fu["time"] / DAYS_PER_YEAR, event_observed=fu["status"] == 0)
    variable = measurements["variable"]
    return CohortSummary(
        patients=int(patients["patient_id"].nunique()),
        exams=int((variable == "nodule_volume").sum()),
        lab_draws=int((variable == "serum_marker").sum()),
        outcomes=int((fu["status"] == 1).sum()),
        competing_events=int((fu["status"] == 2).sum()),
        censored=int((fu["status"] == 0).sum()),
        median_follow_up_years=float(reverse.median_survival_time_),
    )


def aalen_johansen(time: np.ndarray, status: np.ndarray, cause: int) -> pd.DataFrame:
    """Aalen-Johansen cumulative incidence of ``cause`` with competing causes (Aalen & Johansen 1978).

    ``CIF_k(t) = sum over event times t_j <= t of S(t_j-) * d_kj / n_j``, where S is the Kaplan-Meier
    estimate of being free of any event, d_kj the number of cause-k events at t_j and n_j the number
    at risk. Tied times are handled exactly (no jitter).

    Parameters
    ----------
    time : ndarray
        Follow-up time (any unit).
    status : ndarray of int
        0 censored, otherwise the cause code.
    cause : int
        Cause of interest.

    Returns
    -------
    DataFrame
        ``time, cumulative_incidence`` at each distinct event time (of any cause), starting at (0, 0).
    """
    time = np.asarray(time, dtype=float)
    status = np.asarray(status)
    grid, inverse = np.unique(time, return_inverse=True)
    leaving = np.bincount(inverse, minlength=grid.size)
    at_risk = leaving[::-1].cumsum()[::-1]
    events = np.bincount(inverse, weights=status != 0, minlength=grid.size)
    of_cause = np.bincount(inverse, weights=status == cause, minlength=grid.size)
    event_free = np.cumprod(1 - events / at_risk)
    before = np.r_[1.0, event_free[:-1]]
    cif = np.cumsum(before * of_cause / at_risk)
    keep = events > 0
    return pd.DataFrame({"time": np.r_[0.0, grid[keep]], "cumulative_incidence": np.r_[0.0, cif[keep]]})


def incidence_figure(fu: pd.DataFrame) -> plt.Figure:
    """Kaplan-Meier (1 - S) for the outcome and Aalen-Johansen cumulative incidence, in years."""
    years = fu["time"].to_numpy() / DAYS_PER_YEAR
    status = fu["status"].to_numpy()
    fig, (left, right) = plt.subplots(1, 2, figsize=(10, 4), sharey=True)
    km = KaplanMeierFitter().fit(years, event_observed=status == 1, label="outcome (competing death censored)")
    left.step(km.timeline, 1 - km.survival_function_.iloc[:, 0], where="post")
    left.set_title("1 - Kaplan-Meier, time to outcome")
    for cause, label in ((1, "outcome"), (2, "death from another cause")):
        curve = aalen_johansen(years, status, cause)
        right.step(curve["time"], curve["cumulative_incidence"], where="post", label=label)
    right.set_title("Cumulative incidence (Aalen-Johansen)")
    right.legend(loc="upper left")
    for ax in (left, right):
        ax.set_xlabel("years since entry")
        ax.grid(alpha=0.3)
    left.set_ylabel("probability")
    fig.suptitle("Synthetic demo cohort (invented data; research software, not a medical device)", fontsize=9)
    fig.tight_layout()
    return fig


def write_summary(tables: dict[str, pd.DataFrame], out: str | Path) -> tuple[CohortSummary, Path]:
    """Summarise a cohort, write ``summary.json`` and ``incidence.png`` into ``out``."""
    folder = Path(out)
    folder.mkdir(parents=True, exist_ok=True)
    summary = summarise(tables["patients"], tables["measurements"], tables["outcomes"])
    fu = follow_up_table(tables["patients"], tables["outcomes"])
    fig = incidence_figure(fu)
    figure = folder / "incidence.png"
    fig.savefig(figure, dpi=120)
    plt.close(fig)
    record = {k: (None if isinstance(v, float) and not np.isfinite(v) else v) for k, v in asdict(summary).items()}
    pd.Series(record).to_json(folder / "summary.json", indent=2)
    return summary, figure
