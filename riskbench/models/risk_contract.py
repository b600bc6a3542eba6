"""The one prediction contract every riskbench model satisfies, and the arithmetic behind it.

The contract
------------
A *prediction row* holds one patient's covariates as known at a time ``s`` (days since entry): a landmark
(column ``landmark``), or the start of a counting-process interval (column ``start``); a table with neither
column means ``s = 0``. Every model (``CoxModel``, ``LandmarkSupermodel``, ``SurvivalForest``) offers

``fit(table) -> self``
    learns from a counting-process table or a landmark stack (scikit-learn style: the constructor only
    stores parameters; fitted attributes end in ``_``).
``predict_risk(table, horizon) -> ndarray`` of shape ``(n_rows,)``
    the probability of the outcome (status 1) in ``(s, s + horizon]`` for each row, ``horizon`` in days.
    With a competing event this is the cumulative incidence of the outcome (the competing event removes the
    patient from risk), never ``1 - survival`` of a model that treats the competing event as censoring,
    unless the model's documentation says so (the survival forest does, and says so).
``predict_curve(table, times) -> ndarray`` of shape ``(n_rows, len(times))``
    the same risk for every horizon in ``times`` (days from ``s``); non-decreasing along each row.

Rows need only the model's covariates (and ``landmark``/``start`` where the model uses ``s``): patients that
were not in the fitting data are predicted the same way as those that were -- that is how a model is used.
:func:`risk_curve` gives a curve for any model that only implements ``predict_risk``.

Helpers here turn cumulative hazards into risk over ``(s, s + w]`` (:func:`risk_from_cumulative_hazard`),
evaluate step functions (:func:`step_function_at`), and combine cause-specific hazard increments into the
cumulative incidence of the outcome by the Aalen–Johansen product-integral (:func:`cumulative_incidence`).
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Protocol, runtime_checkable

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from riskbench.errors import RiskbenchError
from riskbench.models.incidence_kernel import incidence_at_columns

__all__ = [
    "MISSING_DATA_KEYS",
    "ModelInputError",
    "RiskModel",
    "check_covariates",
    "check_horizon",
    "check_stack_outcome",
    "covariate_values",
    "cumulative_incidence",
    "cumulative_incidence_at",
    "describe_rows",
    "prediction_origin",
    "risk_curve",
    "risk_from_cumulative_hazard",
    "source_variable",
    "step_function_at",
]


class ModelInputError(RiskbenchError):
    """A table or argument handed to a model cannot be used; the message names the column, rows and fix."""


@runtime_checkable
class RiskModel(Protocol):
    """What every riskbench model offers (see the module docstring for the meaning of each method)."""

    def fit(self, table: pd.DataFrame) -> RiskModel: ...

    def predict_risk(self, table: pd.DataFrame, horizon: float) -> np.ndarray: ...


def prediction_origin(table: pd.DataFrame) -> np.ndarray:
    """Time ``s`` (days since entry) from which each row's risk is predicted.

    ``landmark`` if the table has it, else ``start``, else zeros.
    """
    for column in ("landmark", "start"):
        if column in table.columns:
            values = pd.to_numeric(table[column], errors="coerce").to_numpy(dtype=float)
            bad = ~np.isfinite(values)
            if bad.any():
                raise ModelInputError(
                    f"column '{column}' is missing or not a number in {describe_rows(table, bad)}; give every "
                    "prediction row its time s in days since entry (the cohort stage's landmark stack has it)"
                )
            return values
    return np.zeros(len(table))


#: Configuration keys that decide what happens to a missing covariate value (named in every message about one).
MISSING_DATA_KEYS = "[missing_data] method (or [[models]] missing_data for one model)"

_DERIVED_PREFIXES = ("log_",)
_DERIVED_SUFFIXES = ("_slope_per_year", "_staleness_days", "_previous", "_change")


def source_variable(column: str) -> str:
    """The configured variable behind a covariate column (``log_x_change`` -> ``x``), for messages."""
    name = column
    for suffix in _DERIVED_SUFFIXES:
        if name.endswith(suffix) and len(name) > len(suffix):
            name = name[: -len(suffix)]
            break
    for prefix in _DERIVED_PREFIXES:
        if name.startswith(prefix) and len(name) > len(prefix):
            name = name[len(prefix) :]
    return name


def describe_rows(table: pd.DataFrame, rows: np.ndarray) -> str:
    """``"41 rows of 38 patients at landmarks 0, 0.5 years"``: the rows of a mask in the user's terms."""
    from riskbench.time_units import DAYS_PER_YEAR

    rows = np.asarray(rows, dtype=bool)
    text = f"{int(rows.sum())} row(s)"
    if "patient_id" in table.columns:
        text += f" of {int(pd.Series(table['patient_id'].to_numpy()[rows]).nunique())} patient(s)"
    for column, label in (("landmark", "landmarks"), ("start", "interval starts")):
        if column in table.columns:
            times = np.unique(pd.to_numeric(table[column], errors="coerce").to_numpy(dtype=float)[rows])
            times = times[np.isfinite(times)]
            shown = ", ".join(f"{t / DAYS_PER_YEAR:.4g}" for t in times[:8]) + (", ..." if len(times) > 8 else "")
            text += f" at {label} {shown} years"
            break
    return text


