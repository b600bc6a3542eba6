"""No hidden small count can be worked out from the shown ones: baseline table, landmark table, flow.

Complementary suppression and rounding are common practice in statistical disclosure control (e.g. the
Eurostat/ONS handbooks on tabular data protection). The attacker of these tests reads only the shown table,
knows how its counts add up (groups to ``All``; ones + zeros + missing to the group size; a flow's steps),
and solves every sum with a single unknown, again and again; the true counts come from the data.
"""

from __future__ import annotations

import itertools
import re

import numpy as np
import pandas as pd
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from riskbench.report.baseline_table import baseline_table
from riskbench.report.flow_suppression import suppress_flow
from riskbench.report.suppression import coarsen_sequence, linked_suppression
from riskbench.workflow.stage_cohort import landmark_summary

GROUPS = {1: "Outcome", 2: "Competing event", 0: "Censored"}


def _shown_number(text: str) -> int | None:
    m = re.fullmatch(r"(\d+)( \(\d+%\))?", text)
    return int(m.group(1)) if m else None


def _solve(relations, known: dict) -> dict:
    """Every cell an attacker obtains from ``known`` through sums with a single unknown cell."""
    known = dict(known)
    changed = True
    while changed:
        changed = False
        for parts, total in relations:
            unknown = [c for c in (*parts, total) if c not in known]
            if len(unknown) == 1:
                c = unknown[0]
                if c == total:
                    known[c] = sum(known[p] for p in parts)
                else:
                    known[c] = known[total] - sum(known[p] for p in parts if p != c)
                changed = True
    return known


def test_the_example_of_the_issue_is_no_longer_solvable():
    """sex male = 1: 207, <10, 1135, all 1345 gave the hidden 3."""
    cells = {"a": 207, "b": 3, "c": 1135, "all": 1345}
    hide = linked_suppression(cells, [(("a", "b", "c"), "all")], 10)
    assert hide == {"a", "b"}
    assert set(_solve([(("a", "b", "c"), "all")], {k: v for k, v in cells.items() if k not in hide})) == {"c", "all"}


def test_a_small_sum_of_hidden_parts_is_protected_too():
    cells = {"a": 3, "b": 4, "c": 500, "all": 507}
    assert linked_suppression(cells, [(("a", "b", "c"), "all")], 10) == {"a", "b", "c"}


@st.composite
def small_cohorts(draw):
    n = draw(st.integers(3, 70))
    seed = draw(st.integers(0, 2**31))
    rng = np.random.default_rng(seed)
    p_status = rng.dirichlet([1.0, 1.0, 1.0])
    status = rng.choice([1, 2, 0], size=n, p=p_status)
    male = rng.integers(0, 2, n).astype(float)
    male[rng.random(n) < draw(st.sampled_from([0.0, 0.05, 0.3]))] = np.nan
    marker = rng.normal(5, 1, n)
    marker[rng.random(n) < draw(st.sampled_from([0.0, 0.1, 0.5]))] = np.nan
    threshold = draw(st.sampled_from([3, 5, 10]))
    patients = pd.DataFrame(
        {"patient_id": [f"R{i:05d}" for i in range(n)], "end_days": rng.uniform(1, 1500, n), "end_status": status}
    )
    covs = pd.DataFrame({"patient_id": patients["patient_id"], "sex_male": male, "marker": marker})
    return patients, covs, threshold


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(small_cohorts())
def test_no_hidden_baseline_count_follows_from_the_shown_ones(cohort):
    patients, covs, threshold = cohort
    table = baseline_table(patients, covs, ["sex_male", "marker"], threshold=threshold).set_index("characteristic")
    merged = patients.merge(covs, on="patient_id")
    columns = [*GROUPS.values(), "All"]
    group_rows = {g: merged[merged["end_status"] == code] for code, g in GROUPS.items()} | {"All": merged}

    truth, relations, shown = {}, [], {}
    for g in columns:
        truth[("size", g)] = len(group_rows[g])
    relations.append((tuple(("size", g) for g in GROUPS.values()), ("size", "All")))
    rows = {("size",): "Patients, n"}
    for cov, one_row in (("sex_male", "sex_male = 1, n (%)"), ("marker", None)):
        if merged[cov].nunique() <= 1:
            continue  # the same for everyone (or all missing): left out of the table
        for g in columns:
            v = group_rows[g][cov]
            truth[(cov, "one", g)] = int((v == 1).sum()) if one_row else 0
            truth[(cov, "missing", g)] = int(v.isna().sum())
            truth[(cov, "other", g)] = len(v) - truth[(cov, "one", g)] - truth[(cov, "missing", g)]
        for c in ("one", "other", "missing"):
            relations.append((tuple((cov, c, g) for g in GROUPS.values()), (cov, c, "All")))
        for g in columns:
            relations.append((tuple((cov, c, g) for c in ("one", "other", "missing")), ("size", g)))
        if one_row:
            rows[(cov, "one")] = one_row
        if f"{cov} missing, n" in table.index:
            rows[(cov, "missing")] = f"{cov} missing, n"
        else:  # no missing value anywhere: the row is left out, and its zeros are known
            shown.update({(cov, "missing", g): 0 for g in columns})
        if not one_row:
            shown.update({(cov, "one", g): 0 for g in columns})
    hidden = []
    for key, label in rows.items():
        for g in columns:
            cell = (*key, g)
            value = _shown_number(table.loc[label, g]) if g in table.columns else 0  # absent group: no patients
            if value is None:
                hidden.append(cell)
            else:
                assert value == truth[cell] and not 0 < value < threshold
                shown[cell] = value
    derived = _solve(relations, shown)
    for cell in hidden:
        assert cell not in derived, (cell, truth[cell], table.to_string())
    # the never-shown zeros / observed counts must not give a small count away either
    for cell, value in truth.items():
        if cell[1:2] == ("other",) and 0 < value < threshold:
            assert cell not in derived, (cell, value, table.to_string())


