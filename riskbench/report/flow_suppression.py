"""Small-count suppression for a cohort flow, where counts are linked by subtraction.

In a flow, each step's exclusion equals the count before it minus the count after it, and the groups the
last box splits into add up to that box. Hiding a small exclusion as ``"<10"`` therefore protects nobody
while the counts on both sides of it are shown. The rules here (common practice for tables linked by
totals) make sure no hidden count can be worked out from the shown ones:

1. An exclusion step that removes fewer than ``threshold`` is merged with the steps after it until the
   merged step removes at least ``threshold``; a small remainder at the end joins the step before it. The
   merged step names every reason it stands for, and only its last remaining count is shown.
2. If all exclusions together stay below ``threshold``, the starting count is withheld as well (shown as
   ``"suppressed"``), since it would give their sum.
3. A remaining count below ``threshold`` is hidden and so is the exclusion that led to it.
4. The groups the last box splits into: while the hidden groups add up to less than ``threshold``, the
   smallest shown group is hidden too (complementary suppression).
"""

from __future__ import annotations

from dataclasses import dataclass

import pandas as pd

from riskbench.report.suppression import complementary_hidden, format_count, is_suppressed

WITHHELD = "suppressed"
FLOW_COLUMNS = ("step", "n_patients", "n_excluded", "level")


@dataclass
class _Step:
    labels: list[str]
    remaining: int
    excluded: int


def _merge_small_steps(steps: list[_Step], threshold: int) -> list[_Step]:
    """Rule 1: merge exclusion steps until each removes at least ``threshold`` (or all are merged)."""
    out: list[_Step] = []
    pending: _Step | None = None
    for step in steps:
        if pending is None:
            pending = _Step(list(step.labels), step.remaining, step.excluded)
        else:
            pending = _Step(pending.labels + step.labels, step.remaining, pending.excluded + step.excluded)
        if not is_suppressed(pending.excluded, threshold):
            out.append(pending)
            pending = None
    if pending is not None:
        if out:
            last = out.pop()
            pending = _Step(last.labels + pending.labels, pending.remaining, last.excluded + pending.excluded)
        out.append(pending)
    return out


def suppress_flow(flow: pd.DataFrame, threshold: int, *, prefix: str = "after excluding: ") -> pd.DataFrame:
    """The flow with small counts hidden so that none can be recovered from the others.

    Parameters
    ----------
    flow : DataFrame
        ``step, n_patients, n_excluded, level`` in order. Level-0 rows form the main column: the first is
        the starting count, each row with ``n_excluded > 0`` is an exclusion step (``n_patients`` remain
        after it) and the last is the final count. Level-1 rows split the final count into groups.
    threshold : int
        Smallest count shown as it is (10 is common practice).
    prefix : str
        Text before the reasons in the label of a merged exclusion step; each step label is expected to
        start with it.

    Returns
    -------
    DataFrame
        ``step, n_patients, n_excluded, level`` with the counts as text: a number, ``"<threshold"`` or
        ``"suppressed"`` (hidden although not small, because it would give a hidden count away).
    """
    missing = set(FLOW_COLUMNS) - set(flow.columns)
    if missing:
        raise ValueError(f"suppress_flow: flow table lacks column(s) {sorted(missing)}; has {list(flow.columns)}")
    main = flow[flow["level"] == 0].reset_index(drop=True)
    split = flow[flow["level"] == 1].reset_index(drop=True)
    if main.empty:
        raise ValueError("suppress_flow: the flow has no level-0 rows (at least a starting count is needed)")
    first, inner, final = main.iloc[0], main.iloc[1:], None
    if len(main) > 1 and main["n_excluded"].iloc[-1] == 0:
        inner, final = main.iloc[1:-1], main.iloc[-1]
    steps = [
        _Step([str(r.step).removeprefix(prefix)], int(r.n_patients), int(r.n_excluded))
        for r in inner.itertuples(index=False)
    ]
    merged = _merge_small_steps(steps, threshold)

    total_excluded = sum(s.excluded for s in merged)
    start_text = format_count(first["n_patients"], threshold)
    if is_suppressed(total_excluded, threshold) and not is_suppressed(first["n_patients"], threshold):
        start_text = WITHHELD  # rule 2
    rows = [(str(first["step"]), start_text, format_count(first["n_excluded"], threshold), 0)]
    for s in merged:
        excluded_text = format_count(s.excluded, threshold)
        if is_suppressed(s.remaining, threshold) and not is_suppressed(s.excluded, threshold):
            excluded_text = WITHHELD  # rule 3
        rows.append((prefix + "; ".join(s.labels), format_count(s.remaining, threshold), excluded_text, 0))
    if final is not None:
        rows.append((str(final["step"]), format_count(final["n_patients"], threshold), "0", 0))
    if len(split):
        counts = split["n_patients"].to_numpy(dtype=float)
        hide = complementary_hidden(counts, threshold)
        for (label, n), hidden in zip(split[["step", "n_patients"]].itertuples(index=False), hide):
            text = (
                (f"<{threshold}" if is_suppressed(n, threshold) else WITHHELD) if hidden else format_count(n, threshold)
            )
            rows.append((str(label), text, "0", 1))
    return pd.DataFrame(rows, columns=list(FLOW_COLUMNS))