def covariate_values(
    table: pd.DataFrame, covariates: Sequence[str], *, what: str = "table", allow_missing: bool = False
) -> np.ndarray:
    """Return the covariate matrix (float, ``(n_rows, p)``), NaN where a value is missing.

    Parameters
    ----------
    table : pandas.DataFrame
    covariates : sequence of str
    what : str
        How the table is named in messages ("landmark stack", "prediction table", ...).
    allow_missing : bool
        Keep missing values as NaN (a missing-data method handles them) instead of refusing them.

    Raises
    ------
    ModelInputError
        If a column is absent; if a value is non-numeric or infinite (a data problem: the message names the
        variable's ``range`` and ``transform`` keys); or, unless ``allow_missing``, if a value is missing (the
        message names the variable, the rows, patients and landmarks affected and the missing-data keys).
    """
    absent = [c for c in covariates if c not in table.columns]
    if absent:
        raise ModelInputError(
            f"{what} lacks covariate column(s) {absent}; it has {list(table.columns)[:20]}. Check the model's "
            "covariates ([[models]] covariates) against the columns the cohort stage creates."
        )
    matrix = np.empty((len(table), len(covariates)))
    for j, name in enumerate(covariates):
        raw = table[name]
        values = pd.to_numeric(raw, errors="coerce").to_numpy(dtype=float)
        blank = raw.isna().to_numpy()
        invalid = ~np.isfinite(values) & ~blank
        variable = source_variable(name)
        if invalid.any():
            raise ModelInputError(
                f"{what}: covariate '{name}' holds non-numeric or infinite values in "
                f"{describe_rows(table, invalid)}; check the source values of '{variable}' and its plausible "
                f"range and transform ([cohort.variables.{variable}] range, transform)"
            )
        if blank.any() and not allow_missing:
            raise ModelInputError(
                f"{what}: covariate '{name}' (variable '{variable}') is missing in "
                f"{describe_rows(table, blank)}; choose how missing values are handled with "
                f"{MISSING_DATA_KEYS}: 'multiple_imputation', 'complete_cases' or 'missing_indicator' "
                f"(a longer carry-forward limit, [cohort] max_carry, also leaves fewer values missing)"
            )
        matrix[:, j] = values
    return matrix


def check_covariates(table: pd.DataFrame, covariates: Sequence[str], *, what: str = "table") -> np.ndarray:
    """Return the covariate matrix (float, ``(n_rows, p)``), refusing absent columns or missing values.

    Raises
    ------
    ModelInputError
        See :func:`covariate_values` (with ``allow_missing=False``).
    """
    return covariate_values(table, covariates, what=what, allow_missing=False)


