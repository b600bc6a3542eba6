"""Turn the simulated arrays into the three input tables of the input contract.

Strings are built once (one per patient id, one per calendar day, one per category) and shared by
reference, so a million-patient cohort costs pointer copies, not millions of string objects.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from riskbench.demo.simulate import END_REASONS, SimulatedProcess

#: Measured variables: name, unit, source (the codes 0, 1, 2 used inside the generator).
VARIABLES: tuple[tuple[str, str, str], ...] = (
    ("nodule_volume", "mm3", "imaging"),
    ("suspicion_score", "1", "imaging"),
    ("serum_marker", "ng/mL", "lab"),
)

#: kind and detail of the outcome row for each end-of-follow-up reason (order of END_REASONS).
END_ROWS: dict[str, tuple[str, str]] = {
    "outcome": ("outcome", "confirmed malignancy"),
    "competing": ("competing", "death from another cause"),
    "discharged": ("end_of_follow_up", "discharged from surveillance"),
    "lost_to_follow_up": ("end_of_follow_up", "lost to follow-up"),
    "study_closed": ("end_of_follow_up", "study closed"),
}


def patient_ids(n: int) -> np.ndarray:
    """Identifiers ``P000001``, ... (at least six digits) as an object array."""
    width = max(6, len(str(n)))
    return np.array([f"P{i:0{width}d}" for i in range(1, n + 1)], dtype=object)


class DateText:
    """ISO date strings for a range of epoch days, looked up by array indexing."""

    def __init__(self, first_day: int, last_day: int) -> None:
        self.first = int(first_day)
        days = np.arange(self.first, int(last_day) + 1).astype("datetime64[D]")
        self.table = np.datetime_as_string(days).astype(object)

    def __call__(self, epoch_day: np.ndarray) -> np.ndarray:
        return self.table[np.asarray(epoch_day, dtype=np.int64) - self.first]


def _categorical_text(values: tuple[str, ...], codes: np.ndarray) -> np.ndarray:
    return np.array(values, dtype=object)[codes]


def build_tables(sim: SimulatedProcess, ids: np.ndarray) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    """Patients, measurements (long form) and outcomes tables of a simulated cohort."""
    last = int(sim.entry_day.max() + sim.end_day.max())
    dates = DateText(int(sim.birth_day.min()), last)
    patients = pd.DataFrame(
        {
            "patient_id": ids,
            "entry_date": dates(sim.entry_day),
            "birth_date": dates(sim.birth_day),
            "sex": np.where(sim.male, "M", "F").astype(object),
            "pack_years": sim.pack_years,
        },
        copy=False,  # keep the column arrays as they are: no consolidation copy of 10^7-row columns
    )

    n_e, n_l = sim.exam_day.size, sim.lab_day.size
    patient = np.concatenate([sim.exam_patient, sim.exam_patient, sim.lab_patient])
    day = np.concatenate([sim.exam_day, sim.exam_day, sim.lab_day])
    code = np.concatenate([np.zeros(n_e, np.int64), np.ones(n_e, np.int64), np.full(n_l, 2, np.int64)])
    value = np.concatenate([sim.exam_volume, sim.exam_suspicion, sim.lab_marker])
    order = np.argsort((patient.astype(np.int64) << 20) + (day << 2) + code, kind="stable")
    patient, day, code, value = patient[order], day[order], code[order], value[order]
    names, units, sources = zip(*VARIABLES)
    measurements = pd.DataFrame(
        {
            "patient_id": ids[patient],
            "date": dates(sim.entry_day[patient] + day),
            "variable": _categorical_text(names, code),
            "value": value,
            "unit": _categorical_text(units, code),
            "source": _categorical_text(sources, code),
        },
        copy=False,  # keep the column arrays as they are: no consolidation copy of 10^7-row columns
    )

    kinds, details = zip(*(END_ROWS[r] for r in END_REASONS))
    outcomes = pd.DataFrame(
        {
            "patient_id": ids,
            "date": dates(sim.entry_day + sim.end_day),
            "kind": _categorical_text(kinds, sim.end_reason),
            "detail": _categorical_text(details, sim.end_reason),
        },
        copy=False,  # keep the column arrays as they are: no consolidation copy of 10^7-row columns
    )
    return patients, measurements, outcomes
