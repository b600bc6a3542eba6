"""The models stage's effect tables: hazard ratios per a reader's step, β(s) bands of landmark-varying effects,
and the likelihood-ratio test of a richer landmark form.

Each function works on one fitted model (as the models stage fits it, possibly inside a
:class:`~riskbench.models.missing_data.MissingDataModel`) and returns tables; a part that cannot be computed
raises :data:`PART_ERRORS`, which the stage turns into a note.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from typing import Any

import numpy as np
import pandas as pd

from riskbench.models.landmark import LandmarkSupermodel
from riskbench.models.rubin import pool_estimates
from riskbench.report.effects import EffectStep, effect_steps, scaled_hazard_ratios
from riskbench.validation.landmark_form import form_comparisons, landmark_form_test

__all__ = ["PART_ERRORS", "coefficient_table", "effect_bands", "form_tests", "landmark_models", "model_effects"]

#: Errors that make one effect part fail without stopping the stage.
PART_ERRORS: tuple[type[BaseException], ...] = (ValueError, ArithmeticError, np.linalg.LinAlgError)

_HR = ["hazard_ratio", "hr_lower_95", "hr_upper_95"]
_BAND_POINTS = 41


def landmark_models(model: Any) -> list[LandmarkSupermodel]:
    """The landmark super-model(s) inside a fitted model: itself, or the one fit (complete cases, missing
    indicator) or the m fits (multiple imputation) of a missing-data wrapper; empty for other families."""
    if isinstance(model, LandmarkSupermodel):
        return [model]
    inner = getattr(model, "models_", None) or []
    return [m for m in inner if isinstance(m, LandmarkSupermodel)] if inner else []


def varying_covariates(model: Any) -> frozenset[str]:
    """Covariates whose effect changes with the landmark (landmark_effects other than "none")."""
    fits = landmark_models(model)
    if not fits or fits[0]._effect_power_ == 0:
        return frozenset()
    return frozenset(fits[0].covariates)


def coefficient_table(coefficients: pd.DataFrame) -> pd.DataFrame:
    """The coefficient table with the hazard-ratio columns blank for landmark interaction terms (``x:s``,
    ``x:s2``): an exponentiated interaction is not a hazard ratio a reader can use; β(s) is drawn instead."""
    out = coefficients.copy()
    terms = out["term"] if "term" in out.columns else pd.Series(out.index, index=out.index)
    interaction = terms.astype(str).str.contains(":").to_numpy()
    for column in [c for c in _HR if c in out.columns]:
        out.loc[interaction, column] = np.nan
    return out


def effect_bands(model: Any, level: float = 0.95) -> pd.DataFrame | None:
    """β(s) with pointwise bands over the fitted landmark range (``covariate, landmark_days, coef, se, lower,
    upper``), pooled over imputations by Rubin's rules; None when no covariate's effect varies."""
    fits = landmark_models(model)
    if not fits or fits[0]._effect_power_ == 0:
        return None
    grid = np.linspace(float(fits[0].landmarks_.min()), float(fits[0].landmarks_.max()), _BAND_POINTS)
    per_fit = [f.landmark_effect_bands(grid, level=level) for f in fits]
    if len(per_fit) == 1:
        return per_fit[0]
    pooled = pool_estimates(
        np.stack([b["coef"].to_numpy() for b in per_fit]), np.stack([b["se"].to_numpy() ** 2 for b in per_fit])
    )
    low, high = pooled.interval(level)
    out = per_fit[0][["covariate", "landmark_days"]].copy()
    out["coef"], out["se"], out["lower"], out["upper"] = pooled.estimate, pooled.se, low, high
    return out


def form_tests(model: Any, spec: Any, stack: pd.DataFrame) -> list[dict[str, Any]]:
    """Likelihood-ratio tests of the landmark forms worth comparing for a landmark_cox model (complete cases)."""
    fits = landmark_models(model)
    if not fits:
        return []
    params = dict(spec.params)
    fitted = fits[0].landmark_effects
    rows = []
    for smaller, larger in form_comparisons(fitted, len(fits[0].landmarks_)):
        test = landmark_form_test(stack, spec.covariates, smaller, larger, params)
        test.pop("rows")
        rows.append({"model": spec.name, "fitted_form": fitted, **test})
    return rows


def model_effects(
    model: Any,
    summary: pd.DataFrame,
    stack: pd.DataFrame,
    covariates: list[str],
    rules: Mapping[str, float | str],
    label_of: Callable[[str], str],
) -> tuple[pd.DataFrame, dict[str, EffectStep]]:
    """Hazard ratios per step of the model's main terms (see :func:`riskbench.report.effects.scaled_hazard_ratios`)
    and the steps used, measured over the landmark rows of ``stack``."""
    steps = effect_steps(stack, covariates, rules)
    return scaled_hazard_ratios(summary, steps, label_of, varying_covariates(model)), steps
