"""The report's methods paragraph and limitations paragraph, written from the run's facts.

The workflow gathers the facts (:class:`StudyFacts`: the configuration's choices and the cohort's counts);
this module only turns them into sentences, so every sentence is a function of those facts and can be
tested. Counts below the small-count threshold are written as ``<threshold``. Names and labels come from
the configuration: they are plain text here and escaped where the report shows them.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from riskbench.models.prediction_target import CUMULATIVE_INCIDENCE as TARGET_CUMULATIVE
from riskbench.models.prediction_target import prediction_target
from riskbench.report.suppression import complementary_hidden, format_count, is_suppressed
from riskbench.time_units import DAYS_PER_YEAR, format_duration

__all__ = [
    "FEW_RESAMPLES",
    "ModelFacts",
    "StudyFacts",
    "limitations_paragraph",
    "methods_paragraphs",
    "prediction_kind",
    "shown_parts",
]

#: Bootstrap resamples below which percentile intervals are unstable (common practice: at least 200).
FEW_RESAMPLES = 200

CUMULATIVE_INCIDENCE = "cumulative incidence of the outcome, with the competing event modelled"
CAUSE_SPECIFIC = "one minus the outcome-free survival of a cause-specific model (competing events censored)"


def prediction_kind(family: str, params: Mapping[str, Any] | None, cohort_has_competing: bool) -> str:
    """What a model's predicted risk estimates, in words.

    The estimand comes from :func:`riskbench.models.prediction_target.prediction_target`: only a landmark
    super-model with its competing-event part predicts a cumulative incidence; a time-varying Cox model and the
    forest are cause-specific, and their 1 − S is the outcome's risk in a world where the competing event were
    removed (it overstates the cumulative incidence when competing events are common). Without competing events
    in the cohort both are the same.
    """
    if not cohort_has_competing:
        return "one minus the outcome-free survival (no competing events in the cohort)"
    return CUMULATIVE_INCIDENCE if prediction_target(family, params) == TARGET_CUMULATIVE else CAUSE_SPECIFIC


@dataclass(frozen=True)
class ModelFacts:
    """One configured model as the methods paragraph describes it.

    Attributes
    ----------
    name, family : str
    predictors : tuple of str
        Readable labels (with units) of its covariates.
    parameters : int
        Coefficients of its outcome model (0 for a forest).
    missing_data : str
        ``complete_cases``, ``missing_indicator`` or ``multiple_imputation``.
    imputations : int
        m, for multiple imputation.
    prediction : str
        What its risk estimates (:func:`prediction_kind`).
    """

    name: str
    family: str
    predictors: tuple[str, ...]
    parameters: int
    missing_data: str
    imputations: int
    prediction: str


@dataclass(frozen=True)
class StudyFacts:
    """Everything the methods and limitations paragraphs say (times in days)."""

    n_patients: int
    n_outcomes: int
    n_competing: int
    n_censored: int
    follow_up_days: tuple[float, float, float]  # median, lower and upper quartile (reverse Kaplan–Meier)
    time_varying: tuple[str, ...]  # labels of the repeatedly measured variables
    static: tuple[str, ...]  # labels of the static covariates
    max_carry_days: float | None
    lookback_days: float
    landmarks_days: tuple[float, ...]
    horizon_days: float
    report_horizons_days: tuple[float, ...]
    n_landmark_rows: int
    models: tuple[ModelFacts, ...]
    folds: int
    bootstrap_resamples: int
    optimism: bool
    reference: str | None
    candidate: str | None
    threshold: int
    nri: str = "category-free (continuous) NRI"
    unmet_sample_size: tuple[str, ...] = ()  # models that miss a Riley et al. criterion
    ph_violations: tuple[str, ...] = ()  # models whose global proportional-hazards test has p < 0.05
    notes: tuple[str, ...] = field(default=())  # extra sentences for the limitations
    develop_before: str | None = None  # temporal split: ISO date ([validation] develop_before)


_FAMILY_WORDS = {
    "landmark_cox": "a Cox landmark super-model on the landmark rows",
    "time_varying_cox": "a Cox model with time-varying covariates on the (start, stop] rows of the whole follow-up",
    "forest": "a random survival forest on the landmark rows",
}
_MISSING_WORDS = {
    "complete_cases": "rows with a missing predictor left out (complete cases)",
    "missing_indicator": "a missing predictor set to its training mean with a 0/1 missing indicator",
    "multiple_imputation": "multiple imputation by chained equations inside each training set ({m} imputations, "
    "estimates combined by Rubin's rules, predictions averaged)",
}


def _years(days: float) -> str:
    return f"{days / DAYS_PER_YEAR:.1f} years"


def _list(items: Sequence[str]) -> str:
    items = list(items)
    if len(items) <= 1:
        return "".join(items)
    return ", ".join(items[:-1]) + " and " + items[-1]


def _model_sentence(m: ModelFacts) -> str:
    family = _FAMILY_WORDS.get(m.family, m.family)
    size = f" with {m.parameters} outcome coefficients" if m.parameters else ""
    missing = _MISSING_WORDS.get(m.missing_data, m.missing_data).format(m=m.imputations)
    return (
        f"Model '{m.name}' is {family}{size}, with predictors {_list(m.predictors)}; its risk is the "
        f"{m.prediction}; missing values: {missing}."
    )


def shown_parts(counts: Sequence[int], threshold: int) -> list[str]:
    """Counts that add up to a shown total, as text: small ones as ``<threshold``, and one that would give a
    hidden one away by subtraction as "a suppressed number" (see
    :func:`riskbench.report.suppression.complementary_hidden`)."""
    hide = complementary_hidden(np.asarray(counts, dtype=float), threshold)
    return [
        "a suppressed number" if h and not is_suppressed(c, threshold) else format_count(c, threshold)
        for c, h in zip(counts, hide)
    ]


def methods_paragraphs(f: StudyFacts) -> list[str]:
    """The methods paragraphs (participants and outcome, predictors and their timing, the prediction question,
    the models, the validation design), in that order."""
    n = lambda k: format_count(k, f.threshold)  # noqa: E731 - small counts hidden
    median, low, high = f.follow_up_days
    follow = (
        f"Median follow-up by the reverse Kaplan–Meier method (Schemper & Smith 1996) was {_years(median)} "
        f"(interquartile range {_years(low)} to {_years(high)})."
        if median < float("inf")
        else "Median follow-up by the reverse Kaplan–Meier method could not be estimated: fewer than half "
        "of the patients reached the end of follow-up without an event."
    )
    outcomes, competing, censored = shown_parts([f.n_outcomes, f.n_competing, f.n_censored], f.threshold)
    competing = (
        f"{competing} had the competing event first (it ends follow-up and precludes the outcome)"
        if f.n_competing
        else "none had a competing event"
    )
    participants = (
        f"Each of the {n(f.n_patients)} included patients was followed from entry (the time origin) "
        f"until the outcome, a competing event or the end of follow-up, whichever came first: "
        f"{outcomes} had the outcome, {competing}, and {censored} were censored. {follow}"
    )
    carry = (
        f"carried forward for at most {format_duration(f.max_carry_days)} (older values count as missing)"
        if f.max_carry_days is not None
        else "carried forward without a time limit"
    )
    lookback = (
        f"; values dated up to {format_duration(f.lookback_days)} before entry count as known at entry"
        if f.lookback_days > 0
        else ""
    )
    predictors = (
        "Predictors are taken as known at the time of prediction, never later: a value dated on day d "
        f"is used from day d on. Repeatedly measured predictors ({_list(f.time_varying) or 'none'}) are "
        f"{carry}{lookback}. Static predictors ({_list(f.static) or 'none'}) are recorded at entry."
    )
    landmarks = ", ".join(f"{s / DAYS_PER_YEAR:g}" for s in f.landmarks_days)
    question = (
        f"The prediction question is the risk of the outcome within {format_duration(f.horizon_days)} "
        f"after each landmark time ({landmarks} years after entry), from the values known at the landmark; "
        f"each patient still at risk at a landmark contributes one row for it ({n(f.n_landmark_rows)} "
        "landmark rows in all, so most patients contribute several). Measures are reported at "
        + _list([format_duration(h) for h in f.report_horizons_days])
        + " after the landmark."
    )
    models = " ".join(_model_sentence(m) for m in f.models)
    if any(m.parameters for m in f.models):
        models += (
            " Hazard ratios are given per interquartile range of a predictor over the landmark rows (per 1 for "
            "a yes/no predictor) unless [report] effect_units sets another step; an effect that changes with "
            "the landmark is shown as a curve over the landmarks with pointwise 95% bands (delta method), and "
            "a likelihood-ratio test compares the chosen form of that change with the richer one."
        )
    optimism = (
        f" Bootstrap validation uses {f.bootstrap_resamples} resamples of patients: apparent minus the mean "
        "optimism for regression models, the out-of-bag estimate (Efron & Tibshirani 1997) for forests, whose "
        "apparent performance is near perfect by construction."
        if f.optimism and f.bootstrap_resamples > 0
        else ""
    )
    pair = (
        f" The candidate model '{f.candidate}' is compared with the reference '{f.reference}' on the same "
        f"patients by {f.bootstrap_resamples} paired bootstrap resamples of patients, and by a likelihood-ratio "
        f"test of the terms the candidate adds when the two are nested Cox models. Net reclassification "
        f"improvement: {f.nri}."
        if f.candidate and f.reference
        else ""
    )
    validation = (
        f"Performance is estimated from out-of-fold predictions of {f.folds}-fold cross-validation with "
        "all rows of a patient in the same fold (internal validation); concordance, time-dependent AUC, "
        "Brier score and net benefit treat a competing event before the horizon as a known non-outcome, "
        "and calibration compares each model's risk with the observed risk of the same kind (the "
        "Aalen–Johansen cumulative incidence, or 1 − Kaplan–Meier with competing events censored for a "
        f"cause-specific model).{optimism}{pair}{_temporal(f)}"
    )
    return [participants, predictors, question, models, validation]


def _temporal(f: StudyFacts) -> str:
    if not f.develop_before:
        return ""
    return (
        f" In a temporal validation every model is also refitted on the patients who entered before "
        f"{f.develop_before} and evaluated on those who entered on or after it."
    )


def limitations_paragraph(f: StudyFacts) -> str:
    """The limitations that follow from the configuration and the data, one sentence each."""
    out = [
        "The validation is internal (cross-validation and bootstrap on the development cohort); performance "
        "in another population, period or setting is not known until the model is validated there."
        if not f.develop_before
        else f"Apart from the temporal validation on the patients entering from {f.develop_before} on, the validation "
        "is internal; performance in another population or setting is not known until the model is validated "
        "there."
    ]
    if len(f.landmarks_days) > 1:
        out.append(
            "Pooled measures count a patient once per landmark; the rows of one patient are correlated, "
            "so intervals come from resampling patients, not rows."
        )
    if 0 < f.bootstrap_resamples < FEW_RESAMPLES:
        out.append(
            f"Only {f.bootstrap_resamples} bootstrap resamples were drawn (at least {FEW_RESAMPLES} is "
            "common practice): percentile intervals and optimism estimates are unstable."
        )
    cause_specific = [m.name for m in f.models if m.prediction == CAUSE_SPECIFIC]
    if cause_specific:
        out.append(
            f"The risks of {_list([repr(m) for m in cause_specific])} are cause-specific (competing events "
            "censored) and overstate the cumulative incidence when competing events are common."
        )
    if any(m.missing_data == "complete_cases" for m in f.models):
        out.append(
            "Complete-case models leave out rows with a missing predictor, which can bias the estimates "
            "unless values are missing completely at random."
        )
    if f.unmet_sample_size:
        out.append(
            f"The cohort is smaller than the minimum sample size of Riley et al. (2020) for "
            f"{_list([repr(m) for m in f.unmet_sample_size])}: expect overfitting (see the sample-size table)."
        )
    if f.ph_violations:
        out.append(
            f"The proportional-hazards test suggests effects that change over time in "
            f"{_list([repr(m) for m in f.ph_violations])} (global p < 0.05)."
        )
    out.extend(f.notes)
    return " ".join(out)
