"""Resampling plans: which patients fit a model and which patients evaluate it.

Every plan works on patient ids, never on rows, so all of a patient's rows (counting-process
intervals, landmark rows) land on the same side of a split. A plan is a list of :class:`Split`.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from riskbench.validation.errors import ValidationInputError


@dataclass(frozen=True)
class Split:
    """One partition of patients into a fitting part and an evaluation part.

    Attributes
    ----------
    fit_ids, eval_ids : numpy.ndarray
        Patient ids (unique, sorted) used to fit and to evaluate; the two never overlap.
    label : str
        Human-readable name, e.g. ``"repeat 1 fold 3"`` or ``"entry before 2019-01-01"``.
    """

    fit_ids: np.ndarray
    eval_ids: np.ndarray
    label: str


def patient_outcome_status(patient_ids: Sequence | np.ndarray, status: Sequence | np.ndarray) -> pd.Series:
    """Reduce row-level status codes to one status per patient.

    Parameters
    ----------
    patient_ids : array-like
        Patient id of each row (a patient may have many rows).
    status : array-like of int
        Row status, 0 censored, 1 outcome, 2 competing event.

    Returns
    -------
    pandas.Series
        Indexed by patient id (sorted): 1 if any row has the outcome, else 2 if any row has the
        competing event, else 0. A patient's rows carry at most one terminal status in a well-formed
        table, so this is the patient's status at the end of follow-up.
    """
    ids = np.asarray(patient_ids)
    codes = np.asarray(status)
    if ids.shape != codes.shape or ids.ndim != 1:
        raise ValidationInputError(
            f"patient_ids and status must be 1-D arrays of equal length, got shapes {ids.shape} and "
            f"{codes.shape}; pass one entry per row."
        )
    bad = ~np.isin(codes, (0, 1, 2))
    if bad.any():
        rows = np.flatnonzero(bad)[:5].tolist()
        raise ValidationInputError(
            f"status must be 0 (censored), 1 (outcome) or 2 (competing); rows {rows} hold "
            f"{codes[bad][:5].tolist()}. Recode the status column before resampling."
        )
    frame = pd.DataFrame({"patient_id": ids, "outcome": codes == 1, "competing": codes == 2})
    per_patient = frame.groupby("patient_id", sort=True)[["outcome", "competing"]].any()
    out = np.where(per_patient["outcome"], 1, np.where(per_patient["competing"], 2, 0))
    return pd.Series(out, index=per_patient.index, name="status")


def patient_folds(
    patient_ids: Sequence | np.ndarray,
    status: Sequence | np.ndarray,
    k: int,
    seed: int,
    *,
    repeats: int = 1,
) -> list[Split]:
    """K-fold cross-validation grouped by patient and stratified by the patient's outcome status.

    Parameters
    ----------
    patient_ids : array-like
        Patient id per row (rows of one patient share the id); duplicates are reduced per patient.
    status : array-like of int
        Row status (0/1/2); a patient's stratum is its status at the end of follow-up
        (see :func:`patient_outcome_status`).
    k : int
        Number of folds (>= 2, at most the number of patients).
    seed : int
        Seed of the shuffling; the same seed gives the same folds.
    repeats : int, default 1
        Number of independent repetitions of the K-fold partition (repeated cross-validation).

    Returns
    -------
    list of Split
        ``repeats * k`` splits; within each repetition every patient is evaluated exactly once.

    Notes
    -----
    Stratification deals the patients of each status in turn round-robin over the folds after a
    seeded shuffle, so every fold holds within one patient of its share of outcomes, competing
    events and censored patients.
    """
    per_patient = patient_outcome_status(patient_ids, status)
    n = len(per_patient)
    if not isinstance(k, (int, np.integer)) or k < 2 or k > n:
        raise ValidationInputError(f"k must be an integer between 2 and the number of patients ({n}); got {k!r}.")
    if repeats < 1:
        raise ValidationInputError(f"repeats must be at least 1; got {repeats!r}.")
    ids = per_patient.index.to_numpy()
    codes = per_patient.to_numpy()
    rng = np.random.default_rng(seed)
    splits: list[Split] = []
    for rep in range(repeats):
        fold_of = np.empty(n, dtype=int)
        offset = 0
        for code in (1, 2, 0):
            members = rng.permutation(np.flatnonzero(codes == code))
            # Continue the round-robin where the previous stratum stopped so fold sizes stay balanced.
            fold_of[members] = (np.arange(len(members)) + offset) % k
            offset = (offset + len(members)) % k
        for fold in range(k):
            in_fold = fold_of == fold
            splits.append(
                Split(
                    fit_ids=np.sort(ids[~in_fold]),
                    eval_ids=np.sort(ids[in_fold]),
                    label=f"repeat {rep + 1} fold {fold + 1}",
                )
            )
    return splits


def temporal_split(
    patient_ids: Sequence | np.ndarray,
    entry_dates: Sequence | np.ndarray | pd.Series,
    *,
    cutoff: str | pd.Timestamp | None = None,
    fit_fraction: float | None = None,
) -> Split:
    """Fit on patients who entered earlier, evaluate on patients who entered later.

    Parameters
    ----------
    patient_ids : array-like
        One id per patient (unique).
    entry_dates : array-like of dates
        Entry (start of surveillance) date per patient, ISO strings or datetimes.
    cutoff : date, optional
        Patients entering strictly before the cutoff fit the model; the rest evaluate it.
    fit_fraction : float, optional
        Instead of a cutoff, the share of patients (by entry order, in (0, 1)) used for fitting;
        the cutoff becomes the entry date of the first evaluation patient, so patients entering on the
        same day stay together.

    Returns
    -------
    Split
    """
    ids = np.asarray(patient_ids)
    if len(pd.unique(ids)) != len(ids):
        raise ValidationInputError("temporal_split needs one row per patient; patient_ids has duplicates.")
    dates = pd.to_datetime(pd.Series(entry_dates), errors="coerce")
    if len(dates) != len(ids):
        raise ValidationInputError(
            f"patient_ids ({len(ids)}) and entry_dates ({len(dates)}) must have the same length."
        )
    if dates.isna().any():
        rows = np.flatnonzero(dates.isna().to_numpy())[:5].tolist()
        raise ValidationInputError(f"entry_dates rows {rows} are missing or not dates; fix them (ISO YYYY-MM-DD).")
    if (cutoff is None) == (fit_fraction is None):
        raise ValidationInputError("give exactly one of cutoff= (a date) or fit_fraction= (in (0, 1)).")
    if fit_fraction is not None:
        if not 0.0 < fit_fraction < 1.0:
            raise ValidationInputError(f"fit_fraction must lie in (0, 1); got {fit_fraction!r}.")
        ordered = np.sort(dates.to_numpy())
        cut = pd.Timestamp(ordered[int(np.floor(fit_fraction * len(ordered)))])
    else:
        cut = pd.Timestamp(cutoff)
    early = (dates < cut).to_numpy()
    if early.all() or not early.any():
        raise ValidationInputError(
            f"the cutoff {cut.date()} leaves one side empty (entry dates run from {dates.min().date()} "
            f"to {dates.max().date()}); choose a date inside that range."
        )
    return Split(
        fit_ids=np.sort(ids[early]),
        eval_ids=np.sort(ids[~early]),
        label=f"entry before {cut.date()} vs on/after",
    )


def bootstrap_patient_draw(patient_ids: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Draw patients with replacement (one bootstrap replicate of the patients).

    Parameters
    ----------
    patient_ids : numpy.ndarray
        Unique patient ids of the original cohort.
    rng : numpy.random.Generator
        The replicate's own generator (see :func:`riskbench.validation.parallel.replicate_seeds`).

    Returns
    -------
    numpy.ndarray
        ``len(patient_ids)`` ids, with repeats; each draw stands for a distinct patient.
    """
    return patient_ids[rng.integers(0, len(patient_ids), size=len(patient_ids))]