def check_stack_outcome(stack: pd.DataFrame, required: Sequence[str] = ()) -> tuple[np.ndarray, np.ndarray]:
    """Return ``time`` (days from the landmark, > 0) and ``status`` (0/1/2) of a landmark stack.

    Raises
    ------
    ModelInputError
        If ``time``, ``status`` or a ``required`` column is missing, or rows have time <= 0 or another status.
    """
    for column in (*required, "time", "status"):
        if column not in stack.columns:
            raise ModelInputError(f"landmark stack lacks column '{column}'; build it with Cohort.landmark_stack(...)")
    time = pd.to_numeric(stack["time"], errors="coerce").to_numpy(dtype=float)
    status = pd.to_numeric(stack["status"], errors="coerce").to_numpy()
    bad = ~np.isfinite(time) | (time <= 0) | ~np.isin(status, (0, 1, 2))
    if bad.any():
        raise ModelInputError(
            f"landmark stack: {describe_rows(stack, bad)} have a time <= 0 days or a status other than 0 "
            "(censored), 1 (outcome) or 2 (competing event); the cohort stage never makes such rows -- build the "
            "stack with Cohort.landmark_stack(...) and map the outcome kinds with [cohort] kind_map"
        )
    return time, status.astype(int)


def check_horizon(horizon: float, limit: float | None = None) -> float:
    """Validate a horizon in days: positive, finite and (if given) not beyond the fitted follow-up ``limit``."""
    try:
        value = float(horizon)
    except (TypeError, ValueError) as exc:
        raise ModelInputError(f"horizon must be a number of days, got {horizon!r}") from exc
    if not np.isfinite(value) or value <= 0:
        raise ModelInputError(f"horizon must be a positive number of days, got {horizon!r}")
    if limit is not None and value > limit * (1 + 1e-9):
        raise ModelInputError(
            f"horizon {value:g} days is beyond the {limit:g} days of follow-up the model was fitted on; "
            "refit on a landmark stack built with a horizon at least this long"
        )
    return value


def step_function_at(jump_times: ArrayLike, values: ArrayLike, at: ArrayLike) -> np.ndarray:
    """Value of a right-continuous step function at ``at`` (0 before the first jump).

    Parameters
    ----------
    jump_times : array, shape (m,)
        Sorted times (days) where the function jumps to ``values``.
    values : array, shape (m,) or (n, m)
        Function value from each jump time on (one row per subject if 2-D).
    at : array, shape (k,)
        Times (days) to evaluate.

    Returns
    -------
    ndarray, shape (k,) or (n, k)
    """
    jump_times = np.asarray(jump_times, dtype=float)
    values = np.asarray(values, dtype=float)
    index = np.searchsorted(jump_times, np.asarray(at, dtype=float), side="right") - 1
    padded = np.concatenate([np.zeros(values.shape[:-1] + (1,)), values], axis=-1)
    return padded[..., index + 1]


def risk_from_cumulative_hazard(cumhaz: ArrayLike) -> np.ndarray:
    """Risk ``1 - exp(-H)`` over an interval whose cumulative hazard is ``H`` (e.g. ``H(s + w) - H(s)``)."""
    return -np.expm1(-np.asarray(cumhaz, dtype=float))


