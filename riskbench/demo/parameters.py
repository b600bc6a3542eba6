"""Parameters of the synthetic lung-nodule surveillance cohort (the data-generating process).

Every number the generator uses lives here, in one frozen dataclass, so the truth file can record
them all and tests can switch parts of the process off (for example all coefficients zero, or no
competing deaths) to compare with a closed form.

Units: time in days since entry unless a name says ``_per_year``; volumes in mm3; the serum marker
in ng/mL; ages in years of 365.25 days.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any

DAYS_PER_YEAR = 365.25

#: The six covariates of the true outcome hazard, in this order (names as the cohort stage makes them).
COVARIATES: tuple[str, ...] = (
    "log_nodule_volume",
    "log_nodule_volume_change",
    "suspicion_score",
    "serum_marker",
    "age_at_entry",
    "pack_years",
)

#: True log hazard ratios per unit of each covariate. Imaging (volume, growth, suspicion) dominates
#: the clinical covariates (marker, age, pack-years), so imaging + clinical clearly beats clinical only.
TRUE_COEFFICIENTS: Mapping[str, float] = MappingProxyType(
    {
        "log_nodule_volume": 0.5,  # per ln(mm3): a doubling of volume multiplies the hazard by 1.41
        "log_nodule_volume_change": 0.5,  # per ln unit of growth since the entry exam
        "suspicion_score": 3.5,  # per unit of the [0, 1] score
        "serum_marker": 0.08,  # per ng/mL
        "age_at_entry": 0.03,  # per year
        "pack_years": 0.012,  # per pack-year
    }
)


@dataclass(frozen=True)
class GeneratorParameters:
    """All constants of the data-generating process.

    Outcome hazard (confirmed malignancy), at time t days since entry::

        h1(t) = rho * shape * (t / 365.25) ** (shape - 1) / 365.25 * exp(beta . x(t))

    a Weibull baseline (cumulative ``rho * (t / 365.25) ** shape``) times the exponential of the
    current covariates x(t), which change only on exam and lab dates (a value dated day d holds
    on (d, next change]). Competing hazard (death from another cause), Gompertz in age::

        h2(t) = gompertz_b * exp(gompertz_c * age(t))   per year, age(t) = age_at_entry + t / 365.25

    Censoring: administrative end of the study, discharge from surveillance of small stable nodules,
    and loss to follow-up at a constant rate.
    """

    coefficients: Mapping[str, float] = field(default_factory=lambda: dict(TRUE_COEFFICIENTS))
    # --- outcome baseline (Weibull, time in years)
    weibull_rho: float = 2.5e-5
    weibull_shape: float = 0.6  # < 1: hazard highest soon after entry, other things equal
    # --- competing death (Gompertz in age, per year)
    gompertz_b: float = 4.0e-5
    gompertz_c: float = 0.09
    # --- censoring
    loss_rate_per_year: float = 0.025
    study_start: str = "2014-01-01"  # entry dates are uniform over [study_start, entry_end)
    entry_end: str = "2018-01-01"
    study_close: str = "2023-01-01"  # administrative end of follow-up (exclusive)
    discharge_after_days: float = 700.0  # stable small nodules may be discharged from this exam on
    discharge_max_volume_mm3: float = 100.0
    discharge_max_log_change: float = 0.15
    discharge_probability: float = 0.35
    # --- static covariates
    age_mean: float = 64.0
    age_sd: float = 8.0
    age_min: float = 40.0
    age_max: float = 90.0
    never_smoker_fraction: float = 0.15
    pack_years_shape: float = 2.2
    pack_years_scale: float = 14.0
    pack_years_max: float = 150.0
    male_fraction: float = 0.5
    # --- hidden nodule process (aggressiveness a ~ N(0, 1))
    log_volume_mean: float = 4.8  # ln mm3 at entry for a = 0 (about 120 mm3, a 6 mm nodule)
    log_volume_aggressiveness: float = 0.25
    log_volume_sd: float = 0.8
    log_volume_min: float = 2.3  # ln(10 mm3)
    log_volume_max: float = 11.0  # ln(60,000 mm3)
    growth_mean_per_year: float = 0.08  # ln-volume units per year
    growth_aggressiveness_per_year: float = 0.22
    growth_sd_per_year: float = 0.08
    volume_noise_sd: float = 0.12  # ln units: reader / segmentation variability
    suspicion_intercept: float = -1.2
    suspicion_aggressiveness: float = 1.1
    suspicion_log_volume: float = 0.35  # per ln(mm3) above log_volume_mean
    suspicion_noise_sd: float = 0.5  # logit units
    marker_log_mean: float = 0.92  # ln ng/mL (about 2.5 ng/mL)
    marker_aggressiveness: float = 0.25
    marker_sd: float = 0.3
    marker_rise_per_year: float = 0.1  # ln units per year per unit of positive aggressiveness
    marker_noise_sd: float = 0.15  # ln units: assay variability
    marker_max_ng_ml: float = 100.0  # upper reporting limit of the assay
    # --- visit schedule (days)
    exam_interval_small_days: float = 365.25  # volume < small_volume_mm3
    exam_interval_medium_days: float = 182.625  # small_volume_mm3 <= volume < large_volume_mm3
    exam_interval_large_days: float = 91.3125  # volume >= large_volume_mm3
    small_volume_mm3: float = 100.0
    large_volume_mm3: float = 300.0
    exam_jitter: float = 0.1  # relative: actual interval = planned * U(1 - j, 1 + j)
    exam_miss_probability: float = 0.1  # a missed visit is rebooked one interval later (at most once)
    lab_interval_days: float = 182.625
    lab_jitter_days: float = 45.0
    lab_miss_probability: float = 0.15
    min_gap_days: int = 30

    def __post_init__(self) -> None:
        missing = [name for name in COVARIATES if name not in self.coefficients]
        extra = [name for name in self.coefficients if name not in COVARIATES]
        if missing or extra:
            raise ValueError(
                f"coefficients must name exactly the covariates {list(COVARIATES)}; missing {missing}, unknown {extra}"
            )
        # freeze the mapping so the dataclass is truly immutable
        object.__setattr__(self, "coefficients", MappingProxyType(dict(self.coefficients)))

    def beta(self) -> tuple[float, ...]:
        """Coefficients in the order of :data:`COVARIATES`."""
        return tuple(float(self.coefficients[name]) for name in COVARIATES)

    def replace(self, **changes: Any) -> GeneratorParameters:
        """A copy with some fields changed (``coefficients`` may be given as a partial mapping)."""
        if "coefficients" in changes:
            merged = dict(self.coefficients)
            merged.update(changes["coefficients"])
            changes["coefficients"] = merged
        return dataclasses.replace(self, **changes)

    def to_dict(self) -> dict[str, Any]:
        """Plain-JSON form (for ``truth.json``)."""
        out = {f.name: getattr(self, f.name) for f in dataclasses.fields(self)}
        out["coefficients"] = dict(self.coefficients)
        return out


@dataclass(frozen=True)
class CohortShift:
    """A second population: the outcome's baseline hazard scaled and the case mix moved.

    Used to simulate another site or a later period for external validation and model updating. The defaults
    change nothing (:meth:`apply` then returns the parameters unchanged, so the cohort is bit-identical).

    Attributes
    ----------
    outcome_hazard_multiplier : float
        Factor on the outcome's baseline hazard (``weibull_rho``); > 0. Covariate effects are unchanged, so a
        model developed without the shift under-predicts by about this factor where risks are small.
    age_shift_years : float
        Years added to the mean age at entry (ages stay within ``age_min`` .. ``age_max``).
    pack_years_multiplier : float
        Factor on the scale of smokers' pack-years (> 0).
    log_volume_shift : float
        Added to the mean ln nodule volume at entry (ln mm3; 0.35 is about 40% larger volumes). The suspicion
        score is drawn relative to the shifted mean, so it does not move with the volume.
    """

    outcome_hazard_multiplier: float = 1.0
    age_shift_years: float = 0.0
    pack_years_multiplier: float = 1.0
    log_volume_shift: float = 0.0

    def __post_init__(self) -> None:
        import math

        from riskbench.errors import RiskbenchError

        for name in ("outcome_hazard_multiplier", "pack_years_multiplier"):
            value = getattr(self, name)
            if not (isinstance(value, (int, float)) and math.isfinite(value) and value > 0):
                raise RiskbenchError(f"{name} must be a finite number > 0, got {value!r}")
        for name in ("age_shift_years", "log_volume_shift"):
            value = getattr(self, name)
            if not (isinstance(value, (int, float)) and math.isfinite(value)):
                raise RiskbenchError(f"{name} must be a finite number, got {value!r}")

    @property
    def is_identity(self) -> bool:
        """True when the shift changes nothing."""
        return self == CohortShift()

    def apply(self, parameters: GeneratorParameters) -> GeneratorParameters:
        """The generator parameters of the shifted population (the same object when nothing is shifted)."""
        if self.is_identity:
            return parameters
        return parameters.replace(
            weibull_rho=parameters.weibull_rho * self.outcome_hazard_multiplier,
            age_mean=parameters.age_mean + self.age_shift_years,
            pack_years_scale=parameters.pack_years_scale * self.pack_years_multiplier,
            log_volume_mean=parameters.log_volume_mean + self.log_volume_shift,
        )

    def to_dict(self) -> dict[str, float]:
        """Plain-JSON form (for ``truth.json``)."""
        return {f.name: float(getattr(self, f.name)) for f in dataclasses.fields(self)}
