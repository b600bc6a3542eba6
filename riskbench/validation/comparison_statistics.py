"""The numbers of the comparison stage, as numeric DataFrames at full precision (no figures, no formatting).

:func:`risk_matrices` turns the long cross-validated predictions into one risk matrix per model,
:func:`discrimination_table` evaluates them at the report horizons, and :func:`comparison_table` lays the
paired bootstrap comparison of two models out as one row per measure and horizon. Every interval is three
numeric columns (estimate, ``_low``, ``_high``); the report formats them for reading
(:mod:`riskbench.report.display_format`), the CSV files keep the numbers.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from riskbench.time_units import DAYS_PER_YEAR
from riskbench.validation.comparison import Comparison
from riskbench.validation.errors import ValidationInputError
from riskbench.validation.performance import evaluate_risks

#: Measures shown in the comparison table (the validation stage computes a few more).
COMPARISON_METRICS: tuple[str, ...] = (
    "harrell_c",
    "uno_c",
    "auc",
    "brier",
    "scaled_brier",
    "calibration_slope",
    "ici",
    "nri",
    "idi",
)

#: How the comparison table's estimates were obtained (stated in its ``obtained_by`` column).
COMPARISON_OBTAINED_BY = "out-of-bag bootstrap (mean over resamples)"


def difference_name(candidate: str, reference: str) -> str:
    """Column of the comparison table holding the candidate's value minus the reference's."""
    return f"{candidate} minus {reference}"


def risk_matrices(cv: pd.DataFrame, n_rows: int) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    """Horizons (days) and, per model, the ``(n_rows, n_horizons)`` out-of-fold risk matrix.

    Parameters
    ----------
    cv
        Cross-validated predictions ``row, model, horizon, risk`` (horizon in days).
    n_rows
        Rows of the landmark stack the predictions refer to.

    Raises
    ------
    ValidationInputError
        When a model lacks predictions for some rows (the predictions are from another run of stage 3).
    """
    horizons = np.sort(cv["horizon"].unique().astype(float))
    out: dict[str, np.ndarray] = {}
    for model, rows in cv.groupby("model", sort=False):
        wide = rows.pivot(index="row", columns="horizon", values="risk").reindex(index=range(n_rows), columns=horizons)
        if len(set(range(n_rows)) - set(rows["row"])):  # a NaN risk is a complete-case row left unpredicted
            raise ValidationInputError(
                f"cv_predictions: model {model!r} lacks predictions for some rows; rerun stage 3"
            )
        out[str(model)] = wide.to_numpy(float)
    return horizons, out


def prediction_column(horizons: np.ndarray, horizon: float) -> int:
    """Index of ``horizon`` (days) among the predicted ``horizons`` (within a thousandth of a day).

    Raises
    ------
    ValidationInputError
        When the predictions were made at other horizons.
    """
    i = int(np.argmin(np.abs(horizons - horizon)))
    if abs(horizons[i] - horizon) > 1e-3:
        raise ValidationInputError(
            f"no predictions at horizon {horizon} days; rerun stages 2 and 3 with this configuration"
        )
    return i


def discrimination_table(
    time: np.ndarray,
    status: np.ndarray,
    horizons: np.ndarray,
    risks: dict[str, np.ndarray],
    report_days: tuple[float, ...],
    targets: dict[str, str] | None = None,
) -> pd.DataFrame:
    """Every measure of :func:`riskbench.validation.performance.evaluate_risks` at the report horizons.

    Parameters
    ----------
    time, status
        Days from the landmark and 0/1/2 status of each row.
    horizons, risks
        As returned by :func:`risk_matrices`.
    report_days
        Horizons (days) to evaluate.
    targets
        Model -> what its risk estimates (default cumulative incidence).

    Returns
    -------
    pandas.DataFrame
        ``horizon_years, metric`` and one numeric column per model.
    """
    frames = []
    for model, risk in risks.items():
        by_h = {h: risk[:, prediction_column(horizons, h)] for h in report_days}
        frame = evaluate_risks(time, status, by_h, target=(targets or {}).get(model, "cumulative_incidence"))
        frame.insert(0, "model", model)
        frames.append(frame)
    table = pd.concat(frames, ignore_index=True)
    table["horizon_years"] = table.pop("horizon_days") / DAYS_PER_YEAR
    table = table.drop(columns=["threshold"])
    return table.pivot_table(
        index=["horizon_years", "metric"], columns="model", values="value", sort=False, dropna=False
    ).reset_index()


def comparison_table(comparison: Comparison, reference: str, candidate: str) -> pd.DataFrame:
    """One row per measure and horizon: each model's estimate and the difference, with 95% intervals.

    Returns
    -------
    pandas.DataFrame
        ``metric, horizon_years, obtained_by``, then for ``reference``, ``candidate`` and
        :func:`difference_name` three numeric columns each (``<name>``, ``<name>_low``, ``<name>_high``:
        estimate and 95% percentile interval), then ``better_if`` and ``bootstrap_resamples``. A model
        without a value for a measure has NaN there.
    """
    perf = comparison.performance
    diff = comparison.differences
    diff = diff[(diff["reference"] == reference) & (diff["candidate"] == candidate)]
    rows = []
    for r in diff.itertuples(index=False):
        if r.metric not in COMPARISON_METRICS or not np.isnan(r.threshold):
            continue
        row: dict[str, object] = {
            "metric": r.metric,
            "horizon_years": r.horizon_days / DAYS_PER_YEAR,
            "obtained_by": COMPARISON_OBTAINED_BY,
        }
        for name in (reference, candidate):
            p = perf[
                (perf["spec"] == name)
                & (perf["metric"] == r.metric)
                & (perf["horizon_days"] == r.horizon_days)
                & perf["threshold"].isna()
            ]
            values = p[["estimate", "ci_low", "ci_high"]].iloc[0].to_numpy(float) if len(p) else np.full(3, np.nan)
            row.update(_interval_columns(name, *values))
        row.update(_interval_columns(difference_name(candidate, reference), r.estimate, r.ci_low, r.ci_high))
        row["better_if"] = r.better_if
        row["bootstrap_resamples"] = int(r.n_boot)
        rows.append(row)
    return pd.DataFrame(rows)


def _interval_columns(name: str, estimate: float, low: float, high: float) -> dict[str, float]:
    return {name: float(estimate), f"{name}_low": float(low), f"{name}_high": float(high)}
