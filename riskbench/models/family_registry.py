"""The model families a configuration can name: estimator, the table it fits on and its parameters.

One registry (:data:`FAMILIES`) serves the configuration check (names, types, allowed values, defaults of
``params``), the model factory and the documentation (``riskbench list-covariates`` and the README table).
Each parameter mirrors a keyword of the estimator's constructor; a test keeps them in step.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

#: The table a family fits on.
LANDMARK_STACK = "landmark_stack"
COUNTING_PROCESS = "counting_process"

#: Old family names still accepted (for one release), and the name that replaces them.
ALIASES: dict[str, str] = {"cox": "time_varying_cox"}


@dataclass(frozen=True)
class Param:
    """One constructor keyword of a family's estimator.

    Attributes
    ----------
    name : str
    kinds : tuple of str
        Accepted value kinds: ``"int"``, ``"float"``, ``"bool"``, ``"str"``, ``"none"``.
    default : object
        The estimator's default.
    choices : tuple or None
        Allowed text values (for ``"str"``), or None for free text.
    minimum, maximum : float or None
        Inclusive numeric bounds.
    positive : bool
        Numbers must be > 0 (not only >= minimum).
    doc : str
        What the parameter does, with its unit.
    """

    name: str
    kinds: tuple[str, ...]
    default: Any
    doc: str
    choices: tuple[str, ...] | None = None
    minimum: float | None = None
    maximum: float | None = None
    positive: bool = False

    def allowed(self) -> str:
        """What is allowed, in words."""
        parts = []
        if "str" in self.kinds:
            parts.append("one of " + ", ".join(repr(c) for c in self.choices) if self.choices else "a text")
        numbers = [k for k in ("int", "float") if k in self.kinds]
        if numbers:
            word = "an integer" if numbers == ["int"] else "a number"
            if self.positive:
                word += " > 0"
            elif self.minimum is not None:
                word += f" >= {self.minimum:g}"
            if self.maximum is not None:
                word += f" <= {self.maximum:g}"
            parts.append(word)
        if "bool" in self.kinds:
            parts.append("true or false")
        text = " or ".join(parts)
        if "none" in self.kinds:
            text += " (leave the key out for none)"
        return text

    def check(self, value: Any) -> str | None:
        """None when ``value`` is allowed, otherwise what is allowed."""
        if value is None:
            return None if "none" in self.kinds else self.allowed()
        if isinstance(value, bool):
            ok = "bool" in self.kinds
        elif isinstance(value, int):
            ok = "int" in self.kinds or "float" in self.kinds
        elif isinstance(value, float):
            ok = "float" in self.kinds and math.isfinite(value)
        elif isinstance(value, str):
            ok = "str" in self.kinds and (self.choices is None or value in self.choices)
        else:
            ok = False
        if ok and not isinstance(value, (bool, str)):
            ok = not (
                (self.positive and value <= 0)
                or (self.minimum is not None and value < self.minimum)
                or (self.maximum is not None and value > self.maximum)
            )
        return None if ok else self.allowed()


@dataclass(frozen=True)
class Family:
    """A model family: its name, estimator class path, the table it fits on and its parameters."""

    name: str
    estimator: str
    table: str
    params: tuple[Param, ...]
    doc: str
    #: Parameters the run sets itself (not configurable).
    reserved: tuple[str, ...] = ()

    def param(self, name: str) -> Param:
        """The parameter called ``name``."""
        for p in self.params:
            if p.name == name:
                return p
        raise KeyError(name)

    @property
    def defaults(self) -> dict[str, Any]:
        """Every parameter with its default."""
        return {p.name: p.default for p in self.params}

    def estimator_class(self) -> type:
        """The estimator class (imported on demand)."""
        import importlib

        module, _, cls = self.estimator.rpartition(".")
        return getattr(importlib.import_module(module), cls)


_TIES = Param("ties", ("str",), "efron", "tie handling in the partial likelihood", choices=("efron", "breslow"))

FAMILIES: dict[str, Family] = {
    f.name: f
    for f in (
        Family(
            "landmark_cox",
            "riskbench.models.landmark.LandmarkSupermodel",
            LANDMARK_STACK,
            (
                Param(
                    "landmark_effects",
                    ("str",),
                    "linear",
                    "how each coefficient varies with the landmark: constant, linear or quadratic in s "
                    "(needs 1, 2 or 3 distinct landmarks)",
                    choices=("none", "linear", "quadratic"),
                ),
                Param(
                    "baseline",
                    ("str",),
                    "smooth",
                    "one pooled baseline with landmark terms, or one baseline per landmark",
                    choices=("smooth", "stratified"),
                ),
                Param("competing", ("bool",), True, "also model the competing event (cumulative incidence)"),
                _TIES,
            ),
            "Cox landmark super-model on the landmark stack: risk at each landmark from the values known then",
        ),
        Family(
            "time_varying_cox",
            "riskbench.models.cox_model.CoxModel",
            COUNTING_PROCESS,
            (
                _TIES,
                Param("penalty", ("int", "float"), 0.0, "ridge penalty on standardised coefficients", minimum=0.0),
                Param("strata", ("str", "none"), None, "a column whose values get separate baseline hazards"),
                Param("weights", ("str", "none"), None, "a column of positive case weights"),
                Param("cluster", ("str", "none"), "patient_id", "a column of cluster labels (robust variance)"),
                Param(
                    "variance",
                    ("str",),
                    "model",
                    "standard errors: 'model' (inverse information) or 'robust' (sandwich by cluster); the "
                    "workflow uses 'robust' when cluster is set",
                    choices=("model", "robust"),
                ),
            ),
            "Cox model on the counting-process rows: the whole follow-up with time-varying covariates",
            reserved=("event_code", "stop_column", "start_column", "status_column"),
        ),
        Family(
            "forest",
            "riskbench.models.forest.SurvivalForest",
            LANDMARK_STACK,
            (
                Param("grid_days", ("int", "float", "none"), 30.4375, "width of the time grid, days", positive=True),
                Param("n_estimators", ("int",), 200, "number of trees", minimum=1),
                Param(
                    "max_samples",
                    ("int", "float", "none"),
                    None,
                    "rows drawn per tree: a count or a fraction of the rows",
                    positive=True,
                ),
                Param("min_samples_leaf", ("int",), 15, "smallest leaf, rows", minimum=1),
                Param(
                    "max_features",
                    ("int", "float", "str"),
                    "sqrt",
                    "candidate covariates per split",
                    choices=("sqrt", "log2"),
                    positive=True,
                ),
                Param("max_depth", ("int", "none"), None, "deepest tree", minimum=1),
                Param("n_jobs", ("int",), 1, "worker processes for growing the trees", minimum=-1),
            ),
            "Cause-specific random survival forest on the landmark stack",
            reserved=("random_state",),
        ),
        Family(
            "shared_trajectory_joint",
            "riskbench.models.joint_family.SharedTrajectoryModel",
            COUNTING_PROCESS,
            (
                Param(
                    "marker",
                    ("str", "none"),
                    None,
                    "the repeated marker among the covariates (leave out for the first covariate); the other "
                    "covariates must be baseline values",
                ),
                Param(
                    "association",
                    ("str",),
                    "value",
                    "how the outcome hazard depends on the marker's current true value, its slope per year, "
                    "both or neither",
                    choices=("value", "slope", "value_slope", "none"),
                ),
                Param("competing", ("bool",), True, "also model the competing event (cumulative incidence)"),
                Param(
                    "competing_association",
                    ("bool",),
                    True,
                    "the competing hazard depends on the marker's current value too",
                ),
                Param(
                    "time_knots",
                    ("int",),
                    0,
                    "interior knots of a natural cubic spline of time in the marker's mean (0: a straight line)",
                    minimum=0,
                    maximum=5,
                ),
                Param(
                    "baseline_pieces",
                    ("int",),
                    6,
                    "pieces of the piecewise-constant baseline hazards (knots at event-time quantiles)",
                    minimum=1,
                    maximum=20,
                ),
                Param("hermite_points", ("int",), 5, "Gauss-Hermite nodes per random effect", minimum=2, maximum=15),
                Param(
                    "prediction_draws",
                    ("int",),
                    100,
                    "Monte Carlo draws of the random effects per predicted row",
                    minimum=10,
                ),
            ),
            "Joint model of one repeated marker and the outcome (random intercept and slope shared with the "
            "cause-specific hazards); dynamic predictions from each patient's measurement history",
            reserved=("random_state",),
        ),
    )
}


def canonical_family(name: str) -> str:
    """The current name of a family (``"cox"`` -> ``"time_varying_cox"``); unknown names unchanged."""
    return ALIASES.get(name, name)


def family(name: str) -> Family:
    """The :class:`Family` called ``name`` (an old alias is accepted)."""
    return FAMILIES[canonical_family(name)]


def param_problems(family_name: str, params: Mapping[str, Any]) -> list[tuple[str, Any, str, list[str]]]:
    """Problems with a family's ``params``: (parameter, value, what is allowed, choices for did-you-mean).

    An unknown parameter lists every parameter with its default; a reserved one says the run sets it.
    """
    fam = family(family_name)
    out: list[tuple[str, Any, str, list[str]]] = []
    names = [p.name for p in fam.params]
    for key, value in params.items():
        if key in fam.reserved:
            out.append((key, value, "set by the run from the configuration's seed or outcome coding; leave it out", []))
        elif key not in names:
            listing = ", ".join(f"{p.name} (default {p.default!r})" for p in fam.params)
            out.append((key, value, f"not a parameter of family {fam.name!r}; its parameters: {listing}", names))
        else:
            param = fam.param(key)
            allowed = param.check(value)
            if allowed is not None:
                out.append(
                    (
                        key,
                        value,
                        f"expected {allowed} (default {param.default!r}; {param.doc})",
                        list(param.choices or ()),
                    )
                )
    return out
