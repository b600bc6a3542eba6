"""Where a validation run gets its tables for a given set of patients.

Resampling works on patients. A *table source* answers: for these patient ids, what are the model-ready
tables (landmark stack, optionally the counting-process table)? Two sources exist:

* :class:`CohortDerivation` re-runs the cohort stage (reading, checks, feature derivation, landmark stack)
  on the raw records of exactly the chosen patients -- the whole pipeline is refitted per replicate.
* :class:`PrecomputedTables` cuts already derived tables by patient. This equals re-deriving because every
  feature of the cohort stage is computed from one patient's own records (last value, change from the
  first value, slope, staleness, age) with constants fixed in the cohort spec (unit table, plausible ranges,
  carry-forward limit); nothing is estimated across patients, so a patient's rows do not depend on which
  other patients are in the sample. It is much faster, and the default for large bootstrap runs.

A bootstrap draw repeats patients; :func:`draw_tables` gives every copy its own id (``"<id>#<copy>"``) so
that models clustering by patient treat copies as the distinct patients they stand for.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any, Protocol

import numpy as np
import pandas as pd

from riskbench.validation.errors import ValidationInputError
from riskbench.validation.plans import patient_outcome_status

_STACK_COLUMNS = ("patient_id", "landmark", "time", "status")
_COUNTING_COLUMNS = ("patient_id", "start", "stop", "status")


@dataclass(frozen=True)
class ValidationTables:
    """Model-ready tables for one set of patients.

    Attributes
    ----------
    landmark_stack : pandas.DataFrame
        ``patient_id, landmark, time, status`` + covariates (days); evaluation always uses it.
    counting_process : pandas.DataFrame or None
        ``patient_id, start, stop, status`` + covariates; needed only to fit the ``"cox"`` family.
    """

    landmark_stack: pd.DataFrame
    counting_process: pd.DataFrame | None = None


class TableSource(Protocol):
    """What resampling needs from a source of tables."""

    def patient_ids(self) -> np.ndarray: ...

    def outcome_status(self) -> pd.Series: ...

    def full_tables(self) -> ValidationTables: ...

    def tables(self, patient_ids: np.ndarray) -> ValidationTables: ...


def _require_columns(table: pd.DataFrame, columns: Sequence[str], what: str) -> None:
    missing = [c for c in columns if c not in table.columns]
    if missing:
        raise ValidationInputError(
            f"the {what} lacks column(s) {missing}; it needs {list(columns)} (see DEVELOPERS.md, stage contract)."
        )


def subset_tables(tables: ValidationTables, patient_ids: np.ndarray) -> ValidationTables:
    """The rows of the given (unique) patients in each table."""
    keep = set(np.asarray(patient_ids).tolist())

    def cut(frame: pd.DataFrame | None) -> pd.DataFrame | None:
        if frame is None:
            return None
        return frame.loc[frame["patient_id"].isin(keep)].reset_index(drop=True)

    return ValidationTables(landmark_stack=cut(tables.landmark_stack), counting_process=cut(tables.counting_process))


def _repeat_patients(frame: pd.DataFrame | None, copies: pd.Series) -> pd.DataFrame | None:
    """Repeat each patient's rows ``copies[id]`` times, renaming copies ``<id>#1``, ``<id>#2``, ..."""
    if frame is None:
        return None
    n_copies = frame["patient_id"].map(copies).to_numpy(dtype=int)
    rows = np.repeat(np.arange(len(frame)), n_copies)
    copy_number = pd.Series(rows).groupby(rows).cumcount().to_numpy() + 1
    out = frame.iloc[rows].reset_index(drop=True)
    out["patient_id"] = out["patient_id"].astype(str).to_numpy() + "#" + copy_number.astype(str)
    return out


def draw_tables(source: TableSource, drawn_ids: np.ndarray) -> ValidationTables:
    """Tables for a bootstrap draw of patients (with repeats), derived by ``source``.

    Parameters
    ----------
    source : TableSource
    drawn_ids : numpy.ndarray
        Patient ids with repeats (one bootstrap replicate).

    Returns
    -------
    ValidationTables
        Each copy of a patient appears as its own patient ``"<id>#<k>"``.
    """
    unique, counts = np.unique(np.asarray(drawn_ids), return_counts=True)
    base = source.tables(unique)
    copies = pd.Series(counts, index=unique)
    return ValidationTables(
        landmark_stack=_repeat_patients(base.landmark_stack, copies),
        counting_process=_repeat_patients(base.counting_process, copies),
    )


