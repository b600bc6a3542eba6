"""The schema of the ``[sources]`` and ``[cohort]`` configuration sections (pydantic v2).

:func:`read_sources` and :func:`read_cohort` check a parsed TOML table completely (every problem at once,
each naming the key, the value and what is allowed) and build the cohort stage's data classes
(:class:`~riskbench.cohort.sources.SourceSpec`, :class:`~riskbench.cohort.spec.CohortSpec`).

Durations are texts with a unit (``max_carry = "3 years"``). The numeric keys of the previous release
(``max_carry_days``, ``lookback_months``, ``slope_window_days`` ...) are still read, converted, and reported
in ``deprecations`` with the new key to use.
"""

from __future__ import annotations

import codecs
import dataclasses
from collections.abc import Mapping
from pathlib import Path
from typing import Any, Literal

from pydantic import Field, ValidationError, field_validator, model_validator

from riskbench.cohort.errors import SpecError
from riskbench.cohort.sources import SourceSpec, TableSource
from riskbench.cohort.spec import CohortSpec, StaticSpec, VariableSpec
from riskbench.config_problems import Problem, default_where, did_you_mean, problem, schema_problems, show
from riskbench.config_types import (
    NAME_RULE,
    ConfigTable,
    Duration,
    Name,
    PositiveDuration,
    Text,
    is_name,
    readable_duration,
)
from riskbench.time_units import DAYS_PER_YEAR

ENCODINGS = ("utf-8", "utf-8-sig", "latin-1", "cp1252", "utf-16")
FILE_SUFFIXES = {".csv": "csv", ".txt": "csv", ".gz": "csv", ".parquet": "parquet", ".pq": "parquet"}
#: Columns riskbench reads from each table (our names); ``columns`` maps them to the file's names.
TABLE_COLUMNS: dict[str, tuple[str, ...]] = {
    "patients": ("patient_id", "entry_date", "birth_date", "age_at_entry", "sex"),
    "measurements": ("patient_id", "date", "variable", "value", "unit", "source"),
    "outcomes": ("patient_id", "date", "kind", "detail"),
}
Range = list[float]


# --------------------------------------------------------------------------------------------------
# [sources]


class TableSection(ConfigTable):
    """``[sources.<table>]``."""

    path: str = Field(description="a file path (CSV or Parquet) relative to the configuration file")
    columns: dict[str, str] = Field(default_factory=dict, description='a table our_name = "file\'s column name"')
    date_format: str | None = Field(None, description='a strftime format such as "%d/%m/%Y"')
    encoding: str | None = Field(None, description="a text encoding: " + ", ".join(ENCODINGS))

    @field_validator("encoding")
    @classmethod
    def _known_encoding(cls, value: str | None) -> str | None:
        if value is not None:
            try:
                codecs.lookup(value)
            except LookupError:
                raise ValueError(
                    "expected a text encoding such as " + ", ".join(ENCODINGS) + did_you_mean(value, ENCODINGS)
                ) from None
        return value


class MeasurementsSection(TableSection):
    """``[sources.measurements]``: also the layout (long: one row per value; wide: a column per variable)."""

    layout: Literal["long", "wide"] = "long"


class SourcesSection(ConfigTable):
    """``[sources]``: the three input tables."""

    date_format: str | None = Field(None, description="a strftime format shared by the three tables")
    patients: TableSection = Field(description='a [sources.patients] table with at least path = "..."')
    measurements: MeasurementsSection = Field(description='a [sources.measurements] table with at least path = "..."')
    outcomes: TableSection = Field(description='a [sources.outcomes] table with at least path = "..."')


# --------------------------------------------------------------------------------------------------
# [cohort]


def _check_range(value: Range | None) -> Range | None:
    if value is None:
        return None
    if len(value) != 2:
        raise ValueError("expected [min, max]: two finite numbers")
    if value[0] > value[1]:
        raise ValueError("expected [min, max] with min <= max")
    return value


