"""Example patient timelines under pseudonyms: covariate values as known over follow-up, and how it ended.

Time is shown in years since entry, never as calendar dates, and patients are called "Patient A", "B", ...
Which patients are shown is drawn with a seed, one per way follow-up can end where possible.
"""

from __future__ import annotations

import string
import textwrap
from collections.abc import Callable, Sequence

import matplotlib.pyplot as plt
import numpy as np
import pandas as pd
from matplotlib.lines import Line2D

from riskbench.time_units import DAYS_PER_YEAR

END_LABELS = {0: "end of follow-up", 1: "outcome", 2: "competing event"}
END_COLOURS = {0: "#555555", 1: "#b2182b", 2: "#2166ac"}


def choose_example_patients(counting_process: pd.DataFrame, n: int, seed: int) -> list:
    """Pick ``n`` patient ids, cycling through outcome, competing event and censored, drawn with ``seed``."""
    last = counting_process.sort_values(["patient_id", "stop"]).groupby("patient_id", sort=True).tail(1)
    rng = np.random.default_rng(seed)
    pools = {code: list(last.loc[last["status"] == code, "patient_id"]) for code in (1, 2, 0)}
    for code in pools:
        rng.shuffle(pools[code])
    chosen: list = []
    while len(chosen) < n and any(pools.values()):
        for code in (1, 2, 0):
            if pools[code] and len(chosen) < n:
                chosen.append(pools[code].pop())
    return chosen


def pseudonym(i: int) -> str:
    """``Patient A``, ``Patient B``, ... ``Patient Z``, ``Patient AA``, ..."""
    letters = string.ascii_uppercase
    name = ""
    i += 1
    while i:
        i, r = divmod(i - 1, 26)
        name = letters[r] + name
    return f"Patient {name}"


def timeline_figure(
    counting_process: pd.DataFrame,
    patient_ids: Sequence,
    variables: Sequence[str],
    labels: Callable[[str], str] | None = None,
) -> plt.Figure:
    """One row of panels per example patient, one panel per variable, values as known over time.

    Each column is titled with the variable's label and unit (``labels``; the column name without it), the
    time axis is in years since entry, and one legend below the panels names only the endings shown (no
    competing-event entry when none of the patients had one), so no legend covers the data.

    Parameters
    ----------
    counting_process
        Rows ``patient_id, start, stop, status`` (days) with the covariates as known at ``start``.
    patient_ids
        The patients to draw (shown as Patient A, B, ... in this order; the ids are not drawn).
    variables
        Time-varying covariate columns to draw (at most four are used).
    labels
        Readable label (with unit) of a column, e.g. ``CohortSpec.label``; drawn as plain text.
    """
    variables = [v for v in variables if v in counting_process.columns][:4] or ["status"]
    n_rows = max(len(patient_ids), 1)
    fig, axes = plt.subplots(
        n_rows, len(variables), figsize=(3.2 * len(variables), 2.1 * n_rows + 0.5), squeeze=False, sharex="row"
    )
    ends: set[int] = set()
    for i, pid in enumerate(patient_ids):
        rows = counting_process[counting_process["patient_id"] == pid].sort_values("start")
        end_time = float(rows["stop"].max()) / DAYS_PER_YEAR
        end_status = int(rows["status"].iloc[-1])
        ends.add(end_status)
        for j, var in enumerate(variables):
            ax = axes[i, j]
            start = rows["start"].to_numpy(float) / DAYS_PER_YEAR
            stop = rows["stop"].to_numpy(float) / DAYS_PER_YEAR
            value = pd.to_numeric(rows[var], errors="coerce").to_numpy(float)
            for a, b, v in zip(start, stop, value):
                if np.isfinite(v):
                    ax.hlines(v, a, b, colors="#333333", linewidth=1.5)
            changed = np.r_[True, value[1:] != value[:-1]] & np.isfinite(value)
            ax.plot(start[changed], value[changed], "o", color="#4d9221", markersize=3.5)
            ax.axvline(end_time, color=END_COLOURS.get(end_status, "#555555"), linestyle="--", linewidth=1.2)
            if i == 0:
                title = labels(var) if labels is not None and var != "status" else var.replace("_", " ")
                ax.set_title(textwrap.fill(title, 34), fontsize=8.5, parse_math=False)
            if j == 0:
                ax.set_ylabel(pseudonym(i), fontsize=9)
            ax.tick_params(labelsize=7)
            if i == n_rows - 1:
                ax.set_xlabel("years since entry", fontsize=8)
    handles = [Line2D([], [], marker="o", linestyle="", color="#4d9221", markersize=3.5, label="new value known")]
    handles += [
        Line2D([], [], linestyle="--", color=END_COLOURS[c], label=END_LABELS[c])
        for c in sorted(ends)
        if c in END_LABELS
    ]
    fig.legend(handles=handles, loc="lower center", ncol=len(handles), fontsize=7, frameon=False)
    fig.tight_layout(rect=(0, 0.35 / fig.get_figheight(), 1, 1))
    return fig
