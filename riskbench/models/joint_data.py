"""Turn a joint model's inputs (measurements and survival rows) into the arrays of its likelihood.

Inputs are plain DataFrames with riskbench's conventions: a long table of measurements
(``patient_id``, a time column in days since entry, the marker's value) and one survival row per patient
(``patient_id``, ``time`` in days, ``status`` 0/1/2, baseline covariates). Inside the model time is in
years (``riskbench.time_units.DAYS_PER_YEAR``). Every problem is a :class:`ModelInputError` naming the
table, column, rows and the fix; nothing is dropped silently.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from riskbench.models.joint_design import TimeBasis
from riskbench.models.joint_likelihood import CauseArrays, JointArrays, MarkerSums
from riskbench.models.joint_quadrature import legendre_pieces, piece_index
from riskbench.models.risk_contract import ModelInputError, check_covariates, describe_rows
from riskbench.time_units import DAYS_PER_YEAR

__all__ = ["History", "build_arrays", "check_survival", "marker_history", "marker_sums"]


@dataclass(frozen=True)
class History:
    """Marker measurements keyed by patient: ``patient`` (row of the patient table), time (years), value."""

    patient: np.ndarray
    time: np.ndarray
    value: np.ndarray


def check_survival(survival: pd.DataFrame) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Patient ids, follow-up (years, > 0) and status (0/1/2) of the survival table, one row per patient."""
    for column in ("patient_id", "time", "status"):
        if column not in survival.columns:
            raise ModelInputError(
                f"survival table lacks column '{column}'; give one row per patient with patient_id, time "
                "(days from entry to the event or censoring) and status (0 censored, 1 outcome, 2 competing)"
            )
    ids = survival["patient_id"].to_numpy()
    duplicated = pd.Series(ids).duplicated(keep=False).to_numpy()
    if duplicated.any():
        raise ModelInputError(
            f"survival table: {describe_rows(survival, duplicated)} repeat a patient_id; give one row per patient"
        )
    time = pd.to_numeric(survival["time"], errors="coerce").to_numpy(dtype=float)
    status = pd.to_numeric(survival["status"], errors="coerce").to_numpy()
    bad = ~np.isfinite(time) | (time <= 0) | ~np.isin(status, (0, 1, 2))
    if bad.any():
        raise ModelInputError(
            f"survival table: {describe_rows(survival, bad)} have a time <= 0 days or a status other than 0, 1, 2; "
            "give each patient the days from entry to the first event or censoring (> 0)"
        )
    return ids, time / DAYS_PER_YEAR, status.astype(int)


def marker_history(
    measurements: pd.DataFrame, ids: np.ndarray, *, time_column: str, marker: str, end_years: np.ndarray | None = None
) -> History:
    """Measurements matched to the patients ``ids`` (times in years).

    Raises
    ------
    ModelInputError
        If a column is absent, a value or time is not a finite number, a time is negative, a measurement
        belongs to no patient of ``ids``, or (with ``end_years``) it was taken after the patient's follow-up.
    """
    what = "measurement table"
    for column in ("patient_id", time_column, marker):
        if column not in measurements.columns:
            raise ModelInputError(
                f"{what} lacks column '{column}'; it needs patient_id, {time_column} (days since entry) and the "
                f"marker column {marker!r}"
            )
    time = pd.to_numeric(measurements[time_column], errors="coerce").to_numpy(dtype=float)
    value = pd.to_numeric(measurements[marker], errors="coerce").to_numpy(dtype=float)
    bad = ~np.isfinite(time) | ~np.isfinite(value) | (time < 0)
    if bad.any():
        raise ModelInputError(
            f"{what}: {describe_rows(measurements, bad)} have a missing, non-numeric or negative "
            f"'{time_column}' or '{marker}'; remove or correct those rows before fitting"
        )
    index = pd.Index(ids).get_indexer(measurements["patient_id"].to_numpy())
    unknown = index < 0
    if unknown.any():
        raise ModelInputError(
            f"{what}: {describe_rows(measurements, unknown)} belong to patients missing from the survival "
            "table; give every measured patient a survival row"
        )
    years = time / DAYS_PER_YEAR
    if end_years is not None:
        late = years > end_years[index] * (1 + 1e-12)
        if late.any():
            raise ModelInputError(
                f"{what}: {describe_rows(measurements, late)} were taken after the patient's event or censoring; "
                "the cohort stage excludes such values -- drop them before fitting"
            )
    return History(index, years, value)