class VariableSection(ConfigTable):
    """``[cohort.variables.<name>]``: one time-varying variable."""

    unit: str = Field("1", description='the canonical unit, a string such as "mm3"')
    conversions: dict[str, float] = Field(
        default_factory=dict, description="a table unit = factor, each a finite number > 0"
    )
    range: Range | None = Field(None, description="[min, max]: two finite numbers, min <= max")
    transform: Literal["none", "log"] = "none"
    change: bool = Field(False, description="true or false")
    slope: bool = Field(False, description="true or false")
    slope_window: PositiveDuration = DAYS_PER_YEAR
    previous: bool = Field(False, description="true or false")
    label: Text | None = None

    _range = field_validator("range")(_check_range)

    @field_validator("conversions")
    @classmethod
    def _positive_factors(cls, value: dict[str, float]) -> dict[str, float]:
        bad = {u: f for u, f in value.items() if f <= 0}
        if bad:
            raise ValueError(f"expected factors > 0; {show(bad)} is not")
        return value


class StaticSection(ConfigTable):
    """``[cohort.statics.<name>]``: a declared static covariate (numeric with a range, or categorical)."""

    column: str | None = Field(None, description="the patients table's column (default: the static's name)")
    kind: Literal["numeric", "count", "categorical"] | None = None
    range: Range | None = Field(None, description="[min, max]: two finite numbers, min <= max")
    codes: dict[str, Name] = Field(
        default_factory=dict, description='a table source_code = "level" (level: a safe name)'
    )
    reference: Name | None = None
    label: Text | None = None
    unit: str | None = None

    _range = field_validator("range")(_check_range)

    @model_validator(mode="after")
    def _categorical(self) -> StaticSection:
        if (self.kind == "categorical") != bool(self.codes) and self.kind is not None:
            raise ValueError(
                "kind = 'categorical' goes with codes = { source_code = \"level\", ... } and codes with "
                "kind = 'categorical'"
            )
        if self.codes and self.range is not None:
            raise ValueError("give either codes (a categorical static) or range (a numeric one), not both")
        levels = sorted(set(self.codes.values()))
        if self.codes and self.reference not in levels:
            raise ValueError(
                f"reference = {show(self.reference)} must be one of the levels {levels}"
                f"{did_you_mean(self.reference, levels)}"
            )
        if self.reference is not None and not self.codes:
            raise ValueError('reference needs codes = { source_code = "level", ... }')
        return self


class CohortSection(ConfigTable):
    """``[cohort]``."""

    variables: dict[str, VariableSection] = Field(default_factory=dict)
    statics: dict[str, StaticSection] = Field(default_factory=dict)
    max_carry: PositiveDuration | None = None
    lookback: Duration = 0.0
    same_day_rule: Literal["mean", "last", "error"] = "mean"
    static: list[str] = Field(default_factory=list, description="a list of static covariate names")
    exam_variables: list[str] = Field(default_factory=list, description="a list of variable names")
    current_age: bool = Field(True, description="true or false")
    kind_map: dict[str, Literal["outcome", "competing", "end_of_follow_up"]] = Field(default_factory=dict)


def _cohort_rules(section: CohortSection) -> list[Problem]:
    """Rules across the keys of [cohort]: safe names, known exam variables, no repeated statics."""

    out = []
    if not section.variables:
        out.append(
            Problem(
                "[cohort.variables]",
                "[cohort.variables] is empty: riskbench builds its tables from "
                "repeated measurements, so describe at least one variable of the measurements file as "
                "a [cohort.variables.<name>] table (unit, range); a cohort with static covariates only "
                "is outside what riskbench is built for",
            )
        )
    out += [
        Problem(
            f"[cohort.variables.{n}]",
            f"[cohort.variables] the variable name {show(n)} is not allowed: expected {NAME_RULE}",
        )
        for n in section.variables
        if not is_name(n)
    ]
    out += [
        Problem(
            f"[cohort.statics.{n}]", f"[cohort.statics] the static name {show(n)} is not allowed: expected {NAME_RULE}"
        )
        for n in section.statics
        if not is_name(n)
    ]
    out += [problem("[cohort]", "static", n, f"expected {NAME_RULE}") for n in section.static if not is_name(n)]
    if len(set(section.static)) != len(section.static):
        out.append(problem("[cohort]", "static", section.static, "expected distinct names"))
    unknown = [v for v in section.exam_variables if v not in section.variables]
    for v in unknown:
        out.append(
            problem(
                "[cohort]",
                "exam_variables",
                v,
                f"expected names of [cohort.variables.*] tables: {sorted(section.variables)}",
                choices=section.variables,
            )
        )
    return out