class PrecomputedTables:
    """A source cutting already derived tables by patient (see the module notes for why that is valid).

    Parameters
    ----------
    landmark_stack : pandas.DataFrame
        The landmark stack of the whole cohort.
    counting_process : pandas.DataFrame, optional
        The counting-process table of the whole cohort (needed for the ``"cox"`` family).
    patients : pandas.DataFrame, optional
        One row per patient with ``patient_id`` and ``entry_date`` (for temporal splits).
    """

    def __init__(
        self,
        landmark_stack: pd.DataFrame,
        counting_process: pd.DataFrame | None = None,
        patients: pd.DataFrame | None = None,
    ) -> None:
        _require_columns(landmark_stack, _STACK_COLUMNS, "landmark stack")
        if counting_process is not None:
            _require_columns(counting_process, _COUNTING_COLUMNS, "counting-process table")
        if patients is not None:
            _require_columns(patients, ("patient_id",), "patients table")
        self._tables = ValidationTables(landmark_stack.reset_index(drop=True), counting_process)
        self._patients = patients
        status_rows = counting_process if counting_process is not None else landmark_stack
        self._status = patient_outcome_status(status_rows["patient_id"].to_numpy(), status_rows["status"].to_numpy())
        missing = set(landmark_stack["patient_id"]) - set(self._status.index)
        if missing:
            raise ValidationInputError(
                f"{len(missing)} patients of the landmark stack are absent from the counting-process table "
                f"(e.g. {sorted(missing)[:3]}); build both tables from the same cohort."
            )

    @classmethod
    def from_cohort(
        cls,
        cohort: Any,
        landmarks_days: Sequence[float],
        horizon_days: float,
        *,
        with_counting_process: bool = True,
    ) -> PrecomputedTables:
        """Source from a built :class:`riskbench.cohort.Cohort` (its landmark stack, counting-process
        table and patients with entry dates)."""
        stack = cohort.landmark_stack(tuple(float(s) for s in landmarks_days), float(horizon_days))
        cp = cohort.counting_process if with_counting_process else None
        return cls(stack, cp, cohort.patients)

    def patient_ids(self) -> np.ndarray:
        """Unique patient ids (sorted)."""
        return self._status.index.to_numpy()

    def outcome_status(self) -> pd.Series:
        """Status (0/1/2) at the end of follow-up per patient."""
        return self._status

    def entry_dates(self) -> pd.Series:
        """Entry date per patient id (needs ``patients`` with ``entry_date``)."""
        if self._patients is None or "entry_date" not in self._patients.columns:
            raise ValidationInputError(
                "a temporal split needs each patient's entry_date: pass patients= with columns patient_id, entry_date."
            )
        return self._patients.set_index("patient_id")["entry_date"]

    def full_tables(self) -> ValidationTables:
        """The tables of every patient."""
        return self._tables

    def tables(self, patient_ids: np.ndarray) -> ValidationTables:
        """The rows of the given unique patients."""
        return subset_tables(self._tables, patient_ids)


class CohortDerivation:
    """A source that re-runs the cohort stage on the raw records of the chosen patients.

    Parameters
    ----------
    patients, measurements, outcomes : pandas.DataFrame
        Raw source tables (input contract of the cohort stage), already read into memory.
    spec : riskbench.cohort.CohortSpec
        The cohort specification (column maps, unit tables, derived features).
    landmarks_days : sequence of float
        Landmarks of the stack (days since entry).
    horizon_days : float
        Horizon of the stack (days).
    with_counting_process : bool, default False
        Also keep the counting-process table (needed for the ``"cox"`` family).
    """

    def __init__(
        self,
        patients: pd.DataFrame,
        measurements: pd.DataFrame,
        outcomes: pd.DataFrame,
        spec: Any,
        landmarks_days: Sequence[float],
        horizon_days: float,
        *,
        with_counting_process: bool = False,
    ) -> None:
        for frame, what in ((patients, "patients"), (measurements, "measurements"), (outcomes, "outcomes")):
            if not isinstance(frame, pd.DataFrame):
                raise ValidationInputError(
                    f"{what} must be a DataFrame (read the file first); got {type(frame).__name__}."
                )
        self._raw = (patients, measurements, outcomes)
        self._spec = spec
        self._landmarks = tuple(float(s) for s in landmarks_days)
        self._horizon = float(horizon_days)
        self._with_cp = with_counting_process
        patient_column = self._id_columns()[0]
        self._full, self._cohort_patients = self._derive(patients[patient_column].astype(str).unique())
        cp = self._full.counting_process
        rows = cp if cp is not None else self._full.landmark_stack
        self._status = patient_outcome_status(rows["patient_id"].to_numpy(), rows["status"].to_numpy())

    def _id_columns(self) -> tuple[str, str, str]:
        """Source column holding the patient id in each raw table, from the spec's column map."""
        mapping = getattr(self._spec, "columns", None) or {}
        names = []
        for table, frame in zip(("patients", "measurements", "outcomes"), self._raw):
            name = dict(mapping.get(table, {})).get("patient_id", "patient_id")
            if name not in frame.columns:
                raise ValidationInputError(
                    f"the {table} table lacks its patient id column '{name}' (from the cohort spec's column map)."
                )
            names.append(name)
        return names[0], names[1], names[2]

    def _derive(self, raw_ids: np.ndarray) -> tuple[ValidationTables, pd.DataFrame]:
        from riskbench.cohort import build_cohort

        keep = set(np.asarray(raw_ids).tolist())
        # Raw ids may be typed differently from the cohort's string ids: compare as text.
        subsets = [frame.loc[frame[col].astype(str).isin(keep)] for frame, col in zip(self._raw, self._id_columns())]
        cohort = build_cohort(subsets[0], subsets[1], subsets[2], self._spec)
        stack = cohort.landmark_stack(self._landmarks, self._horizon)
        cp = cohort.counting_process if self._with_cp else None
        return ValidationTables(stack.reset_index(drop=True), cp), cohort.patients

    def patient_ids(self) -> np.ndarray:
        """Unique ids of the patients the cohort stage kept (sorted)."""
        return self._status.index.to_numpy()

    def outcome_status(self) -> pd.Series:
        """Status (0/1/2) at the end of follow-up per patient."""
        return self._status

    def entry_dates(self) -> pd.Series:
        """Entry date per included patient."""
        return self._cohort_patients.set_index("patient_id")["entry_date"]

    def full_tables(self) -> ValidationTables:
        """The tables of every included patient (derived once at construction)."""
        return self._full

    def tables(self, patient_ids: np.ndarray) -> ValidationTables:
        """Re-derive the tables from the raw records of exactly these (unique) patients."""
        return self._derive(np.asarray(patient_ids))[0]
