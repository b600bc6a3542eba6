"""The items a reviewer checks, computed for a run: model checks (models stage) and the methods, sample size,
follow-up, limitations and reporting-items mapping (comparison stage, just before the report).

- :func:`cox_checks`: the Grambsch–Therneau proportional-hazards test of every Cox-family model
  (``tables/proportional_hazards``) and the likelihood-ratio test of what the candidate adds to the reference
  when both are nested Cox models of one family (``tables/likelihood_ratio_test``);
- :func:`write_review_items`: ``tables/sample_size`` (Riley et al. 2020 criteria per model),
  ``tables/follow_up`` (reverse Kaplan–Meier), ``tables/methods.txt``, ``tables/limitations.txt`` and
  ``tables/reporting_items`` (TRIPOD 2015 / TRIPOD+AI 2024 items and where the report covers them).

A part that cannot be computed becomes a note; nothing here stops a run.
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

import numpy as np
import pandas as pd

from riskbench.metrics.follow_up import reverse_km_follow_up
from riskbench.metrics.sample_size import DEFAULT_R2_FRACTION, max_cox_snell_r2, riley_survival_criteria
from riskbench.models.cox_diagnostics import cox_refit, proportional_hazards_test
from riskbench.models.family_registry import family as family_of
from riskbench.report.methods_text import (
    ModelFacts,
    StudyFacts,
    limitations_paragraph,
    methods_paragraphs,
    prediction_kind,
    shown_parts,
)
from riskbench.report.notes import Note
from riskbench.report.outputs import TABLES, atomic_write_text, load_data, save_table
from riskbench.report.reporting_items import reporting_items_table
from riskbench.report.suppression import format_count
from riskbench.time_units import DAYS_PER_YEAR
from riskbench.validation.likelihood_ratio import nested_cox_lr_test
from riskbench.validation.reclassification import nri_kind
from riskbench.workflow.config import AnalysisConfig, ModelConfig
from riskbench.workflow.model_factory import missing_data_plan
from riskbench.workflow.term_labels import term_label

COX_FAMILIES = ("landmark_cox", "time_varying_cox", "cox")
#: Errors of one check that become a note (numerical trouble, a model that cannot be refitted).
CHECK_ERRORS: tuple[type[BaseException], ...] = (ValueError, ArithmeticError, np.linalg.LinAlgError)
_FACT_ERRORS: tuple[type[BaseException], ...] = (*CHECK_ERRORS, KeyError)
PH_ALPHA = 0.05  # common practice


def _table_of(model: ModelConfig, stack: pd.DataFrame, cp: pd.DataFrame) -> pd.DataFrame:
    return stack if model.family == "landmark_cox" else cp


def _time_scale(origin: str) -> str:
    return "time since the landmark" if origin == "landmark" else "time since entry"


def cox_checks(
    config: AnalysisConfig,
    stack: pd.DataFrame,
    cp: pd.DataFrame,
    label_of: Callable[[str], str],
    skip: frozenset[str] = frozenset(),
) -> tuple[dict[str, pd.DataFrame], list[Note]]:
    """Proportional-hazards tests of the Cox-family models and the nested likelihood-ratio test.

    Each model is refitted as a plain Cox model of its outcome (:func:`riskbench.models.cox_diagnostics.cox_refit`)
    on the rows with every covariate known; ``skip`` names models that could not be fitted.
    """
    tables: dict[str, pd.DataFrame] = {}
    notes: list[Note] = []
    ph = []
    for m in config.models:
        if m.name in skip or m.family not in COX_FAMILIES:
            continue
        try:
            refit = cox_refit(m.family, m.covariates, m.params, _table_of(m, stack, cp))
            test = proportional_hazards_test(refit.model, refit.table, transform="km")
        except CHECK_ERRORS as exc:
            notes.append(Note("models", "proportional-hazards test", f"not computed: {exc}", model=m.name))
            continue
        test = test.reset_index()
        ph.append(
            pd.DataFrame(
                {
                    "model": m.name,
                    "term": test["covariate"],
                    "label": [t if t == "GLOBAL" else term_label(t, label_of) for t in test["covariate"]],
                    "statistic": test["statistic"],
                    "df": test["df"],
                    "p_value": test["p_value"],
                    "time_scale": f"1 - Kaplan-Meier of {_time_scale(refit.time_origin)}",
                }
            )
        )
    if ph:
        tables["proportional_hazards"] = pd.concat(ph, ignore_index=True)
    lr = _nested_test(config, stack, cp, label_of, skip, notes)
    if lr is not None:
        tables["likelihood_ratio_test"] = lr
    return tables, notes


def _nested_test(
    config: AnalysisConfig,
    stack: pd.DataFrame,
    cp: pd.DataFrame,
    label_of: Callable[[str], str],
    skip: frozenset[str],
    notes: list[Note],
) -> pd.DataFrame | None:
    part = "likelihood-ratio test"
    pair = config.validation.compare
    models = {m.name: m for m in config.models}
    if pair is None or not set(pair) <= set(models):  # no pair, or names that are not models (the
        return None  # comparison stage says so)
    candidate, reference = (models[n] for n in pair)
    why = None
    if {candidate.name, reference.name} & skip:
        why = "a model of the pair could not be fitted"
    elif candidate.family != reference.family or candidate.family not in COX_FAMILIES:
        why = "it needs two Cox models of one family"
    elif not set(reference.covariates) <= set(candidate.covariates) or dict(reference.params) != dict(candidate.params):
        why = "the reference is not nested in the candidate (same family and settings, a subset of its covariates)"
    elif float(candidate.params.get("penalty", 0.0) or 0.0) > 0:
        why = "a penalised fit's likelihood does not give a likelihood-ratio test"
    if why:
        notes.append(Note("models", part, f"not computed: {why}.", kind="not computed"))
        return None
    table = _table_of(candidate, stack, cp)
    try:
        fits = [
            cox_refit(m.family, m.covariates, m.params, table, complete_on=candidate.covariates)
            for m in (reference, candidate)
        ]
        test = nested_cox_lr_test(fits[0].model, fits[1].model)
    except CHECK_ERRORS as exc:
        notes.append(Note("models", part, f"not computed: {exc}"))
        return None
    added = [c for c in fits[1].model.fit_.names if c not in set(fits[0].model.fit_.names)]
    threshold = config.report.small_count_threshold
    return pd.DataFrame(
        [
            {
                "reference": reference.name,
                "candidate": candidate.name,
                "added_terms": "; ".join(term_label(t, label_of) for t in added),
                "df": test.df,
                "statistic": test.statistic,
                "p_value": test.p_value,
                # rows used + left out = the landmark rows stated in the methods: hide one that gives the other away
                "rows_used": shown_parts([len(fits[1].table), fits[1].rows_left_out], threshold)[0],
                "outcomes": format_count(int((fits[1].table["status"] == 1).sum()), threshold),
            }
        ]
    )


# --------------------------------------------------------------------------------------------- comparison stage


def model_parameters(model: ModelConfig, n_landmarks: int) -> int:
    """Coefficients of a model's outcome part (the candidate predictor parameters); 0 for a forest."""
    if model.family == "landmark_cox":
        fam = family_of(model.family)
        estimator = fam.estimator_class()(list(model.covariates), **{**fam.defaults, **dict(model.params)})
        return int(estimator.n_coefficients(n_landmarks))
    if model.family in ("time_varying_cox", "cox"):
        return len(model.covariates)
    return 0


