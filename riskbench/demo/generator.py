"""``generate_cohort``: the synthetic lung-nodule surveillance cohort with its known truth.

The data-generating process is described in :mod:`riskbench.demo.simulate` (steps),
:mod:`riskbench.demo.process` (nodule, marker and visit schedule), :mod:`riskbench.demo.hazards`
(outcome and competing hazards, exact inverse-transform sampling) and
:mod:`riskbench.demo.parameters` (every constant, including the true coefficients).
"""

from __future__ import annotations

import numbers
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from riskbench.demo.oracle import oracle_risk
from riskbench.demo.parameters import COVARIATES, DAYS_PER_YEAR, CohortShift, GeneratorParameters
from riskbench.demo.simulate import simulate_process
from riskbench.demo.tables import build_tables, patient_ids
from riskbench.errors import RiskbenchError

GENERATOR_VERSION = "1.0"
VARIANTS: tuple[str, ...] = ("clean", "messy")
DEFAULT_LANDMARKS_DAYS: tuple[float, ...] = tuple(y * DAYS_PER_YEAR for y in (0, 0.5, 1, 1.5, 2, 3))
DEFAULT_HORIZON_DAYS: float = 2 * DAYS_PER_YEAR
DEFAULT_RISK_PATHS = 40
MIN_MESSY_PATIENTS = 200  # enough patients to spoil each defect on its own patients


class DemoParameterError(RiskbenchError):
    """A generator parameter is out of range (the message names the parameter)."""


@dataclass(frozen=True)
class CohortTruth:
    """What the generator knows and a model can only estimate.

    Attributes
    ----------
    parameters : GeneratorParameters
        Every constant of the data-generating process (``parameters.coefficients`` is the true beta).
    seed : int
        Seed of the run.
    generator_version : str
        Version of the data-generating process.
    intervals : DataFrame
        The generator's own counting-process rows: ``patient_id, start, stop, status`` (days since
        entry; 0 censored, 1 outcome, 2 competing) and the six true covariates as known at ``start``.
    true_risk : DataFrame or None
        ``patient_id, landmark, horizon, true_risk, true_risk_se`` (days; probability of the outcome
        in (landmark, landmark + horizon] with death competing, Monte Carlo standard error).
    landmarks_days, horizon_days, n_risk_paths
        Settings of the oracle risk.
    shift : CohortShift or None
        The population shift applied to the default process (None: none); ``parameters`` already include it.
    """

    parameters: GeneratorParameters
    seed: int
    generator_version: str
    intervals: pd.DataFrame
    true_risk: pd.DataFrame | None
    landmarks_days: tuple[float, ...]
    horizon_days: float
    n_risk_paths: int
    shift: CohortShift | None = None

    @property
    def coefficients(self) -> dict[str, float]:
        return dict(self.parameters.coefficients)

    def to_json_dict(self) -> dict[str, Any]:
        """Contents of ``truth.json``."""
        p = self.parameters
        out: dict[str, Any] = {
            "generator_version": self.generator_version,
            "seed": self.seed,
            "coefficients": self.coefficients,
            "covariates": list(COVARIATES),
            "outcome_hazard": {
                "form": "weibull_baseline_times_exp_linear_predictor",
                "cumulative_baseline": "rho * (t_days / 365.25) ** shape",
                "rho": p.weibull_rho,
                "shape": p.weibull_shape,
                "covariates_change_on": "exam and lab dates; a value dated day d holds on (d, next change]",
            },
            "competing_hazard": {
                "form": "gompertz_in_age",
                "hazard_per_year": "b * exp(c * age_years)",
                "b": p.gompertz_b,
                "c": p.gompertz_c,
            },
            "censoring": {
                "loss_rate_per_year": p.loss_rate_per_year,
                "study_close": p.study_close,
                "discharge_after_days": p.discharge_after_days,
                "discharge_max_volume_mm3": p.discharge_max_volume_mm3,
                "discharge_max_log_change": p.discharge_max_log_change,
                "discharge_probability": p.discharge_probability,
            },
            "true_risk": {
                "landmarks_days": list(self.landmarks_days),
                "horizon_days": self.horizon_days,
                "method": "Monte Carlo over future visits given the hidden state; cumulative incidence "
                "with competing death per path by Gauss-Legendre quadrature; no censoring",
                "n_paths": self.n_risk_paths,
            },
            "parameters": p.to_dict(),
        }
        if self.shift is not None:
            out["population_shift"] = self.shift.to_dict()
        return out


@dataclass(frozen=True)
class SyntheticCohort:
    """The three input tables of a synthetic cohort, its defect counts and (clean variant) its truth."""

    patients: pd.DataFrame
    measurements: pd.DataFrame
    outcomes: pd.DataFrame
    variant: str
    seed: int
    defects: Mapping[str, Any] = field(default_factory=dict)
    truth: CohortTruth | None = None


def _check_int(name: str, value: Any, minimum: int) -> int:
    if isinstance(value, bool) or not isinstance(value, numbers.Integral):
        raise DemoParameterError(f"{name} must be an integer, got {value!r}")
    if value < minimum:
        raise DemoParameterError(f"{name} must be >= {minimum}, got {value}")
    return int(value)