def cumulative_incidence(event_jumps: ArrayLike, competing_jumps: ArrayLike | None = None) -> np.ndarray:
    """Cumulative incidence of the event from cause-specific hazard increments (Aalen–Johansen).

    On a common grid of distinct times t_1 < ... < t_m, with cause-specific increments dA1(t_j) (event) and
    dA2(t_j) (competing), the all-cause survival just before t_j is the product-integral
    S(t_j-) = prod_{i<j} (1 - dA1(t_i) - dA2(t_i)) and the cumulative incidence is
    F1(t_j) = sum_{i<=j} S(t_i-) dA1(t_i) (Aalen & Johansen 1978; Putter, Fiocco & Geskus 2007, Stat Med).
    With Nelson–Aalen increments and no covariates this is exactly the Aalen–Johansen estimator; with
    Breslow increments times exp(linear predictor) it is the Cox-based cumulative incidence.

    Parameters
    ----------
    event_jumps, competing_jumps : array, shape (m,) or (n, m)
        Hazard increments at the grid times (one row per subject). ``competing_jumps`` None means no
        competing event, giving ``1 - prod(1 - dA1)``.

    Returns
    -------
    ndarray, same shape: F1 at each grid time, in [0, 1], non-decreasing along the last axis.
    """
    d1 = np.clip(np.asarray(event_jumps, dtype=float), 0.0, None)
    d2 = np.zeros_like(d1) if competing_jumps is None else np.clip(np.asarray(competing_jumps, float), 0.0, None)
    if d1.shape != d2.shape:
        raise ModelInputError(f"event and competing increments differ in shape: {d1.shape} vs {d2.shape}")
    total = d1 + d2
    # A Cox increment times a large exp(lp) can exceed 1; cap the total at 1 (everyone left fails),
    # sharing it between causes in proportion, so the probabilities stay in [0, 1].
    d1, total = d1 / np.maximum(total, 1.0), np.minimum(total, 1.0)
    survival = np.cumprod(1.0 - total, axis=-1)
    before = np.concatenate([np.ones(survival.shape[:-1] + (1,)), survival[..., :-1]], axis=-1)
    return np.clip(np.cumsum(before * d1, axis=-1), 0.0, 1.0)


def cumulative_incidence_at(
    event_score: np.ndarray,
    event_baseline: np.ndarray,
    competing_score: np.ndarray | None,
    competing_baseline: np.ndarray | None,
    grid: np.ndarray,
    times: np.ndarray,
) -> np.ndarray:
    """Cox-based cumulative incidence of the outcome at ``times``, one row per subject.

    The same product-integral as :func:`cumulative_incidence` with subject increments
    ``score * baseline increment`` (capped the same way), but run by a compiled loop that keeps two numbers
    per row and reads only the columns needed (:mod:`riskbench.models.incidence_kernel`) -- the prediction
    step of resampling loops runs it hundreds of times. A row's value depends on nothing but its own scores:
    not on the rows predicted with it or the other times asked.

    Parameters
    ----------
    event_score, competing_score : array (n,)
        ``exp(linear predictor)`` of each subject in the outcome and competing cause-specific models
        (``competing_score`` None: no competing event).
    event_baseline, competing_baseline : array (m,)
        Baseline hazard increments of each cause on the common sorted ``grid`` (days).
    grid : array (m,)
        Distinct jump times (days), sorted.
    times : array (k,)
        Times (days) at which to read the cumulative incidence.

    Returns
    -------
    ndarray (n, k), in [0, 1].
    """
    times = np.asarray(times, dtype=float)
    index = np.searchsorted(grid, times, side="right") - 1  # last grid time <= t (-1: before any jump)
    width = int(index.max()) + 1 if len(index) else 0
    if width == 0 or len(event_score) == 0:
        return np.zeros((len(event_score), len(times)))
    a = np.clip(np.asarray(event_baseline, dtype=float)[:width], 0.0, None)
    b = None
    if competing_score is not None and competing_baseline is not None:
        b = np.clip(np.asarray(competing_baseline, dtype=float)[:width], 0.0, None)
    return np.clip(incidence_at_columns(event_score, a, competing_score, b, index), 0.0, 1.0)


def risk_curve(model: RiskModel, table: pd.DataFrame, times: ArrayLike) -> np.ndarray:
    """Risk curve ``(n_rows, len(times))`` from any model: its ``predict_curve`` if it has one, else one
    ``predict_risk`` call per horizon (made monotone, since a risk over a longer horizon is never smaller)."""
    times = np.asarray(times, dtype=float)
    curve_method = getattr(model, "predict_curve", None)
    if callable(curve_method):
        return np.asarray(curve_method(table, times), dtype=float)
    columns = [np.asarray(model.predict_risk(table, float(t)), dtype=float) for t in times]
    order = np.argsort(times)
    curve = np.column_stack(columns)[:, order]
    curve = np.maximum.accumulate(curve, axis=1)
    out = np.empty_like(curve)
    out[:, order] = curve
    return out
