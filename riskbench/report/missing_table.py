"""Missing-data tables of the report: how often each covariate is missing, and what complete cases drop.

* :func:`missing_data_table` -- per covariate and landmark: rows, rows with the value missing and observed,
  the share missing, and the median staleness (days since the carried value was dated) of the observed
  values. A value is missing at a landmark when the patient has none yet or the last one is older than the
  carry-forward limit (``[cohort] max_carry``).
* :func:`complete_case_table` -- per model using complete cases and per landmark: rows, rows dropped for a
  missing covariate and the patients they belong to.

Counts of people pass through :func:`riskbench.report.suppression.suppress_counts`: missing and observed
rows of one landmark add up to the shown total, so they are suppressed together (complementary), and the
share and the median staleness are blanked with a hidden count.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence

import numpy as np
import pandas as pd

from riskbench.models.risk_contract import source_variable
from riskbench.report.suppression import complementary_hidden, suppress_counts
from riskbench.time_units import DAYS_PER_YEAR

__all__ = ["complete_case_table", "missing_data_table"]

MISSING_COLUMNS = [
    "covariate",
    "landmark_years",
    "rows",
    "rows_missing",
    "rows_observed",
    "share_missing",
    "median_staleness_days",
]
COMPLETE_CASE_COLUMNS = ["model", "landmark_years", "rows", "rows_dropped", "rows_kept", "patients_dropped"]


def _staleness_lookup(covariates: Sequence[str], staleness_columns: Mapping[str, str] | Sequence[str]) -> dict:
    if isinstance(staleness_columns, Mapping):
        return {c: staleness_columns.get(c) for c in covariates}
    available = set(staleness_columns)
    return {
        c: f"{source_variable(c)}_staleness_days" if f"{source_variable(c)}_staleness_days" in available else None
        for c in covariates
    }


def _landmarks(stack: pd.DataFrame) -> np.ndarray:
    if "landmark" in stack.columns:
        return pd.to_numeric(stack["landmark"], errors="coerce").to_numpy(dtype=float)
    return np.zeros(len(stack))


def _hide_pair(table: pd.DataFrame, first: str, second: str, threshold: int) -> np.ndarray:
    """Rows where the pair (first, second) of counts adding up to a shown total is partly hidden."""
    values = table[[first, second]].to_numpy(dtype=float)
    return np.array([complementary_hidden(row, threshold).any() for row in values], dtype=bool)


def missing_data_table(
    stack: pd.DataFrame,
    covariates: Sequence[str],
    staleness_columns: Mapping[str, str] | Sequence[str],
    *,
    threshold: int | None = None,
    labels: Callable[[str], str] | None = None,
) -> pd.DataFrame:
    """Share missing and median staleness per covariate and landmark.

    Parameters
    ----------
    stack : pandas.DataFrame
        Landmark stack (``landmark`` in days) with the covariates and the ``<variable>_staleness_days``
        columns of the time-varying variables.
    covariates : sequence of str
        Covariate columns to describe (those of the configured models).
    staleness_columns : mapping or sequence of str
        ``covariate -> staleness column``, or the staleness columns of the table (matched to a covariate
        through its variable: ``log_x_change`` -> ``x_staleness_days``). Static covariates have none.
    threshold : int, optional
        Small-count threshold; counts become text with small ones hidden (None: numbers, nothing hidden).
    labels : callable, optional
        Readable label of a covariate column (e.g. ``CohortSpec.label``); adds a ``label`` column.

    Returns
    -------
    pandas.DataFrame
        ``covariate, [label,] landmark_years, rows, rows_missing, rows_observed, share_missing (0-1),
        median_staleness_days`` (NaN where the covariate has no staleness column or no observed value).
    """
    lookup = _staleness_lookup(covariates, staleness_columns)
    landmarks = _landmarks(stack)
    rows = []
    for covariate in covariates:
        if covariate not in stack.columns:
            continue
        values = pd.to_numeric(stack[covariate], errors="coerce").to_numpy(dtype=float)
        column = lookup.get(covariate)
        staleness = (
            pd.to_numeric(stack[column], errors="coerce").to_numpy(dtype=float)
            if column is not None and column in stack.columns
            else None
        )
        for s in np.unique(landmarks):
            at = landmarks == s
            missing = at & np.isnan(values)
            observed = at & ~np.isnan(values)
            carried = staleness[observed] if staleness is not None else np.empty(0)
            carried = carried[np.isfinite(carried)]
            rows.append(
                {
                    "covariate": covariate,
                    "landmark_years": round(float(s) / DAYS_PER_YEAR, 4),
                    "rows": int(at.sum()),
                    "rows_missing": int(missing.sum()),
                    "rows_observed": int(observed.sum()),
                    "share_missing": float(missing.sum() / at.sum()) if at.any() else np.nan,
                    "median_staleness_days": float(np.median(carried)) if len(carried) else np.nan,
                }
            )
    table = pd.DataFrame(rows, columns=MISSING_COLUMNS)
    if labels is not None:
        table.insert(1, "label", [labels(c) for c in table["covariate"]])
    if threshold is None or table.empty:
        return table
    hidden = _hide_pair(table, "rows_missing", "rows_observed", threshold)
    table.loc[hidden, ["share_missing", "median_staleness_days"]] = np.nan
    small_total = (table["rows"] > 0) & (table["rows"] < threshold)
    table.loc[small_total, ["share_missing", "median_staleness_days"]] = np.nan
    shown = suppress_counts(table, ["rows_missing", "rows_observed"], threshold, complementary=True)
    return suppress_counts(shown, ["rows"], threshold)


def complete_case_table(
    stack: pd.DataFrame, models: Mapping[str, Sequence[str]], *, threshold: int | None = None
) -> pd.DataFrame:
    """Rows each complete-case model leaves out, per landmark.

    Parameters
    ----------
    stack : pandas.DataFrame
        Landmark stack (the rows the models are evaluated on).
    models : mapping
        Model name -> its covariates (only the models that use complete cases).
    threshold : int, optional
        Small-count threshold (None: numbers, nothing hidden).

    Returns
    -------
    pandas.DataFrame
        ``model, landmark_years, rows, rows_dropped, rows_kept, patients_dropped``.
    """
    landmarks = _landmarks(stack)
    patients = stack["patient_id"].to_numpy() if "patient_id" in stack.columns else np.arange(len(stack))
    rows = []
    for name, covariates in models.items():
        present = [c for c in covariates if c in stack.columns]
        values = stack[present].apply(pd.to_numeric, errors="coerce").to_numpy(dtype=float)
        dropped = np.isnan(values).any(axis=1) if present else np.zeros(len(stack), dtype=bool)
        for s in np.unique(landmarks):
            at = landmarks == s
            rows.append(
                {
                    "model": name,
                    "landmark_years": round(float(s) / DAYS_PER_YEAR, 4),
                    "rows": int(at.sum()),
                    "rows_dropped": int((at & dropped).sum()),
                    "rows_kept": int((at & ~dropped).sum()),
                    "patients_dropped": int(pd.Series(patients[at & dropped]).nunique()),
                }
            )
    table = pd.DataFrame(rows, columns=COMPLETE_CASE_COLUMNS)
    if threshold is None or table.empty:
        return table
    shown = suppress_counts(table, ["rows_dropped", "rows_kept"], threshold, complementary=True)
    return suppress_counts(shown, ["rows", "patients_dropped"], threshold)