# --------------------------------------------------------------------------------------------------
# The previous release's numeric duration keys


def _number_to_duration(value: Any, unit: str) -> Any:
    """``1095`` -> ``"1095 days"``; anything else is left for the schema to reject."""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return value
    return f"{value!r} {unit}"


def migrate_durations(table: Mapping[str, Any], stem: str, where: str, deprecations: list[str]) -> dict:
    """Replace ``<stem>_days`` / ``<stem>_months`` / ``<stem>_years`` by ``<stem> = "<n> <unit>"``."""
    out = dict(table)
    for unit in ("days", "months", "years"):
        old = f"{stem}_{unit}"
        if old in out and stem not in out:
            value = out.pop(old)
            out[stem] = _number_to_duration(value, unit)
            deprecations.append(
                f"{where} {old} = {show(value)} is deprecated; write {stem} = "
                f"{show(readable_duration(out[stem]))} (a duration with its unit)"
            )
    return out


def _migrate_cohort(data: Any, deprecations: list[str]) -> Any:
    if not isinstance(data, Mapping):
        return data
    out = migrate_durations(data, "max_carry", "[cohort]", deprecations)
    out = migrate_durations(out, "lookback", "[cohort]", deprecations)
    variables = out.get("variables")
    if isinstance(variables, Mapping):
        out["variables"] = {
            name: migrate_durations(v, "slope_window", f"[cohort.variables.{name}]", deprecations)
            if isinstance(v, Mapping)
            else v
            for name, v in variables.items()
        }
    return out


# --------------------------------------------------------------------------------------------------
# Building the cohort stage's data classes


def construct(cls: type, **kwargs: Any) -> Any:
    """``cls(**kwargs)``, leaving out keys ``cls`` does not have yet when they hold their empty default."""
    names = {f.name for f in dataclasses.fields(cls)}
    unknown = {k: v for k, v in kwargs.items() if k not in names}
    used = [k for k, v in unknown.items() if v not in (None, False, (), {}, "utf-8")]
    if used:
        raise SpecError(f"{used[0]} is not supported by this version of the cohort stage")
    return cls(**{k: v for k, v in kwargs.items() if k in names})


def _static_spec(name: str, s: StaticSection) -> Any:
    lo, hi = s.range if s.range is not None else (None, None)
    return construct(
        StaticSpec,
        name=name,
        column=s.column,
        kind=s.kind or ("categorical" if s.codes else "numeric"),
        plausible_min=lo,
        plausible_max=hi,
        codes=dict(s.codes),
        reference=s.reference,
        label=s.label,
        unit=s.unit,
    )


def build_cohort_spec(section: CohortSection) -> CohortSpec:
    """The :class:`~riskbench.cohort.spec.CohortSpec` of a checked [cohort] section."""
    variables = tuple(
        construct(
            VariableSpec,
            name=name,
            unit=v.unit,
            conversions=dict(v.conversions),
            plausible_min=v.range[0] if v.range else None,
            plausible_max=v.range[1] if v.range else None,
            transform=v.transform,
            change=v.change,
            slope=v.slope,
            slope_window_days=v.slope_window,
            previous=v.previous,
            label=v.label,
        )
        for name, v in section.variables.items()
    )
    statics = tuple(_static_spec(n, s) for n, s in section.statics.items()) if section.statics else ()
    return construct(
        CohortSpec,
        variables=variables,
        max_carry_days=section.max_carry,
        lookback_days=section.lookback,
        same_day_rule=section.same_day_rule,
        static=tuple(section.static),
        statics=statics,
        exam_variables=tuple(section.exam_variables),
        current_age=section.current_age,
        kind_map=dict(section.kind_map),
    )


