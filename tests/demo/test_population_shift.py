"""The generator's population shift (another site or period): no shift leaves cohorts bit-identical, a shift
moves the baseline outcome hazard and the case mix by what it says."""

from __future__ import annotations

import hashlib

import numpy as np
import pandas as pd
import pytest

from riskbench.demo import CohortShift, GeneratorParameters, generate_cohort
from riskbench.errors import RiskbenchError

# Fingerprints of generate_cohort(60, 7, n_risk_paths=4) (clean, with its true risk) and
# generate_cohort(200, 3, "messy"), taken with the generator before the shift parameters existed (its parent
# commit). The tables are hashed as CSV text with 12 significant digits, so a change of pandas' in-memory dtypes
# (its hash of an object column differs between versions) does not move them, while any changed value does.
CLEAN_FINGERPRINT = "73d37b5824b86ce02ac19c4f2ebbbe6fe2813b76275242c60ac019cd555f917b"
MESSY_FINGERPRINT = "53a7b6348e6371b5a585ebca647f4ab591b75cedf7e257863e2bcaae68fd3151"


def _fingerprint(cohort) -> str:
    digest = hashlib.sha256()
    tables = [cohort.patients, cohort.measurements, cohort.outcomes]
    if cohort.truth is not None and cohort.truth.true_risk is not None:
        tables.append(cohort.truth.true_risk)
    for table in tables:
        digest.update(table.to_csv(index=False, float_format="%.12g").encode())
    return digest.hexdigest()


@pytest.mark.parametrize("shift", [None, CohortShift()])
def test_no_shift_gives_the_cohorts_of_before_bit_for_bit(shift):
    clean = generate_cohort(60, 7, n_risk_paths=4, shift=shift)
    assert _fingerprint(clean) == CLEAN_FINGERPRINT
    assert _fingerprint(generate_cohort(200, 3, "messy", shift=shift)) == MESSY_FINGERPRINT
    assert "population_shift" not in clean.truth.to_json_dict()


def test_shift_is_recorded_in_the_truth_and_applied_to_the_parameters():
    shift = CohortShift(
        outcome_hazard_multiplier=2.0, age_shift_years=5.0, pack_years_multiplier=1.5, log_volume_shift=0.3
    )
    base = GeneratorParameters()
    shifted = shift.apply(base)
    assert shifted.weibull_rho == pytest.approx(2.0 * base.weibull_rho)
    assert shifted.age_mean == base.age_mean + 5.0
    assert shifted.pack_years_scale == pytest.approx(1.5 * base.pack_years_scale)
    assert shifted.log_volume_mean == pytest.approx(base.log_volume_mean + 0.3)
    truth = generate_cohort(30, 1, n_risk_paths=0, shift=shift).truth.to_json_dict()
    assert truth["population_shift"]["outcome_hazard_multiplier"] == 2.0
    assert truth["outcome_hazard"]["rho"] == pytest.approx(2.0 * base.weibull_rho)


@pytest.mark.parametrize(
    "bad",
    [
        dict(outcome_hazard_multiplier=0.0),
        dict(pack_years_multiplier=-1.0),
        dict(age_shift_years=float("nan")),
        dict(log_volume_shift=float("inf")),
    ],
)
def test_impossible_shifts_are_refused_with_the_parameter_named(bad):
    with pytest.raises(RiskbenchError, match=next(iter(bad))):
        CohortShift(**bad)


def _nelson_aalen_at(intervals: pd.DataFrame, t: float) -> float:
    """Nelson–Aalen cumulative outcome hazard at ``t`` days from the generator's own (start, stop] rows."""
    events = intervals[(intervals["status"] == 1) & (intervals["stop"] <= t)]
    total = 0.0
    for time in np.sort(events["stop"].to_numpy()):
        at_risk = ((intervals["start"] < time) & (intervals["stop"] >= time)).sum()
        total += 1.0 / at_risk
    return total


def test_hazard_multiplier_scales_the_baseline_cumulative_hazard():
    """With every coefficient 0 and no competing death the outcome time is Weibull with cumulative hazard
    m·rho·(t / 365.25)^shape (the closed form documented in GeneratorParameters); Nelson–Aalen recovers it."""
    flat = GeneratorParameters().replace(
        coefficients={name: 0.0 for name in GeneratorParameters().coefficients},
        weibull_rho=0.08,
        gompertz_b=1e-12,
        loss_rate_per_year=0.0,
    )
    t = 2 * 365.25
    closed = {m: m * 0.08 * 2.0**flat.weibull_shape for m in (1.0, 2.5)}
    for m, expected in closed.items():
        cohort = generate_cohort(
            3000, 11, n_risk_paths=0, parameters=flat, shift=CohortShift(outcome_hazard_multiplier=m)
        )
        estimate = _nelson_aalen_at(cohort.truth.intervals, t)
        assert estimate == pytest.approx(expected, rel=0.15), (m, estimate, expected)


def test_case_mix_shift_moves_age_pack_years_and_nodule_size():
    base = generate_cohort(1500, 4, n_risk_paths=0)
    moved = generate_cohort(
        1500, 5, n_risk_paths=0, shift=CohortShift(age_shift_years=6.0, pack_years_multiplier=1.5, log_volume_shift=0.5)
    )

    def first(cohort, column):
        rows = cohort.truth.intervals
        return rows[rows["start"] == 0][column].to_numpy()

    age_gap = first(moved, "age_at_entry").mean() - first(base, "age_at_entry").mean()
    assert age_gap == pytest.approx(6.0, abs=1.0)  # SD 8 years, 1500 patients each: SE of the gap ~0.3
    smokers = [first(c, "pack_years")[first(c, "pack_years") > 0].mean() for c in (base, moved)]
    assert smokers[1] / smokers[0] == pytest.approx(1.5, rel=0.1)
    volume_gap = first(moved, "log_nodule_volume").mean() - first(base, "log_nodule_volume").mean()
    assert volume_gap == pytest.approx(0.5, abs=0.12)