def _follow_up(patients: pd.DataFrame) -> tuple[float, float, float]:
    fu = reverse_km_follow_up(patients["end_days"].to_numpy(float), patients["end_status"].to_numpy())
    return fu.median, fu.lower_quartile, fu.upper_quartile


def follow_up_table(patients: pd.DataFrame, threshold: int) -> pd.DataFrame:
    """Median follow-up and quartiles by reverse Kaplan–Meier (years), with the number of patients."""
    median, low, high = _follow_up(patients)
    return pd.DataFrame(
        [
            {
                "n_patients": format_count(len(patients), threshold),
                "median_follow_up_years": median / DAYS_PER_YEAR,
                "lower_quartile_years": low / DAYS_PER_YEAR,
                "upper_quartile_years": high / DAYS_PER_YEAR,
                "method": "reverse Kaplan-Meier (Schemper & Smith 1996)",
            }
        ]
    )


def sample_size_table(config: AnalysisConfig, patients: pd.DataFrame, n_landmarks: int) -> pd.DataFrame:
    """Riley et al. (2020) criteria per Cox-family model against the cohort (patients and outcomes).

    The anticipated Cox–Snell R² is 15% of its maximum (conservative; Riley et al.). The cohort's rate is
    outcomes per person-year of follow-up from entry; the criterion (iii) time point is the prediction window.
    Empty when the number of outcomes is hidden (fewer than the small-count threshold, or hidden so that a
    small number of competing events cannot be worked out; rate × follow-up × patients would show it) or no
    model has coefficients.
    """
    threshold = config.report.small_count_threshold
    n = len(patients)
    outcomes = int((patients["end_status"] == 1).sum())
    years = patients["end_days"].to_numpy(float) / DAYS_PER_YEAR
    ends = [outcomes, int((patients["end_status"] == 2).sum()), int((patients["end_status"] == 0).sum())]
    if shown_parts(ends, threshold)[0] != str(outcomes) or years.sum() <= 0:
        return pd.DataFrame()  # the rate would give a hidden count of outcomes away
    rate, mean_fu = outcomes / years.sum(), float(years.mean())
    r2 = DEFAULT_R2_FRACTION * max_cox_snell_r2(rate, mean_fu)
    rows = []
    for m in config.models:
        p = model_parameters(m, n_landmarks)
        if p == 0:
            continue
        for c in riley_survival_criteria(p, None, rate, mean_fu, config.landmarks.horizon_years):
            rows.append(
                {
                    "model": m.name,
                    "parameters": p,
                    "criterion": c.criterion,
                    "aim": c.description,
                    "required_patients": c.participants,
                    "required_outcomes": int(np.ceil(c.events)),
                    "cohort_patients": format_count(n, threshold),
                    "cohort_outcomes": format_count(outcomes, threshold),
                    "cohort_outcomes_per_parameter": outcomes / p,
                    "met": "yes" if n >= c.participants else "no",
                    "anticipated_r2_cox_snell": r2,
                    "outcome_rate_per_year": rate,
                    "mean_follow_up_years": mean_fu,
                }
            )
    return pd.DataFrame(rows)


