"""What the cohort stage should build: variables, units, plausible ranges, carry-forward and look-back rules.

A :class:`CohortSpec` is the ``[cohort]`` section of the analysis configuration; ``CohortSpec.from_dict``
parses it (rejecting unknown keys and wrong types). Durations are days inside the library; the
configuration may give them in months (1 month = 365.25 / 12 days) as ``<name>_months``.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

from riskbench.cohort import config_checks as cc
from riskbench.cohort.errors import SpecError

SAME_DAY_RULES = ("mean", "last", "error")
TRANSFORMS = ("none", "log")
KINDS = ("outcome", "competing", "end_of_follow_up")
TABLES = ("patients", "measurements", "outcomes")
BUILTIN_STATIC = ("sex_male", "age_at_entry")
DAYS_PER_YEAR = 365.25


@dataclass(frozen=True)
class VariableSpec:
    """One time-varying variable (one value of ``variable`` in the measurements table).

    Parameters
    ----------
    name : str
        The variable's name in the measurements table.
    unit : str
        Canonical unit; values in this unit (or with a blank unit) are used as they are.
    conversions : mapping of str to float
        Other accepted units and the factor that turns a value in that unit into the canonical unit
        (e.g. ``{"cm3": 1000.0}`` for a volume in mm3). Any other unit is excluded as unknown.
    plausible_min, plausible_max : float or None
        Inclusive plausible range in the canonical unit; values outside are excluded as implausible.
    transform : {"none", "log"}
        ``"log"`` uses the natural log of the value (column ``log_<name>``); non-positive values are then
        implausible.
    change : bool
        Add ``<column>_change``: the current value minus the patient's first value (transformed scale).
    slope : bool
        Add ``<column>_slope_per_year``: least-squares slope (per year) of the values dated within
        ``slope_window_days`` before and including the latest value known at the row's start.
    slope_window_days : float
        Width of that trailing window, days.
    """

    name: str
    unit: str = "1"
    conversions: Mapping[str, float] = field(default_factory=dict)
    plausible_min: float | None = None
    plausible_max: float | None = None
    transform: str = "none"
    change: bool = False
    slope: bool = False
    slope_window_days: float = DAYS_PER_YEAR

    def __post_init__(self) -> None:
        if self.transform not in TRANSFORMS:
            raise SpecError(f"variable {self.name!r}: transform {self.transform!r} is not one of {TRANSFORMS}")
        for unit, factor in self.conversions.items():
            if not (isinstance(factor, (int, float)) and factor > 0 and math.isfinite(factor)):
                raise SpecError(f"variable {self.name!r}: conversion factor for unit {unit!r} must be > 0, got {factor!r}")
        if self.slope_window_days <= 0:
            raise SpecError(f"variable {self.name!r}: slope_window_days must be > 0")

    @property
    def column(self) -> str:
        """Name of the covariate column (``log_<name>`` for a log transform)."""
        return f"log_{self.name}" if self.transform == "log" else self.name

    @property
    def staleness_column(self) -> str:
        """Name of the staleness column (days since the value was dated)."""
        return f"{self.name}_staleness_days"

    @property
    def factors(self) -> dict[str, float]:
        """Every accepted unit with its factor to the canonical unit (the canonical unit included)."""
        return {self.unit: 1.0, **{u: float(f) for u, f in self.conversions.items()}}

    @classmethod
    def from_dict(cls, name: str, mapping: Mapping[str, Any]) -> VariableSpec:
        """Parse one ``[cohort.variables.<name>]`` table."""
        where = f"cohort.variables.{name}"
        m = cc.check_keys(mapping, {
            "unit": "canonical unit, string",
            "conversions": "table unit = factor to the canonical unit",
            "range": "[min, max] plausible range in the canonical unit",
            "transform": "'none' or 'log'",
            "change": "true/false: add change from the first value",
            "slope": "true/false: add slope per year over a trailing window",
            "slope_window_days": "days", "slope_window_months": "months",
        }, where)
        conversions = m.get("conversions", {})
        if not isinstance(conversions, Mapping):
            raise SpecError(f"[{where}] conversions = {conversions!r} is not allowed: expected a table unit = factor")
        conv = {str(u): cc.number(f, f"conversions.{u}", where, minimum=0) for u, f in conversions.items()}
        lo = hi = None
        if "range" in m:
            rng = m["range"]
            if not isinstance(rng, (list, tuple)) or len(rng) != 2:
                raise SpecError(f"[{where}] range = {rng!r} is not allowed: expected [min, max]")
            lo, hi = (cc.number(v, "range", where) for v in rng)
            if lo > hi:
                raise SpecError(f"[{where}] range = {rng!r} is not allowed: min is above max")
        return cls(
            name=name,
            unit=cc.text(m.get("unit", "1"), "unit", where),
            conversions=conv,
            plausible_min=lo,
            plausible_max=hi,
            transform=cc.text(m.get("transform", "none"), "transform", where, choices=TRANSFORMS),
            change=cc.boolean(m.get("change", False), "change", where),
            slope=cc.boolean(m.get("slope", False), "slope", where),
            slope_window_days=cc.duration_days(m, "slope_window", where, DAYS_PER_YEAR) or DAYS_PER_YEAR,
        )


@dataclass(frozen=True)
class CohortSpec:
    """Rules for turning the three source tables into survival tables.

    Parameters
    ----------
    variables : tuple of VariableSpec
        The time-varying variables; any other ``variable`` value is excluded as unknown.
    max_carry_days : float or None
        A value is carried forward while it is less than this many days old (hazard at time t uses it
        only if t - date <= max_carry_days); afterwards the covariate is missing. None: no limit.
    lookback_days : float
        Values dated up to this many days before entry count as history known at entry; older ones are
        excluded.
    same_day_rule : {"mean", "last", "error"}
        What to do with several different values of one variable on one day for one patient.
    static : tuple of str
        Static covariates: ``sex_male`` (from ``sex`` F/M), ``age_at_entry`` (years, from ``birth_date``
        or an ``age_at_entry`` column), or any numeric column of the patients table.
    exam_variables : tuple of str
        Variables whose dates are exams: adds ``days_since_exam`` and ``n_exams`` (empty: neither).
    current_age : bool
        Add ``age``, the current age in years at the row's start (needs a birth date or age at entry).
    columns : mapping
        Per table (``patients``, ``measurements``, ``outcomes``): our column name -> the source's name.
    date_format : str or None
        strftime format of dates in text sources; None reads ISO dates (a time of day is allowed).
    measurement_layout : {"long", "wide"}
        ``wide``: one column per variable (named as the variable), melted into the long form.
    kind_map : mapping of str to str
        Source outcome kinds -> ``outcome`` / ``competing`` / ``end_of_follow_up``.
    """

    variables: tuple[VariableSpec, ...] = ()
    max_carry_days: float | None = None
    lookback_days: float = 0.0
    same_day_rule: str = "mean"
    static: tuple[str, ...] = ("sex_male", "pack_years", "age_at_entry")
    exam_variables: tuple[str, ...] = ()
    current_age: bool = True
    columns: Mapping[str, Mapping[str, str]] = field(default_factory=dict)
    date_format: str | None = None
    measurement_layout: str = "long"
    kind_map: Mapping[str, str] = field(default_factory=dict)

    def __post_init__(self) -> None:
        names = [v.name for v in self.variables]
        if len(set(names)) != len(names):
            raise SpecError(f"cohort variables repeat a name: {names}")
        if self.same_day_rule not in SAME_DAY_RULES:
            raise SpecError(f"same_day_rule {self.same_day_rule!r} is not one of {SAME_DAY_RULES}")
        if self.measurement_layout not in ("long", "wide"):
            raise SpecError(f"measurement_layout {self.measurement_layout!r} is not 'long' or 'wide'")
        if self.max_carry_days is not None and self.max_carry_days <= 0:
            raise SpecError(f"max_carry_days must be > 0 or None, got {self.max_carry_days!r}")
        if self.lookback_days < 0:
            raise SpecError(f"lookback_days must be >= 0, got {self.lookback_days!r}")
        unknown_exam = [v for v in self.exam_variables if v not in names]
        if unknown_exam:
            raise SpecError(f"exam_variables {unknown_exam} are not among the variables {names}")
        bad_tables = [t for t in self.columns if t not in TABLES]
        if bad_tables:
            raise SpecError(f"columns: unknown table {bad_tables[0]!r}; expected one of {TABLES}")
        bad_kinds = {k: v for k, v in self.kind_map.items() if v not in KINDS}
        if bad_kinds:
            raise SpecError(f"kind_map {bad_kinds} maps to an unknown kind; expected one of {KINDS}")

    def variable(self, name: str) -> VariableSpec:
        """The spec of variable ``name``."""
        for v in self.variables:
            if v.name == name:
                return v
        raise KeyError(name)

    @property
    def covariate_columns(self) -> tuple[str, ...]:
        """All covariate columns of the counting-process table, in table order."""
        cols: list[str] = []
        for v in self.variables:
            cols.append(v.column)
            if v.change:
                cols.append(f"{v.column}_change")
            if v.slope:
                cols.append(f"{v.column}_slope_per_year")
            cols.append(v.staleness_column)
        if self.exam_variables:
            cols += ["days_since_exam", "n_exams"]
        if self.current_age:
            cols.append("age")
        cols += list(self.static)
        return tuple(cols)

    @classmethod
    def from_dict(cls, mapping: Mapping[str, Any]) -> CohortSpec:
        """Parse the ``[cohort]`` section of an analysis configuration.

        Unknown keys and wrong types raise :class:`~riskbench.cohort.errors.SpecError` naming the key, the
        value and what is allowed.
        """
        where = "cohort"
        m = cc.check_keys(mapping, {
            "variables": "table of variable tables",
            "max_carry_days": "days", "max_carry_months": "months",
            "lookback_days": "days", "lookback_months": "months",
            "same_day_rule": "'mean', 'last' or 'error'",
            "static": "list of static covariate names",
            "exam_variables": "list of variable names whose dates are exams",
            "current_age": "true/false",
            "kind_map": "table source kind = outcome|competing|end_of_follow_up",
        }, where)
        variables = m.get("variables", {})
        if not isinstance(variables, Mapping):
            raise SpecError(f"[cohort] variables = {variables!r} is not allowed: expected a table of tables")
        return cls(
            variables=tuple(VariableSpec.from_dict(str(n), v) for n, v in variables.items()),
            max_carry_days=cc.duration_days(m, "max_carry", where, None),
            lookback_days=cc.duration_days(m, "lookback", where, 0.0) or 0.0,
            same_day_rule=cc.text(m.get("same_day_rule", "mean"), "same_day_rule", where, choices=SAME_DAY_RULES),
            static=cc.text_list(m.get("static", list(cls.static)), "static", where),
            exam_variables=cc.text_list(m.get("exam_variables", []), "exam_variables", where),
            current_age=cc.boolean(m.get("current_age", True), "current_age", where),
            kind_map=cc.text_map(m.get("kind_map", {}), "kind_map", where),
        )