@st.composite
def landmark_stacks(draw):
    n = draw(st.integers(1, 80))
    rng = np.random.default_rng(draw(st.integers(0, 2**31)))
    end = rng.exponential(draw(st.sampled_from([200.0, 800.0, 3000.0])), n)
    status = rng.choice([0, 1, 2], n)
    horizon = 730.5
    rows = []
    for s in (0.0, 182.625, 365.25, 547.875, 730.5):
        for i in np.flatnonzero(end > s):
            within = end[i] - s <= horizon
            rows.append(
                {
                    "patient_id": f"R{i}",
                    "landmark": s,
                    "time": min(end[i] - s, horizon),
                    "status": int(status[i]) if within else 0,
                }
            )
    return pd.DataFrame(rows, columns=["patient_id", "landmark", "time", "status"]), draw(st.sampled_from([5, 10]))


@settings(max_examples=150, deadline=None)
@given(landmark_stacks())
def test_no_small_difference_between_consecutive_landmark_counts(case):
    stack, threshold = case
    assume(not stack.empty)
    table = landmark_summary(stack, threshold)
    for column in [c for c in ("at_risk", "outcomes", "competing_events") if c in table.columns]:
        values = [int(v.lstrip("~")) if re.fullmatch(r"~?\d+", v) else None for v in table[column]]
        for v in values:
            assert v is None or not 0 < v < threshold
        for a, b in itertools.pairwise(values):
            if a is not None and b is not None:
                assert a == b or abs(a - b) >= threshold, (column, values)


def test_coarsening_only_when_a_small_step_appears():
    assert coarsen_sequence([3000, 2950, 2800], 10) == ["3000", "2950", "2800"]
    assert coarsen_sequence([60, 57, 55, 3, 0], 10) == ["~60", "~60", "~60", "<10", "0"]


@st.composite
def flows(draw):
    start = draw(st.integers(0, 400))
    steps, remaining = [], start
    for i in range(draw(st.integers(0, 6))):
        excluded = draw(st.integers(0, max(remaining, 0)))
        if excluded == 0:
            continue
        remaining -= excluded
        steps.append((f"after excluding: r{i}", remaining, excluded, 0))
    shares = draw(st.lists(st.integers(0, 100), min_size=3, max_size=3))
    total = max(sum(shares), 1)
    split = [remaining * s // total for s in shares]
    split[-1] = remaining - sum(split[:-1])
    rows = [("read", start, 0, 0), *steps, ("included", remaining, 0, 0)]
    rows += [(f"group{k}", n, 0, 1) for k, n in enumerate(split)]
    return pd.DataFrame(rows, columns=["step", "n_patients", "n_excluded", "level"]), draw(st.sampled_from([5, 10]))


@settings(max_examples=200, deadline=None)
@given(flows())
def test_no_hidden_flow_count_follows_from_the_shown_ones(case):
    flow, threshold = case
    shown_table = suppress_flow(flow, threshold)
    truth_excluded = dict(zip(flow["step"].str.removeprefix("after excluding: "), flow["n_excluded"]))
    truth_remaining = dict(zip(flow["step"].str.removeprefix("after excluding: "), flow["n_patients"]))
    main = shown_table[shown_table["level"] == 0].reset_index(drop=True)
    split = shown_table[shown_table["level"] == 1].reset_index(drop=True)
    truth, shown, relations = {}, {}, []
    for i, row in main.iterrows():
        reasons = str(row["step"]).removeprefix("after excluding: ").split("; ")
        truth[("n", i)] = truth_remaining[reasons[-1]]
        truth[("x", i)] = sum(truth_excluded[r] for r in reasons)
        for key, text in ((("n", i), row["n_patients"]), (("x", i), row["n_excluded"])):
            if text.isdigit():
                shown[key] = int(text)
        if 0 < i < len(main) - 1 or (i == len(main) - 1 and truth[("x", i)] == 0 and i > 0):
            # remaining before the step = remaining after it + excluded by it
            relations.append(((("n", i), ("x", i)), ("n", i - 1)))
    for k, row in split.iterrows():
        truth[("g", k)] = int(flow[flow["level"] == 1]["n_patients"].iloc[k])
        if row["n_patients"].isdigit():
            shown[("g", k)] = int(row["n_patients"])
    if len(split):
        relations.append((tuple(("g", k) for k in range(len(split))), ("n", len(main) - 1)))
    for key, value in shown.items():
        assert value == truth[key] and not 0 < value < threshold
    derived = _solve(relations, shown)
    for key, value in truth.items():
        if 0 < value < threshold:
            assert key not in derived, (key, value, shown_table.to_string())