def validate_parameters(
    n_patients: Any, seed: Any, variant: Any, landmarks_days: Any, horizon_days: Any, n_risk_paths: Any
) -> tuple[int, int, str, tuple[float, ...], float, int]:
    """Check the generator's arguments; raise :class:`DemoParameterError` naming the bad one."""
    n = _check_int("n_patients", n_patients, 1)
    s = _check_int("seed", seed, 0)
    if variant not in VARIANTS:
        raise DemoParameterError(f"variant must be one of {', '.join(VARIANTS)}; got {variant!r}")
    if variant == "messy" and n < MIN_MESSY_PATIENTS:
        raise DemoParameterError(f"n_patients must be >= {MIN_MESSY_PATIENTS} for the messy variant, got {n}")
    try:
        horizon = float(horizon_days)
    except (TypeError, ValueError):
        raise DemoParameterError(f"horizon_days must be a number of days, got {horizon_days!r}") from None
    if not np.isfinite(horizon) or horizon <= 0:
        raise DemoParameterError(f"horizon_days must be > 0, got {horizon_days!r}")
    try:
        marks = tuple(float(x) for x in landmarks_days)
    except (TypeError, ValueError):
        raise DemoParameterError(f"landmarks_days must be numbers of days, got {landmarks_days!r}") from None
    if any(not np.isfinite(x) or x < 0 for x in marks):
        raise DemoParameterError(f"landmarks_days must be finite and >= 0, got {list(landmarks_days)}")
    paths = _check_int("n_risk_paths", n_risk_paths, 0)
    if paths == 1:
        raise DemoParameterError("n_risk_paths must be 0 (no true risk) or >= 2, got 1")
    return n, s, variant, marks, horizon, paths


def generate_cohort(
    n_patients: int,
    seed: int,
    variant: str = "clean",
    *,
    landmarks_days: Sequence[float] = DEFAULT_LANDMARKS_DAYS,
    horizon_days: float = DEFAULT_HORIZON_DAYS,
    n_risk_paths: int = DEFAULT_RISK_PATHS,
    parameters: GeneratorParameters | None = None,
    shift: CohortShift | None = None,
) -> SyntheticCohort:
    """Simulate a lung-nodule surveillance cohort with a known truth.

    Parameters
    ----------
    n_patients : int
        Number of patients (>= 1; >= 200 for the messy variant).
    seed : int
        Seed (>= 0); the same seed gives the same cohort. The messy variant spoils the clean cohort
        of the same seed.
    variant : {"clean", "messy"}
        ``messy`` adds recorded defects (see :mod:`riskbench.demo.defects`) and carries no truth.
    landmarks_days : sequence of float
        Landmarks s (days since entry) of the true risk.
    horizon_days : float
        Horizon w (days) of the true risk (probability of the outcome in (s, s + w]).
    n_risk_paths : int
        Monte Carlo futures per patient and landmark for the true risk; 0 skips it.
    parameters : GeneratorParameters, optional
        Constants of the data-generating process (default: the documented demo values).
    shift : CohortShift, optional
        Another population: baseline outcome hazard scaled and case mix moved (applied to ``parameters``).
        None or a shift that changes nothing gives exactly the cohort without it.

    Returns
    -------
    SyntheticCohort
    """
    n, seed, variant, marks, horizon, paths = validate_parameters(
        n_patients, seed, variant, landmarks_days, horizon_days, n_risk_paths
    )
    p = parameters if parameters is not None else GeneratorParameters()
    if shift is not None and shift.is_identity:
        shift = None
    if shift is not None:
        p = shift.apply(p)
    process_seed, oracle_seed, defect_seed = np.random.SeedSequence(seed).spawn(3)
    sim = simulate_process(n, p, np.random.default_rng(process_seed))
    ids = patient_ids(n)
    patients, measurements, outcomes = build_tables(sim, ids)
    if variant == "messy":
        from riskbench.demo.defects import spoil  # the clean path never needs it

        del sim  # the simulated arrays are not needed to spoil the tables: free them first
        spoiled = spoil(patients, measurements, outcomes, np.random.default_rng(defect_seed))
        return SyntheticCohort(
            spoiled.patients, spoiled.measurements, spoiled.outcomes, variant, seed, spoiled.defects, None
        )

    intervals = pd.DataFrame(
        {
            "patient_id": ids[sim.interval_patient],
            "start": sim.interval_start,
            "stop": sim.interval_stop,
            "status": sim.interval_status,
            **{name: sim.interval_covariates[:, j] for j, name in enumerate(COVARIATES)},
        },
        copy=False,
    )
    true_risk = None
    if paths:
        risk = oracle_risk(sim, marks, horizon, paths, np.random.default_rng(oracle_seed))
        true_risk = pd.concat(
            [pd.DataFrame({"patient_id": ids[risk["patient_index"].to_numpy()]}), risk.drop(columns="patient_index")],
            axis=1,
        )
    truth = CohortTruth(p, seed, GENERATOR_VERSION, intervals, true_risk, marks, horizon, paths, shift)
    return SyntheticCohort(patients, measurements, outcomes, variant, seed, {}, truth)