def marker_sums(history: History, fixed: np.ndarray, n: int) -> MarkerSums:
    """Per-patient sufficient statistics of the marker (``Z = [1, t]``; ``fixed`` is X at each measurement)."""
    z = np.column_stack([np.ones_like(history.time), history.time])
    g, y = history.patient, history.value

    def total(values: np.ndarray) -> np.ndarray:
        flat = values.reshape(len(values), -1)
        out = np.zeros((n, flat.shape[1]))
        np.add.at(out, g, flat)
        return out.reshape((n,) + values.shape[1:])

    return MarkerSums(
        n_obs=np.bincount(g, minlength=n).astype(float),
        yy=np.bincount(g, weights=y * y, minlength=n),
        xy=total(fixed * y[:, None]),
        xx=total(np.einsum("ip,iq->ipq", fixed, fixed)),
        zy=total(z * y[:, None]),
        zx=total(np.einsum("ik,ip->ikp", z, fixed)),
        zz=total(np.einsum("ik,il->ikl", z, z)),
    )


def fixed_design(basis: TimeBasis, times: np.ndarray, baseline: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Marker fixed-effects design ``[1, f(t), x]`` at ``times`` (shape ``s``; ``baseline`` broadcast to
    ``s + (pb,)``) and its time derivative ``[0, f'(t), 0]``."""
    ones = np.ones(times.shape + (1,))
    base = np.broadcast_to(baseline, times.shape + (baseline.shape[-1],))
    design = np.concatenate([ones, basis.values(times), base], axis=-1)
    slope = np.concatenate([np.zeros_like(ones), basis.slopes(times), np.zeros_like(base)], axis=-1)
    return design, slope


def build_arrays(
    history: History,
    end: np.ndarray,
    status: np.ndarray,
    marker_covariates: np.ndarray,
    cause_covariates: Sequence[np.ndarray],
    cause_terms: Sequence[tuple[str, ...]],
    basis: TimeBasis,
    knots: np.ndarray,
    legendre_points: int,
) -> JointArrays:
    """The likelihood arrays for patients with follow-up ``end`` (years) and ``status``.

    ``marker_covariates`` (n, pb) and each of ``cause_covariates`` (n, q_c) are already centred.
    """
    n = len(end)
    fixed, _ = fixed_design(basis, history.time, marker_covariates[history.patient])
    sums = marker_sums(history, fixed, n)
    times, weights = legendre_pieces(end, knots, legendre_points)
    design_nodes, slope_nodes = fixed_design(basis, times, marker_covariates[:, None, None, :])
    design_end, slope_end = fixed_design(basis, end, marker_covariates)
    causes = tuple(
        CauseArrays((status == code).astype(float), np.asarray(cov, dtype=float), tuple(terms))
        for code, cov, terms in zip((1, 2), cause_covariates, cause_terms)
    )
    return JointArrays(
        end=end,
        piece=piece_index(knots, end),
        times=times,
        weights=weights,
        design_nodes=np.ascontiguousarray(design_nodes),
        slope_nodes=np.ascontiguousarray(slope_nodes),
        design_end=design_end,
        slope_end=slope_end,
        causes=causes,
        **vars(sums),
    )


def covariate_block(table: pd.DataFrame, covariates: Sequence[str], what: str) -> np.ndarray:
    """Covariate matrix of ``table`` (no missing values allowed; see ``check_covariates``)."""
    if not list(covariates):
        return np.zeros((len(table), 0))
    return check_covariates(table, list(covariates), what=what)