def _global_ph_violations(run_dir: Path) -> tuple[str, ...]:
    path = run_dir / TABLES / "proportional_hazards.csv"
    if not path.exists():
        return ()
    table = pd.read_csv(path)
    hits = table[(table["term"] == "GLOBAL") & (pd.to_numeric(table["p_value"], errors="coerce") < PH_ALPHA)]
    return tuple(dict.fromkeys(str(m) for m in hits["model"]))


def study_facts(
    config: AnalysisConfig,
    patients: pd.DataFrame,
    stack: pd.DataFrame,
    sample_size: pd.DataFrame,
    run_dir: Path,
    label_of: Callable[[str], str],
) -> StudyFacts:
    """The facts the methods and limitations paragraphs state, from the configuration and the run's data."""
    has_competing = bool((patients["end_status"] == 2).any())
    n_landmarks = int(stack["landmark"].nunique())
    models = []
    for m in config.models:
        plan = missing_data_plan(m, config.missing_data)
        models.append(
            ModelFacts(
                m.name,
                m.family,
                tuple(label_of(c) for c in m.covariates),
                model_parameters(m, n_landmarks),
                plan.method,
                plan.imputations,
                prediction_kind(m.family, m.params, has_competing),
            )
        )
    unmet = () if sample_size.empty else tuple(dict.fromkeys(sample_size.loc[sample_size["met"] == "no", "model"]))
    pair = config.validation.compare
    if pair is not None and not set(pair) <= {m.name for m in config.models}:
        pair = None  # the comparison names a model that is not configured: no comparison to describe
    return StudyFacts(
        n_patients=len(patients),
        n_outcomes=int((patients["end_status"] == 1).sum()),
        n_competing=int((patients["end_status"] == 2).sum()),
        n_censored=int((patients["end_status"] == 0).sum()),
        follow_up_days=_follow_up(patients),
        time_varying=tuple(label_of(v.column) for v in config.cohort.variables),
        static=tuple(label_of(c) for c in config.cohort.static_columns),
        max_carry_days=config.cohort.max_carry_days,
        lookback_days=float(config.cohort.lookback_days),
        landmarks_days=tuple(config.landmarks.landmarks_days),
        horizon_days=config.landmarks.horizon_days,
        report_horizons_days=tuple(config.report.horizons_days),
        n_landmark_rows=len(stack),
        models=tuple(models),
        folds=config.validation.folds,
        bootstrap_resamples=config.validation.bootstrap_resamples,
        optimism=config.validation.optimism,
        reference=pair[1] if pair else None,
        candidate=pair[0] if pair else None,
        threshold=config.report.small_count_threshold,
        nri=nri_kind(None),
        unmet_sample_size=unmet,
        ph_violations=_global_ph_violations(run_dir),
        develop_before=config.validation.develop_before,
    )


