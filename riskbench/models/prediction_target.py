"""What a configured model's risk estimates: a cumulative incidence with the competing event, or 1 − S of a
cause-specific model (competing events treated as censoring).

The landmark super-model with ``competing = true`` (its default) combines the outcome and the competing
event's cause-specific hazards into the cumulative incidence of the outcome; the time-varying Cox model, the
forest and a landmark super-model with ``competing = false`` model the outcome's cause-specific hazard only,
so their 1 − S is the risk of the outcome in a world without the competing event. Calibration judges each
against its own estimand (:data:`riskbench.metrics.calibration.TARGETS`).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from riskbench.models.family_registry import canonical_family, family

CUMULATIVE_INCIDENCE = "cumulative_incidence"
CAUSE_SPECIFIC = "cause_specific"

#: Short words for tables and figures.
TARGET_WORDS: dict[str, str] = {
    CUMULATIVE_INCIDENCE: "cumulative incidence",
    CAUSE_SPECIFIC: "cause-specific 1 − S",
}


def prediction_target(family_name: str, params: Mapping[str, Any] | None = None) -> str:
    """``"cumulative_incidence"`` or ``"cause_specific"`` for a model family and its ``params``.

    Parameters
    ----------
    family_name : str
        A family of :data:`riskbench.models.family_registry.FAMILIES` (an old alias is accepted).
    params : mapping, optional
        The model's ``params`` from the configuration (defaults from the registry where absent).
    """
    name = canonical_family(family_name)
    if name in ("landmark_cox", "shared_trajectory_joint"):
        default = family(name).param("competing").default
        return CUMULATIVE_INCIDENCE if bool((params or {}).get("competing", default)) else CAUSE_SPECIFIC
    family(name)  # an unknown family raises KeyError here
    return CAUSE_SPECIFIC


def fitted_target(model: Any) -> str:
    """The estimand of a fitted model: a cumulative incidence when it holds a fitted competing-event model
    (``competing_``), else the cause-specific 1 − S. A missing-data wrapper is looked through."""
    inner = getattr(model, "estimator", None)
    if inner is not None and hasattr(model, "models_"):
        fitted = model.models_
        return fitted_target(fitted[0]) if fitted else prediction_target("landmark_cox")
    return CUMULATIVE_INCIDENCE if getattr(model, "competing_", None) is not None else CAUSE_SPECIFIC
