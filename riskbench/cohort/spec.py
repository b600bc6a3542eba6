"""What the cohort stage should build: variables, units, plausible ranges, carry-forward and look-back rules.

A :class:`CohortSpec` is the ``[cohort]`` section of the analysis configuration;
:func:`riskbench.cohort.config_schema.read_cohort` parses it (the schema depends on this module, not the
reverse). Durations are days inside the library;
the configuration writes them as texts with a unit (``max_carry = "3 years"``).
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping
from dataclasses import dataclass, field

from riskbench.cohort.errors import SpecError
from riskbench.time_units import DAYS_PER_YEAR

__all__ = ["DAYS_PER_YEAR", "CohortSpec", "StaticSpec", "VariableSpec"]

SAME_DAY_RULES = ("mean", "last", "error")
TRANSFORMS = ("none", "log")
KINDS = ("outcome", "competing", "end_of_follow_up")
TABLES = ("patients", "measurements", "outcomes")
BUILTIN_STATIC = ("sex_male", "age_at_entry")
STATIC_KINDS = ("numeric", "count", "categorical")
#: Names of variables, statics and levels become column names: letters, digits and underscores.
NAME_PATTERN = re.compile(r"[A-Za-z][A-Za-z0-9_]{0,39}")  # use fullmatch: "$" lets a final newline through


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
    previous : bool
        Add ``<column>_previous``: the value before the current one (transformed scale), as known at the
        row's start; missing when there is none, or when the current value has run out of carry-forward.
    label : str or None
        Readable name for tables and figures (free text, escaped where shown); None: the name with spaces.
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
    previous: bool = False
    label: str | None = None

    def __post_init__(self) -> None:
        if self.transform not in TRANSFORMS:
            raise SpecError(f"variable {self.name!r}: transform {self.transform!r} is not one of {TRANSFORMS}")
        for unit, factor in self.conversions.items():
            if not (isinstance(factor, (int, float)) and factor > 0 and math.isfinite(factor)):
                raise SpecError(
                    f"variable {self.name!r}: conversion factor for unit {unit!r} must be > 0, got {factor!r}"
                )
        if self.slope_window_days <= 0:
            raise SpecError(f"variable {self.name!r}: slope_window_days must be > 0")

    @property
    def column(self) -> str:
        """Name of the covariate column (``log_<name>`` for a log transform)."""
        return f"log_{self.name}" if self.transform == "log" else self.name

    @property
    def previous_column(self) -> str:
        """Name of the previous-value column."""
        return f"{self.column}_previous"

    @property
    def staleness_column(self) -> str:
        """Name of the staleness column (days since the value was dated)."""
        return f"{self.name}_staleness_days"

    @property
    def factors(self) -> dict[str, float]:
        """Every accepted unit with its factor to the canonical unit (the canonical unit included)."""
        return {self.unit: 1.0, **{u: float(f) for u, f in self.conversions.items()}}


@dataclass(frozen=True)
class StaticSpec:
    """One static covariate: a column of the patients table with its plausible range or declared codes.

    Parameters
    ----------
    name : str
        The covariate's name (letters, digits, underscores; at most 40 characters).
    column : str or None
        Column of the patients table (our name, after ``[sources.patients] columns``); None: ``name``.
        ``age_at_entry`` with no column is computed from ``birth_date`` (or read from ``age_at_entry``).
    kind : {"numeric", "count", "categorical"}
        ``numeric``: a number; ``count``: a whole number >= 0; ``categorical``: a code from ``codes``.
        Text that is not a number in a numeric or count static puts the patient row in the ledger state
        ``unparseable_static``; a value outside the range (or a fraction in a count), ``implausible_static``;
        a code that ``codes`` does not list, ``undeclared_code``. A blank cell is a missing value.
    plausible_min, plausible_max : float or None
        Inclusive plausible range of a numeric or count static.
    codes : mapping of str to str
        Categorical: source code -> level. Codes are matched after trimming white space and without regard
        to case (``m`` and ``M`` are one code), so two codes may not differ only in case.
    reference : str or None
        Categorical: the reference level; every other level gets a 0/1 column ``<name>_<level>``.
    label, unit : str or None
        Readable name and unit for tables and figures (free text, escaped where shown).
    """

    name: str
    column: str | None = None
    kind: str = "numeric"
    plausible_min: float | None = None
    plausible_max: float | None = None
    codes: Mapping[str, str] = field(default_factory=dict)
    reference: str | None = None
    label: str | None = None
    unit: str | None = None

    def __post_init__(self) -> None:
        where = f"static {self.name!r}"
        if not NAME_PATTERN.fullmatch(self.name):
            raise SpecError(
                f"{where}: a name must be letters, digits and underscores (a letter first, at most 40 characters)"
            )
        if self.kind not in STATIC_KINDS:
            raise SpecError(f"{where}: kind {self.kind!r} is not one of {STATIC_KINDS}")
        for bound in (self.plausible_min, self.plausible_max):
            if bound is not None and not (isinstance(bound, (int, float)) and math.isfinite(bound)):
                raise SpecError(f"{where}: range bounds must be finite numbers, got {bound!r}")
        if (
            self.plausible_min is not None
            and self.plausible_max is not None
            and self.plausible_min > self.plausible_max
        ):
            raise SpecError(
                f"{where}: range minimum {self.plausible_min!r} is above the maximum {self.plausible_max!r}"
            )
        if self.kind != "categorical":
            if self.codes or self.reference is not None:
                raise SpecError(
                    f"{where}: codes and reference belong to a categorical static; "
                    'set kind = "categorical" or remove them'
                )
            return
        if self.plausible_min is not None or self.plausible_max is not None:
            raise SpecError(f"{where}: a categorical static has codes, not a range")
        if not self.codes:
            raise SpecError(f'{where}: a categorical static needs codes = {{ <source code> = "<level>", ... }}')
        upper: dict[str, str] = {}
        for code, level in self.codes.items():
            if not NAME_PATTERN.fullmatch(str(level)):
                raise SpecError(f"{where}: level {level!r} must be letters, digits and underscores (it names a column)")
            key = str(code).strip().upper()
            if not key:
                raise SpecError(f"{where}: a code may not be blank (a blank cell is a missing value)")
            if upper.setdefault(key, level) != level:
                raise SpecError(
                    f"{where}: codes {code!r} and another code differing only in case map to "
                    "different levels; codes are matched without regard to case"
                )
        if self.reference not in self.levels:
            raise SpecError(f"{where}: reference {self.reference!r} is not one of its levels {list(self.levels)}")

    @property
    def source_column(self) -> str:
        """The patients-table column read (our name)."""
        return self.column or self.name

    @property
    def levels(self) -> tuple[str, ...]:
        """Distinct levels of a categorical static, in the order of the codes."""
        return tuple(dict.fromkeys(self.codes.values()))

    @property
    def output_columns(self) -> tuple[str, ...]:
        """The covariate columns this static creates: its name, or one 0/1 column per non-reference level."""
        if self.kind != "categorical":
            return (self.name,)
        return tuple(f"{self.name}_{level}" for level in self.levels if level != self.reference)

    @property
    def lower_bound(self) -> float | None:
        """The plausible minimum in force: a count is never negative."""
        if self.kind == "count":
            return max(0.0, self.plausible_min) if self.plausible_min is not None else 0.0
        return self.plausible_min


#: Source codes of the built-in ``sex`` static (matched without regard to case).
SEX_CODES: dict[str, str] = {"M": "male", "F": "female", "MALE": "male", "FEMALE": "female"}
#: Statics known without a declaration: their defaults (a declaration under [cohort.statics] replaces them).
BUILTIN_STATICS: dict[str, StaticSpec] = {
    "sex": StaticSpec("sex", kind="categorical", codes=SEX_CODES, reference="female", label="Sex"),
    "age_at_entry": StaticSpec(
        "age_at_entry", plausible_min=0.0, plausible_max=120.0, label="Age at entry", unit="years"
    ),
    "pack_years": StaticSpec("pack_years", plausible_min=0.0, label="Smoking", unit="pack-years"),
}
#: ``sex_male`` in the static list means the ``sex`` static (its 0/1 column is ``sex_male``).
STATIC_ALIASES: dict[str, str] = {"sex_male": "sex"}


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
        Static covariates used: names of ``statics``, the built-ins ``sex`` (``sex_male`` is the same: codes
        M/F, or male/female, any case; reference female; column ``sex_male``), ``age_at_entry`` (years, from
        ``birth_date`` or an ``age_at_entry`` column; plausible 0-120, so a birth after entry is implausible)
        and ``pack_years`` (never negative), or any numeric column of the patients table.
    statics : tuple of StaticSpec
        Declared statics (range, codes, label, unit); a declaration replaces a built-in default. Every
        declared static must be listed in ``static``.
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
    statics: tuple[StaticSpec, ...] = ()
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
        declared = [s.name for s in self.statics]
        if len(set(declared)) != len(declared):
            raise SpecError(f"statics declare a name twice: {declared}")
        used = [STATIC_ALIASES.get(n, n) for n in self.static]
        if len(set(used)) != len(used):
            raise SpecError(f"static lists one covariate twice: {list(self.static)} ('sex_male' is 'sex')")
        unlisted = [n for n in declared if n not in used]
        if unlisted:
            raise SpecError(
                f"[cohort.statics.{unlisted[0]}] is declared but static = {list(self.static)} does "
                "not list it; add it to static or remove the declaration"
            )
        if "sex_male" in self.static and "sex_male" not in self.static_spec("sex_male").output_columns:
            raise SpecError(
                "static lists 'sex_male', but [cohort.statics.sex] creates the columns "
                f"{list(self.static_spec('sex').output_columns)}; list 'sex' instead"
            )
        columns = self.covariate_columns
        clash = sorted({c for c in columns if columns.count(c) > 1})
        if clash:
            raise SpecError(
                f"the cohort would create the covariate column(s) {clash} twice; rename a variable or static"
            )

    def static_spec(self, name: str) -> StaticSpec:
        """The rules of static covariate ``name``: its declaration, else the built-in default, else numeric."""
        key = STATIC_ALIASES.get(name, name)
        for s in self.statics:
            if s.name == key:
                return s
        return BUILTIN_STATICS.get(key) or StaticSpec(key)

    @property
    def static_specs(self) -> tuple[StaticSpec, ...]:
        """The rules of every static covariate in ``static``, in that order."""
        return tuple(self.static_spec(n) for n in self.static)

    @property
    def static_columns(self) -> tuple[str, ...]:
        """The covariate columns of the static covariates (one-hot columns for a categorical one)."""
        return tuple(c for s in self.static_specs for c in s.output_columns)

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
            if v.previous:
                cols.append(v.previous_column)
            cols.append(v.staleness_column)
        if self.exam_variables:
            cols += ["days_since_exam", "n_exams"]
        if self.current_age:
            cols.append("age")
        cols += list(self.static_columns)
        return tuple(cols)

    def label(self, column: str) -> str:
        """A readable label with its unit for any covariate column the cohort creates.

        E.g. ``log_nodule_volume`` -> "log nodule volume (log mm3)", ``age_at_entry`` -> "Age at entry
        (years)", ``sex_male`` -> "Sex: male (vs female)". Labels are free text from the configuration: escape
        them wherever they are shown.

        Raises
        ------
        KeyError
            ``column`` is not a covariate column of this spec.
        """
        for v in self.variables:
            words = v.label or v.name.replace("_", " ")
            unit = "" if v.unit in ("1", "") else v.unit
            scale = f"log {unit}".strip() if v.transform == "log" else unit
            value = words if v.label or v.transform != "log" else f"log {words}"
            parts = {
                v.column: (value, scale),
                f"{v.column}_change": (f"{words}, change from first", scale),
                f"{v.column}_slope_per_year": (f"{words}, slope", f"{scale} per year".strip()),
                v.previous_column: (f"{words}, previous value", scale),
                v.staleness_column: (f"{words}, days since measured", "days"),
            }
            if column in parts:
                return _with_unit(*parts[column])
        clocks = {
            "days_since_exam": ("days since last exam", "days"),
            "n_exams": ("number of exams so far", ""),
            "age": ("Age", "years"),
        }
        if column in clocks and column in self.covariate_columns:
            return _with_unit(*clocks[column])
        for s in self.static_specs:
            words = s.label or s.name.replace("_", " ")
            if s.kind != "categorical" and column == s.name:
                return _with_unit(words, s.unit or "")
            for level in s.levels:
                if column == f"{s.name}_{level}" and level != s.reference:
                    return f"{words}: {level.replace('_', ' ')} (vs {str(s.reference).replace('_', ' ')})"
        raise KeyError(
            f"{column!r} is not a covariate column of this cohort; its columns are {list(self.covariate_columns)}"
        )


def _with_unit(text: str, unit: str) -> str:
    return f"{text} ({unit})" if unit else text