def write_review_items(
    config: AnalysisConfig, run_dir: str | Path, stack: pd.DataFrame, label_of: Callable[[str], str]
) -> list[Note]:
    """Write the sample-size, follow-up, methods, limitations and reporting-items files; return notes.

    Call it after every other table of the run is written: the reporting-items table looks for them.
    """
    run_dir = Path(run_dir)
    notes: list[Note] = []
    threshold = config.report.small_count_threshold
    try:
        patients = load_data(run_dir, "patients")
    except (OSError, ValueError) as exc:
        patients = None
        notes.append(Note("comparison", "methods", f"not written: the patients table could not be read ({exc})."))
    if patients is not None and len(patients):
        try:
            save_table(follow_up_table(patients, threshold), run_dir, "follow_up")
        except CHECK_ERRORS as exc:
            notes.append(Note("comparison", "median follow-up", f"not computed: {exc}"))
        sample_size = pd.DataFrame()
        try:
            sample_size = sample_size_table(config, patients, int(stack["landmark"].nunique()))
        except CHECK_ERRORS as exc:
            notes.append(Note("comparison", "sample size", f"not computed: {exc}"))
        if len(sample_size):
            save_table(sample_size, run_dir, "sample_size")
        elif not notes:
            notes.append(
                Note(
                    "comparison",
                    "sample size",
                    "not shown: no Cox-family model, or the number of "
                    f"outcomes is hidden by the small-count rule (threshold {threshold}).",
                )
            )
        try:
            facts = study_facts(config, patients, stack, sample_size, run_dir, label_of)
        except _FACT_ERRORS as exc:
            notes.append(Note("comparison", "methods and limitations", f"not written: {exc}"))
        else:
            atomic_write_text(run_dir / TABLES / "methods.txt", "\n".join(methods_paragraphs(facts)) + "\n")
            atomic_write_text(run_dir / TABLES / "limitations.txt", limitations_paragraph(facts) + "\n")
    save_table(reporting_items_table(run_dir), run_dir, "reporting_items")
    return notes
