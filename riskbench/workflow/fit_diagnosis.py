"""Model-fit failures and warnings restated in the user's terms: the model, the landmarks, the counts, the
likely cause and the configuration key that changes it.

A numerical failure deep in the Cox engine (a non-finite information matrix, collinear or constant columns)
means little to someone who wrote a configuration file. These functions say instead, for example,
"model 'imaging' (landmark_cox): the outcome model broke down numerically: fewer than 10 outcomes for 21
coefficients (fewer than 1 outcome per coefficient) ...; remove covariates ([[models]] covariates) or
drop landmarks ([landmarks] landmarks)". Counts below the small-count threshold are shown as "fewer than
<threshold>" (the notes leave the machine with the report).

Rule of thumb quoted in the messages: at least 10 events per coefficient (Peduzzi et al. 1995, J Clin
Epidemiol 48:1503-1510; **common practice**).
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from riskbench.models.fit_warnings import FitWarning
from riskbench.time_units import format_duration

#: Events per coefficient below which the messages call a model thin (**common practice**, Peduzzi 1995).
EVENTS_PER_COEFFICIENT = 10
TIME_VARYING_FAMILIES = ("cox", "time_varying_cox")
_LANDMARK_TERMS = ("landmark_s", "landmark_s2")


def count_text(n: int, threshold: int) -> str:
    """A count for a note: the number, or "fewer than <threshold>" when 0 < n < threshold."""
    return f"fewer than {threshold}" if 0 < n < threshold else str(int(n))


_WHOLE_NUMBER = re.compile(r"(?<![\w.+-])(\d+)(?![\w.]|\.\d)")


def hide_small_numbers(text: str, threshold: int) -> str:
    """``text`` with every whole number between 1 and ``threshold`` - 1 shown as "<threshold" (a message
    quoted from a library may carry counts; notes leave the machine with the report)."""
    return _WHOLE_NUMBER.sub(lambda m: f"<{threshold}" if 0 < int(m.group(1)) < threshold else m.group(1), text)


@dataclass(frozen=True)
class EventCounts:
    """Events available to one model's fit and the number of coefficients it estimates per cause."""

    outcomes: int
    competing: int
    coefficients: int | None
    landmarks_days: tuple[float, ...] = ()
    outcomes_per_landmark: tuple[int, ...] = ()
    competing_per_landmark: tuple[int, ...] = ()


def event_counts(model: Any, landmark_stack: pd.DataFrame, counting_process: pd.DataFrame | None) -> EventCounts:
    """Events of each cause (rows) and coefficients of ``model`` (a ``[[models]]`` entry) on the tables it fits."""
    covariates = list(model.covariates)
    if model.family in TIME_VARYING_FAMILIES and counting_process is not None:
        status = counting_process["status"].to_numpy()
        return EventCounts(int((status == 1).sum()), int((status == 2).sum()), len(covariates))
    status = landmark_stack["status"].to_numpy()
    marks = landmark_stack["landmark"].to_numpy(float)
    levels = np.unique(marks)
    per = [(int(((marks == s) & (status == 1)).sum()), int(((marks == s) & (status == 2)).sum())) for s in levels]
    coefficients: int | None = None
    if model.family == "landmark_cox":
        from riskbench.models.landmark import LandmarkSupermodel

        try:
            coefficients = LandmarkSupermodel(covariates, **dict(model.params)).n_coefficients(len(levels))
        except TypeError:  # unknown params are reported by the fit itself
            coefficients = len(covariates)
    return EventCounts(
        int((status == 1).sum()),
        int((status == 2).sum()),
        coefficients,
        tuple(float(s) for s in levels),
        tuple(p[0] for p in per),
        tuple(p[1] for p in per),
    )


def _cause_of(exc: BaseException) -> str:
    return "competing" if "competing" in str(getattr(exc, "cause", "")) else "outcome"


def _thin_landmarks(counts: EventCounts, cause: str) -> list[str]:
    per = counts.competing_per_landmark if cause == "competing" else counts.outcomes_per_landmark
    if counts.coefficients is None:
        return []
    return [format_duration(s) for s, n in zip(counts.landmarks_days, per) if n < counts.coefficients]


def events_sentence(counts: EventCounts, cause: str, threshold: int) -> str:
    """E.g. "fewer than 10 competing events for 12 coefficients, under 1 per coefficient, and landmarks 0 years,
    6 months with fewer events than coefficients"."""
    n = counts.competing if cause == "competing" else counts.outcomes
    what = "competing events" if cause == "competing" else "outcomes"
    text = f"{count_text(n, threshold)} {what}"
    if not counts.coefficients:
        return text
    text += f" for {counts.coefficients} coefficients"
    ratio = n / counts.coefficients
    if ratio >= EVENTS_PER_COEFFICIENT:
        return text
    text += (
        ", under 1 per coefficient"
        if ratio < 1
        else f", under {EVENTS_PER_COEFFICIENT} per coefficient (the common rule of thumb)"
    )
    thin = _thin_landmarks(counts, cause)
    if thin and len(thin) < len(counts.landmarks_days):
        text += f", and landmark{'s' if len(thin) > 1 else ''} {', '.join(thin)} with fewer {what} than coefficients"
    return text


def covariates_of(terms: Sequence[str], model: Any) -> list[str]:
    """The model's covariates behind design terms (``x:s``, ``x:s2`` -> ``x``; landmark terms dropped)."""
    names = []
    for term in terms:
        base = term.split(":")[0]
        if base in _LANDMARK_TERMS:
            continue
        if base not in names:
            names.append(base)
    known = set(model.covariates)
    return [n for n in names if n in known] or names


