"""Warnings raised while fitting a model, recorded and sorted by kind so they can be counted and reported.

A fit may succeed and still warn: coefficients running off to infinity (separation, monotone likelihood),
iterations that did not meet their convergence rule, or floating-point trouble (overflow, invalid values,
an ill-conditioned matrix). :func:`recorded_warnings` captures them around a fit instead of letting them go
to standard error (where a notebook would show them as stray output), and :func:`count_warnings` tallies
them per kind, so a report can say "model 'x': 3 of 200 resample fits warned of separation".
"""

from __future__ import annotations

import warnings
from collections.abc import Iterable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass

import pandas as pd

#: Kinds of fitting warning, in the order a report lists them.
WARNING_KINDS: tuple[str, ...] = ("separation", "non-convergence", "numerical", "other")

#: What each kind means, in a reader's words.
KIND_MEANING: dict[str, str] = {
    "separation": "coefficients ran off to infinity (a covariate separates the events from the other rows)",
    "non-convergence": "the fitting iterations did not converge",
    "numerical": "floating-point trouble (overflow, invalid values or an ill-conditioned matrix)",
    "other": "other warnings",
}


@dataclass(frozen=True)
class FitWarning:
    """One recorded warning: its kind, the terms it names (if any) and its text."""

    kind: str
    terms: tuple[str, ...]
    text: str


def classify(category: type[Warning], message: Warning | str) -> FitWarning:
    """The :class:`FitWarning` of one warning (category and message as :mod:`warnings` records them)."""
    from riskbench.models.cox_engine import CoxConvergenceWarning, MonotoneLikelihoodWarning

    text = str(message)
    terms = tuple(getattr(message, "terms", ()))
    name = category.__name__
    if issubclass(category, MonotoneLikelihoodWarning):
        kind = "separation"
    elif issubclass(category, CoxConvergenceWarning) or name == "ConvergenceWarning":
        kind = "non-convergence"
    elif issubclass(category, RuntimeWarning) or name in ("LinAlgWarning", "IllConditionedWarning"):
        kind = "numerical"
    else:
        kind = "other"
    return FitWarning(kind, terms, text)


@contextmanager
def recorded_warnings() -> Iterator[list[FitWarning]]:
    """Record every warning raised inside the block (none reaches standard error).

    Yields a list that is filled with :class:`FitWarning` objects when the block ends (also when it raises).

    Examples
    --------
    >>> with recorded_warnings() as log:
    ...     warnings.warn("overflow encountered in exp", RuntimeWarning)
    >>> [w.kind for w in log]
    ['numerical']
    """
    log: list[FitWarning] = []
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            yield log
        finally:
            log.extend(classify(w.category, w.message) for w in caught)


COUNT_COLUMNS = ["model", "kind", "warnings", "fits_warned", "fits", "terms"]


def count_warnings(per_fit: Iterable[tuple[str, list[FitWarning]]]) -> pd.DataFrame:
    """Count recorded warnings per model and kind.

    Parameters
    ----------
    per_fit
        ``(model name, warnings of one fit)`` for every fit made (including fits that did not warn, so that
        the number of fits is known).

    Returns
    -------
    DataFrame
        ``model, kind, warnings, fits_warned, fits, terms``: the number of warnings of that kind, the number
        of fits that gave at least one, the number of fits of the model, and the terms named (comma
        separated, sorted). Only kinds that occurred are listed.
    """
    fits: dict[str, int] = {}
    counts: dict[tuple[str, str], list] = {}
    for model, log in per_fit:
        fits[model] = fits.get(model, 0) + 1
        seen: set[str] = set()
        for w in log:
            entry = counts.setdefault((model, w.kind), [0, 0, set()])
            entry[0] += 1
            entry[2].update(w.terms)
            if w.kind not in seen:
                entry[1] += 1
                seen.add(w.kind)
    rows = [
        (model, kind, n, warned, fits[model], ", ".join(sorted(terms)))
        for (model, kind), (n, warned, terms) in counts.items()
    ]
    order = {k: i for i, k in enumerate(WARNING_KINDS)}
    table = pd.DataFrame(rows, columns=COUNT_COLUMNS)
    return table.sort_values(
        ["model", "kind"], key=lambda c: c.map(order) if c.name == "kind" else c, ignore_index=True
    )