def _file_problems(section: SourcesSection, base_dir: Path) -> list[Problem]:
    out: list[Problem] = []
    for table in ("patients", "measurements", "outcomes"):
        src: TableSection = getattr(section, table)
        where = f"[sources.{table}]"
        path = _resolve(src.path, base_dir)
        if not path.is_file():
            out.append(Problem(f"{where} path", f"{where} path = {show(src.path)}: file {path} does not exist"))
        elif path.suffix.lower() not in FILE_SUFFIXES:
            out.append(problem(where, "path", src.path, "expected a .csv or .parquet file name"))
        strict = table == "outcomes" or (table == "measurements" and getattr(src, "layout", "") == "long")
        allowed = TABLE_COLUMNS[table]
        for ours in src.columns:
            if strict and ours not in allowed:
                out.append(
                    problem(where, "columns", ours, f"expected our column names: {', '.join(allowed)}", choices=allowed)
                )
    return out


def _resolve(path: str, base_dir: Path) -> Path:
    p = Path(path)
    return p if p.is_absolute() else Path(base_dir) / p


def build_source_spec(section: SourcesSection, base_dir: Path) -> SourceSpec:
    """The :class:`~riskbench.cohort.sources.SourceSpec` of a checked [sources] section."""

    def table(name: str) -> Any:
        src: TableSection = getattr(section, name)
        return construct(
            TableSource,
            path=_resolve(src.path, base_dir),
            columns=dict(src.columns),
            date_format=src.date_format or section.date_format,
            layout=getattr(src, "layout", "long"),
            encoding=src.encoding or "utf-8",
        )

    return SourceSpec(patients=table("patients"), measurements=table("measurements"), outcomes=table("outcomes"))


# --------------------------------------------------------------------------------------------------
# Entry points


def check_sources(data: Any, base_dir: Path) -> tuple[Any, list[Problem]]:
    """(SourceSpec or None, problems) for a parsed ``[sources]`` table."""
    try:
        section = SourcesSection.model_validate(data)
    except ValidationError as exc:
        return None, schema_problems(exc, SourcesSection, data, default_where("sources"))
    problems = _file_problems(section, base_dir)
    if problems:
        return None, problems
    try:
        return build_source_spec(section, base_dir), []
    except SpecError as exc:
        return None, [Problem("[sources]", f"[sources]: {exc}")]


def check_cohort(data: Any, deprecations: list[str]) -> tuple[Any, list[Problem]]:
    """(CohortSpec or None, problems) for a parsed ``[cohort]`` table; old keys add to ``deprecations``."""
    data = _migrate_cohort(data, deprecations)
    try:
        section = CohortSection.model_validate(data)
    except ValidationError as exc:
        return None, schema_problems(exc, CohortSection, data, default_where("cohort"))
    problems = _cohort_rules(section)
    if problems:
        return None, problems
    try:
        return build_cohort_spec(section), []
    except SpecError as exc:
        return None, [Problem("[cohort]", f"[cohort]: {exc}")]


def _raise(problems: list[Problem]) -> None:
    if problems:
        raise SpecError("; ".join(p.message for p in problems))


def read_sources(data: Any, base_dir: str | Path) -> SourceSpec:
    """A :class:`~riskbench.cohort.sources.SourceSpec` from ``[sources]``, or SpecError naming every problem."""
    spec, problems = check_sources(data, Path(base_dir))
    _raise(problems)
    return spec


def read_cohort(data: Any) -> CohortSpec:
    """A :class:`~riskbench.cohort.spec.CohortSpec` from ``[cohort]``, or SpecError naming every problem."""
    spec, problems = check_cohort(data, [])
    _raise(problems)
    return spec
