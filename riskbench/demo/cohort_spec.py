"""The cohort-stage rules for the synthetic lung-nodule surveillance cohort.

Units and ranges follow the demo scenario (README.md): nodule volume in mm3 (cm3 accepted, x 1000), the
image-analysis suspicion score on [0, 1], the serum marker in ng/mL (ug/L accepted, equal to ng/mL).
The look-back window and the same-day rule are the ones the messy variant's ``defects.json`` assumes when
it counts the rows the ledger must exclude.
"""

from __future__ import annotations

from riskbench.cohort.spec import CohortSpec, VariableSpec

#: Values dated up to this many days before entry count as history known at entry.
DEMO_LOOKBACK_DAYS = 180.0
#: A value 1095 days (about three years) old is no longer current (missing, with its staleness recorded).
DEMO_MAX_CARRY_DAYS = 1095.0
#: Conflicting values of one variable on one day are averaged.
DEMO_SAME_DAY_RULE = "mean"
#: Plausible ranges in the canonical units (inclusive).
DEMO_RANGES: dict[str, tuple[float, float]] = {
    "nodule_volume": (1.0, 5.0e5),  # mm3: below ~1 mm or above ~10 cm diameter is a recording error
    "suspicion_score": (0.0, 1.0),  # a probability-like score
    "serum_marker": (0.0, 1000.0),  # ng/mL
}


def demo_cohort_spec() -> CohortSpec:
    """The :class:`~riskbench.cohort.CohortSpec` of the demo cohort.

    Covariates: ``log_nodule_volume`` with ``log_nodule_volume_change`` and ``log_nodule_volume_slope_per_year``
    (one-year trailing window), ``suspicion_score``, ``serum_marker``, a staleness column per variable,
    ``days_since_exam`` and ``n_exams`` (an exam is a CT date: volume and score), current ``age`` and the
    static ``sex_male``, ``pack_years``, ``age_at_entry``.
    """
    return CohortSpec(
        variables=(
            VariableSpec(
                "nodule_volume",
                unit="mm3",
                conversions={"cm3": 1000.0},
                plausible_min=DEMO_RANGES["nodule_volume"][0],
                plausible_max=DEMO_RANGES["nodule_volume"][1],
                transform="log",
                change=True,
                slope=True,
                slope_window_days=365.25,
            ),
            VariableSpec(
                "suspicion_score",
                unit="1",
                plausible_min=DEMO_RANGES["suspicion_score"][0],
                plausible_max=DEMO_RANGES["suspicion_score"][1],
            ),
            VariableSpec(
                "serum_marker",
                unit="ng/mL",
                conversions={"ug/L": 1.0},
                plausible_min=DEMO_RANGES["serum_marker"][0],
                plausible_max=DEMO_RANGES["serum_marker"][1],
            ),
        ),
        max_carry_days=DEMO_MAX_CARRY_DAYS,
        lookback_days=DEMO_LOOKBACK_DAYS,
        same_day_rule=DEMO_SAME_DAY_RULE,
        static=("sex_male", "pack_years", "age_at_entry"),
        exam_variables=("nodule_volume", "suspicion_score"),
        current_age=True,
    )
