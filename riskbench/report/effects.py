"""Hazard ratios per a unit a reader can use: per interquartile range, per standard deviation or per a set step.

A model's coefficient β is a log hazard ratio per one unit of its covariate, which is unhelpful for a
covariate measured in pack-years or on a 0–1 score. The effect of a step of ``u`` units is the hazard
ratio ``exp(β·u)``, with the Wald interval ``exp((β ± z·SE)·u)`` -- that is, the per-unit hazard ratio and
its interval limits raised to the power ``u`` (for u > 0), which is how :func:`scaled_hazard_ratios`
computes them so that an interval from any standard error the model uses (robust, model-based, Rubin's
rules) scales the same way.

The step per covariate (:func:`effect_steps`):

* a number from the configuration (``[report] effect_units``), in the covariate's own unit;
* ``"iqr"``: the interquartile range (75th minus 25th percentile) of the covariate over the landmark rows;
* ``"sd"``: its standard deviation over the landmark rows;
* by default, 1 for a binary covariate (values 0 and 1 only: present vs absent) and the interquartile range
  for any other (a common choice in reporting: Harrell, *Regression Modeling Strategies*, 2nd ed. 2015,
  section 5.1, **from memory**). A covariate whose interquartile range is 0 falls back to its standard
  deviation, and one that does not vary at all to 1.

Every table says which step it used in the column ``per``.
"""

from __future__ import annotations

import re
from collections.abc import Callable, Mapping
from dataclasses import dataclass

import numpy as np
import pandas as pd

__all__ = ["EffectStep", "effect_step", "effect_steps", "per_text", "scaled_hazard_ratios", "unit_of_label"]

_UNIT_IN_LABEL = re.compile(r"\(([^()]*)\)\s*$")

HR_COLUMNS = ("hazard_ratio", "hr_lower_95", "hr_upper_95")


@dataclass(frozen=True)
class EffectStep:
    """The step in the covariate's own unit and how it was chosen (``"iqr"``, ``"sd"``, ``"binary"``,
    ``"configured"`` or ``"unit"``)."""

    size: float
    kind: str


def unit_of_label(label: str) -> str:
    """The unit at the end of a covariate label in parentheses (``"Age at entry (years)"`` -> ``"years"``)."""
    found = _UNIT_IN_LABEL.search(str(label))
    return found.group(1).strip() if found else ""


def _is_binary(values: np.ndarray) -> bool:
    seen = np.unique(values[np.isfinite(values)])
    return len(seen) == 2 and set(seen.tolist()) <= {0.0, 1.0}


def effect_step(values: np.ndarray, rule: float | str | None = None) -> EffectStep:
    """The step for one covariate's values (module notes); ``rule`` a positive number, ``"iqr"``, ``"sd"`` or
    None (the default rule).

    Raises
    ------
    ValueError
        ``rule`` is not a positive finite number, ``"iqr"`` or ``"sd"``.
    """
    values = np.asarray(pd.to_numeric(pd.Series(values), errors="coerce"), dtype=float)
    values = values[np.isfinite(values)]
    if isinstance(rule, (int, float)) and not isinstance(rule, bool):
        if not np.isfinite(rule) or rule <= 0:
            raise ValueError(f"an effect unit must be a positive finite number, 'iqr' or 'sd'; got {rule!r}")
        return EffectStep(float(rule), "configured")
    if rule not in (None, "iqr", "sd"):
        raise ValueError(f"an effect unit must be a positive finite number, 'iqr' or 'sd'; got {rule!r}")
    if len(values) == 0:
        return EffectStep(1.0, "unit")
    if rule is None and _is_binary(values):
        return EffectStep(1.0, "binary")
    if rule in (None, "iqr"):
        q25, q75 = np.percentile(values, [25, 75])
        if q75 - q25 > 0:
            return EffectStep(float(q75 - q25), "iqr")
    sd = float(np.std(values, ddof=1)) if len(values) > 1 else 0.0
    return EffectStep(sd, "sd") if sd > 0 else EffectStep(1.0, "unit")


def effect_steps(
    table: pd.DataFrame, covariates: list[str] | tuple[str, ...], rules: Mapping[str, float | str] | None = None
) -> dict[str, EffectStep]:
    """The step of each covariate over the rows of ``table`` (columns named by ``covariates``)."""
    rules = dict(rules or {})
    return {
        c: effect_step(table[c].to_numpy() if c in table.columns else np.empty(0), rules.get(c)) for c in covariates
    }


def per_text(step: EffectStep, unit: str) -> str:
    """What the ``per`` column says for a step, e.g. ``"13.2 years (interquartile range)"``."""
    if step.kind == "binary":
        return "1 (present vs absent)"
    amount = f"{step.size:.3g} {unit}".strip()
    why = {
        "iqr": "interquartile range",
        "sd": "standard deviation",
        "configured": "set in the configuration",
        "unit": "one unit: the covariate does not vary",
    }[step.kind]
    return f"{amount} ({why})"


def scaled_hazard_ratios(
    summary: pd.DataFrame,
    steps: Mapping[str, EffectStep],
    label_of: Callable[[str], str] = str,
    varying: frozenset[str] = frozenset(),
) -> pd.DataFrame:
    """Hazard ratios of a model's main terms per the covariate's step, with the interval scaled alike.

    Parameters
    ----------
    summary : DataFrame
        A model summary for one cause: column ``term`` (or the index) naming the design column, and
        ``hazard_ratio, hr_lower_95, hr_upper_95`` per unit; ``p_value`` is copied when present.
        Terms with ``:`` (landmark interactions) are not hazard ratios of a covariate and are left out.
    steps : mapping of str to EffectStep
        From :func:`effect_steps`; terms without a step are left out.
    label_of : callable
        Readable label (with unit in parentheses) of a covariate column.
    varying : frozenset of str
        Covariates whose effect varies with the landmark: their row is the effect at landmark 0.

    Returns
    -------
    DataFrame
        ``term, label, per, step, hazard_ratio, hr_lower_95, hr_upper_95, p_value, effect_at``.
    """
    rows = summary.set_index("term") if "term" in summary.columns else summary
    missing = [c for c in HR_COLUMNS if c not in rows.columns]
    if missing:
        raise ValueError(f"the model summary lacks the columns {missing} needed for hazard ratios per step")
    out = []
    for term, row in rows.iterrows():
        if ":" in str(term) or term not in steps:
            continue
        step = steps[term]
        label = label_of(str(term))
        out.append(
            {
                "term": term,
                "label": label,
                "per": per_text(step, unit_of_label(label)),
                "step": step.size,
                **{c: float(row[c]) ** step.size for c in HR_COLUMNS},
                "p_value": float(row["p_value"]) if "p_value" in rows.columns else np.nan,
                "effect_at": (
                    "landmark 0 (entry); changes with the landmark: see the β(s) figure"
                    if term in varying
                    else "every landmark"
                ),
            }
        )
    columns = ["term", "label", "per", "step", *HR_COLUMNS, "p_value", "effect_at"]
    return pd.DataFrame(out, columns=columns)
