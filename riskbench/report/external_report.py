"""The external-validation report: tables, figures and one self-contained HTML page for a model validated and
updated on a new cohort (:func:`riskbench.validation.external.validate_externally`).

Everything goes through the report helpers every other page uses: tables are saved with
:func:`riskbench.report.outputs.save_table` (file names from ``safe_file_stem``, cells that a spreadsheet would
run neutralised), counts below the small-count threshold are shown as ``<threshold``
(:func:`riskbench.report.suppression.format_count`), and the page is written by
:func:`riskbench.report.html_report.build_report`, which escapes every text and carries the caution.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

import numpy as np
import pandas as pd

from riskbench.metrics.calibration import TARGETS
from riskbench.report.calibration_plot import calibration_figure
from riskbench.report.decision_curve_plot import decision_curve_figure
from riskbench.report.html_report import Section, build_report
from riskbench.report.outputs import save_figure, save_table
from riskbench.report.suppression import format_count
from riskbench.time_units import DAYS_PER_YEAR
from riskbench.validation.external import ExternalValidation
from riskbench.validation.updating import METHOD_WORDS

__all__ = ["EXTERNAL_SECTIONS", "write_external_report"]

EXTERNAL_SECTIONS: tuple[Section, ...] = (
    Section(
        "cohort",
        "The new cohort",
        "Patients, landmark rows and outcomes of the new cohort, built from its raw tables with the model's own "
        "cohort rules (variables, units, transforms, carry-forward and look-back).",
        tables=("external_cohort",),
    ),
    Section(
        "performance",
        "Performance of the original model and its updates",
        "Each measure on the new cohort, pooled over landmark rows and at each landmark, with 95% percentile "
        "intervals from bootstrap resamples that draw patients with all their landmark rows. The original "
        "model's values are an external validation. The updated models were estimated on this same cohort, "
        "so their values are apparent (optimistic; least so for recalibration in the large), and the "
        "intervals hold the fitted updates fixed. The observed/expected ratio compares the observed risk by "
        "the horizon (Aalen–Johansen cumulative incidence with the competing event, or 1 − Kaplan–Meier for a "
        "cause-specific prediction) with the mean predicted risk.",
        tables=("update_comparison", "external_performance"),
    ),
    Section(
        "updates",
        "Which update the new cohort warrants",
        "Updating methods in order of the parameters they re-estimate on the complementary log-log scale of "
        "the original risk (Steyerberg, Clinical Prediction Models, 2nd ed. 2019, ch. 20): recalibration in "
        "the large (intercept), recalibration of intercept and slope, a baseline refitted per landmark, and "
        "model revision (each covariate's effect corrected). The closed test (after Vergouwe et al., Stat Med "
        "2017) first tests the most extended update against the original model; only if it differs "
        "significantly are the methods tested in turn, each against the method chosen so far. Tests are Wald "
        "tests with patient-clustered sandwich variances of pseudo-observation regressions. The last table "
        "estimates by the bootstrap how much of each update's calibration here is optimism (re-estimated on "
        "resamples of patients, scored on the resample and on the whole cohort): the corrected values are what "
        "to expect on the next patients from this population.",
        tables=("closed_test", "update_parameters", "update_optimism"),
    ),
    Section(
        "calibration",
        "Calibration on the new cohort",
        "Observed against predicted risk by the horizon for the original and the chosen model, from "
        "pseudo-observations of the observed risk (Austin, Putter, Giardiello & van Klaveren 2022); a "
        "patient's landmark rows are one cluster.",
        figures=("external_calibration_*",),
        tables=("external_calibration",),
    ),
    Section(
        "decision-curves",
        "Decision curves on the new cohort",
        "Net benefit over risk thresholds at the longest horizon, for the original and every updated model, "
        "against treating everyone and no one, with pointwise bootstrap bands.",
        figures=("external_decision_curve",),
        tables=("external_decision_curve",),
    ),
    Section(
        "triage",
        "Triage operating point on the new cohort",
        "The highest risk threshold below which the spared landmark rows keep the target negative predictive "
        "value, for the original and the chosen model.",
        tables=("external_triage",),
    ),
    Section(
        "not-computed",
        "Parts that could not be computed",
        "Methods or measures left out, with the reason.",
        tables=("external_skipped",),
    ),
)


def _years(days: float) -> str:
    return f"{days / DAYS_PER_YEAR:.3g} years"


def _cohort_table(ev: ExternalValidation, threshold: int) -> pd.DataFrame:
    rows = [
        ("patients", format_count(ev.n_patients, threshold)),
        ("landmark rows", format_count(ev.n_rows, threshold)),
        (f"outcomes within {_years(ev.horizons[-1])} of a landmark", format_count(ev.n_outcomes, threshold)),
        ("the model predicts", TARGETS[ev.target]),
    ]
    return pd.DataFrame(rows, columns=["what", "value"])


def _labelled(frame: pd.DataFrame, column: str = "model") -> pd.DataFrame:
    out = frame.copy()
    out.insert(out.columns.get_loc(column) + 1, "update", out[column].map(METHOD_WORDS).fillna(out[column]))
    return out


def write_external_report(
    ev: ExternalValidation, out: str | Path, *, title: str, threshold: int, facts: Sequence[tuple[str, str]] = ()
) -> Path:
    """Write the external validation's tables, figures and ``report.html`` into ``out``; return the page.

    Parameters
    ----------
    ev
        The result of :func:`~riskbench.validation.external.validate_externally`.
    out
        Output folder (``tables/``, ``figures/`` and ``report.html`` are written there).
    title
        Heading of the page (escaped).
    threshold
        Small-count threshold: counts below it are hidden.
    facts
        ``(label, value)`` pairs shown under the title (escaped).
    """
    out = Path(out)
    save_table(_cohort_table(ev, threshold), out, "external_cohort")
    comparison = ev.comparison()
    comparison.insert(0, "horizon_years", comparison.pop("horizon_days") / DAYS_PER_YEAR)
    save_table(_labelled(comparison), out, "update_comparison")
    measures = ev.performance.measures.copy()
    measures["landmark_years"] = measures.pop("landmark_days") / DAYS_PER_YEAR
    measures["horizon_years"] = measures.pop("horizon_days") / DAYS_PER_YEAR
    save_table(_labelled(measures), out, "external_performance")
    tests = ev.closed_tests()
    if len(tests):
        tests = tests.assign(horizon_years=tests.pop("horizon_days") / DAYS_PER_YEAR)
        save_table(tests, out, "closed_test")
    params = ev.updates()
    if len(params):
        params = params.assign(horizon_years=params.pop("horizon_days") / DAYS_PER_YEAR)
        save_table(_labelled(params, "method"), out, "update_parameters")
    if len(ev.update_optimism):
        optimism = ev.update_optimism.assign(horizon_years=ev.update_optimism["horizon_days"] / DAYS_PER_YEAR)
        save_table(_labelled(optimism.drop(columns="horizon_days"), "method"), out, "update_optimism")
    _calibration(ev, out, threshold)
    if len(ev.performance.decision_curve):
        table = ev.performance.decision_curve
        save_table(table, out, "external_decision_curve")
        save_figure(
            decision_curve_figure(table, horizon_days=ev.performance.decision_days, band_label="95% bootstrap band"),
            out,
            "external_decision_curve",
        )
    if len(ev.triage):
        triage = ev.triage.assign(horizon_years=ev.triage["horizon_days"] / DAYS_PER_YEAR).drop(columns="horizon_days")
        save_table(_labelled(triage), out, "external_triage")
    if ev.skipped:
        save_table(pd.DataFrame(ev.skipped, columns=["part", "reason"]), out, "external_skipped")
    return build_report(out, title=title, threshold=threshold, facts=facts, sections=EXTERNAL_SECTIONS)


def _calibration(ev: ExternalValidation, out: Path, threshold: int) -> None:
    rows = []
    for (model, h), cal in ev.calibration.items():
        rows.append(
            {
                "model": model,
                "horizon_years": h / DAYS_PER_YEAR,
                "observed_risk": cal.observed,
                "mean_predicted": cal.expected,
                "observed_expected": cal.oe_ratio,
                "oe_lower": cal.oe_lower,
                "oe_upper": cal.oe_upper,
                "calibration_intercept": cal.intercept,
                "slope": cal.slope,
                "ici": cal.ici,
                "e90": cal.e90,
            }
        )
        if model in ("original", ev.chosen(h)):
            column = ev.horizons.index(h)
            figure = calibration_figure(
                cal,
                np.asarray(ev.risks[model][:, column]),
                model_name=METHOD_WORDS[model],
                min_group_size=threshold,
                horizon_days=h,
            )
            save_figure(figure, out, f"external_calibration_{model}_{_years(h).replace(' ', '_')}")
    if rows:
        save_table(_labelled(pd.DataFrame(rows)), out, "external_calibration")
