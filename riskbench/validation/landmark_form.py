"""Is a richer landmark-varying effect needed? Likelihood-ratio test between landmark super-model forms.

The landmark super-model's coefficients vary with the landmark s as a polynomial in s/S of degree 0
(``"none"``), 1 (``"linear"``, the default) or 2 (``"quadratic"``). The forms are nested, so the outcome
models of two forms fitted on the same rows are compared by the likelihood-ratio statistic
2 (l_larger − l_smaller) on as many degrees of freedom as the larger form adds (one per covariate per
degree). Both are fitted here on the rows complete in the model's covariates, with the model's other
parameters, without a competing-event model (the test concerns the outcome model only).

The stack repeats patients at several landmarks, so the partial likelihood treats correlated rows as
independent; the test is then approximate (van Houwelingen & Putter 2012, *Dynamic Prediction in Clinical
Survival Analysis*, section 7.2, **from memory**, use it this way to choose the form) and is read as a guide
to parsimony, not as a formal test.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd

from riskbench.models.landmark import LandmarkSupermodel
from riskbench.validation.errors import ValidationInputError
from riskbench.validation.likelihood_ratio import likelihood_ratio_test

__all__ = ["FORMS", "form_comparisons", "landmark_form_test"]

FORMS = ("none", "linear", "quadratic")


def form_comparisons(fitted: str, n_landmarks: int) -> list[tuple[str, str]]:
    """The (smaller, larger) form pairs worth reporting for a model fitted with ``fitted``: every richer form
    the landmarks allow against it, or, for the richest form, the fitted form against the next simpler one."""
    if fitted not in FORMS:
        raise ValidationInputError(f"landmark_effects must be one of {FORMS}; got {fitted!r}")
    allowed = FORMS[: max(1, min(n_landmarks, len(FORMS)))]
    i = FORMS.index(fitted)
    if fitted not in allowed:
        return []
    richer = [(fitted, f) for f in allowed[i + 1 :]]
    if richer:
        return richer
    return [(FORMS[i - 1], fitted)] if i > 0 else []


def landmark_form_test(
    stack: pd.DataFrame, covariates: Sequence[str], smaller: str, larger: str, params: Mapping[str, Any] | None = None
) -> dict[str, Any]:
    """Likelihood-ratio test of landmark form ``larger`` against ``smaller`` (module notes).

    Parameters
    ----------
    stack : DataFrame
        Landmark stack (``patient_id, landmark, time, status`` + covariates).
    covariates : sequence of str
    smaller, larger : {"none", "linear", "quadratic"}
        Nested forms, ``smaller`` of lower degree.
    params : mapping
        The model's other parameters (``baseline``, ``ties``); ``landmark_effects`` and ``competing`` are
        set here.

    Returns
    -------
    dict
        ``smaller_form, larger_form, lr_statistic, df, p_value, rows`` (landmark rows used).

    Raises
    ------
    ValidationInputError
        Forms not nested, or a fit that does not allow the test.
    """
    if smaller not in FORMS or larger not in FORMS or FORMS.index(smaller) >= FORMS.index(larger):
        raise ValidationInputError(
            f"the landmark forms {smaller!r} and {larger!r} are not nested in that order; "
            f"use two of {FORMS}, the simpler first"
        )
    covariates = list(covariates)
    complete = stack[covariates].notna().all(axis=1).to_numpy() if covariates else np.ones(len(stack), bool)
    rows = stack.loc[complete]
    other = {k: v for k, v in dict(params or {}).items() if k not in ("landmark_effects", "competing")}
    fits = [
        LandmarkSupermodel(covariates, landmark_effects=form, competing=False, **other).fit(rows)
        for form in (smaller, larger)
    ]
    small, large = (f.outcome_ for f in fits)
    if not np.isclose(small.loglik_null, large.loglik_null, rtol=1e-8, atol=1e-8):
        raise ValidationInputError("the two forms' null log-likelihoods differ; they were not fitted on the same rows")
    test = likelihood_ratio_test(small.loglik, large.loglik, len(large.coef) - len(small.coef))
    return {
        "smaller_form": smaller,
        "larger_form": larger,
        "lr_statistic": test.statistic,
        "df": test.df,
        "p_value": test.p_value,
        "rows": int(complete.sum()),
    }