def terms_text(terms: Sequence[str]) -> str:
    """Design terms as covariates: ``["x", "x:s", "y:s2", "landmark_s"]`` -> ``"'x', 'y' (and their landmark
    effects)"``."""
    names = list(dict.fromkeys(t.split(":")[0] for t in terms if t and t.split(":")[0] not in _LANDMARK_TERMS))
    effects = any(":" in t for t in terms)
    return _quoted(names) + (" (and their landmark effects)" if effects else "")


def _quoted(names: Sequence[str]) -> str:
    return ", ".join(repr(n) for n in names)


def _fix(model: Any, *, landmarks: bool) -> str:
    fixes = [f"remove covariates ([[models]] covariates of {model.name!r})"]
    if model.family == "landmark_cox":
        effects = dict(model.params).get("landmark_effects", "linear")
        if effects != "none":
            fixes.append('use fewer landmark effects (params landmark_effects = "linear" or "none")')
        if landmarks:
            fixes.append("drop landmarks with few events ([landmarks] landmarks)")
    return ", ".join(fixes[:-1]) + (" or " if len(fixes) > 1 else "") + fixes[-1]


def describe_fit_failure(
    model: Any,
    exc: BaseException,
    landmark_stack: pd.DataFrame,
    counting_process: pd.DataFrame | None,
    *,
    threshold: int,
    where: str = "on the whole cohort",
) -> str:
    """One paragraph: why ``model`` (a ``[[models]]`` entry) could not be fitted ``where``, and what to change.

    ``landmark_stack`` / ``counting_process`` are the tables the fit saw (for the event counts).
    """
    from riskbench.models.cox_engine import CoxCollinearityError, CoxConstantCovariateError, CoxNumericalError

    counts = event_counts(model, landmark_stack, counting_process)
    cause = _cause_of(exc)
    which = "competing-event model" if cause == "competing" else "outcome model"
    terms = covariates_of(getattr(exc, "terms", ()), model)
    head = f"could not be fitted {where}"
    if isinstance(exc, CoxCollinearityError):
        landmark_terms = any(t.split(":")[0] in _LANDMARK_TERMS for t in getattr(exc, "terms", ()))
        also = (
            ' together with the landmark terms of the smooth baseline (params baseline = "smooth")'
            if landmark_terms
            else ""
        )
        return (
            f"{head}: in the {which}, covariates {_quoted(terms)}{also} are collinear in these rows (one is "
            f"a linear combination of the others), so their effects cannot be told apart; "
            f"{_fix(model, landmarks=False)}"
            + (' or use params baseline = "stratified"' if landmark_terms else "")
            + "."
        )
    if isinstance(exc, CoxConstantCovariateError):
        return (
            f"{head}: covariate(s) {_quoted(terms)} take a single value in these rows, so they carry no "
            f"information; remove them ([[models]] covariates of {model.name!r}) or include patients "
            "with other values."
        )
    numerical = (
        isinstance(exc, (CoxNumericalError, np.linalg.LinAlgError, FloatingPointError))
        or "infs or NaNs" in str(exc)
        or "not finite" in str(exc)
    )
    if numerical:
        separated = (
            (
                f"; the coefficients of {_quoted(terms)} were running off to infinity (a covariate "
                "separates the events from the other patients at risk)"
            )
            if terms
            else ""
        )
        return (
            f"{head}: the {which} broke down numerically with "
            f"{events_sentence(counts, cause, threshold)}{separated}; {_fix(model, landmarks=True)}."
        )
    if "no " in str(exc) and ("events" in str(exc) or "status" in str(exc)):
        return f"{head}: {events_sentence(counts, cause, threshold)}; a Cox model needs events of each cause."
    return f"{head}: {type(exc).__name__}: {hide_small_numbers(str(exc), threshold)}"


def describe_warnings(
    model: Any,
    log: Sequence[FitWarning],
    landmark_stack: pd.DataFrame,
    counting_process: pd.DataFrame | None,
    *,
    threshold: int,
) -> str | None:
    """A sentence about the warnings of ``model``'s fit on the whole cohort (None when it did not warn)."""
    if not log:
        return None
    kinds = sorted({w.kind for w in log})
    parts = []
    if "separation" in kinds:
        terms = covariates_of([t for w in log if w.kind == "separation" for t in w.terms], model)
        counts = event_counts(model, landmark_stack, counting_process)
        events = events_sentence(counts, "outcome", threshold)
        if counts.competing:
            events += f"; {events_sentence(counts, 'competing', threshold)}"
        parts.append(
            f"covariate(s) {_quoted(terms)} perfectly separate events from non-events at some event times, so "
            f"their coefficients run off to infinity and their hazard ratios and intervals are meaningless "
            f"[{events}]; {_fix(model, landmarks=True)}"
        )
    if "non-convergence" in kinds:
        parts.append("the fitting iterations did not converge; estimates may be inaccurate")
    if "numerical" in kinds:
        n = sum(w.kind == "numerical" for w in log)
        parts.append(f"{n} floating-point warning(s) (overflow, invalid values or an ill-conditioned matrix)")
    if "other" in kinds:
        parts.append(f"{sum(w.kind == 'other' for w in log)} other warning(s)")
    return "; ".join(parts) + "."
