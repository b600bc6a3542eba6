"""The analysis configuration: one TOML file that fixes every choice of a run.

Sections
--------
``seed``            top-level integer; every random step of the run derives from it.
``[sources]``       where the three input tables are and how their columns are named (cohort stage).
``[cohort]``        cohort rules: carry-forward, look-back, units, plausible ranges, features (cohort stage).
``[landmarks]``     ``landmarks_years`` (list) and ``horizon_years``: the prediction question.
``[[models]]``      one table per model: ``name``, ``covariates`` (list), ``family``, optional ``params``.
``[validation]``    ``folds``, ``bootstrap_reps``, ``n_jobs``, ``dask_address``, ``seed``, ``compare``.
``[report]``        ``title``, ``horizons_years``, ``small_count_threshold`` (default 10, common practice),
                    ``example_patients``, ``triage_target_npv``, ``decision_threshold_max``.

``[sources]`` and ``[cohort]`` are parsed by the cohort stage; this module checks the other sections.
Unknown keys and wrong types are rejected with a :class:`ConfigError` naming the key, the value and what
is allowed. Paths in ``[sources]`` are relative to the configuration file.
"""

from __future__ import annotations

from riskbench.errors import RiskbenchError

import hashlib
import math
import tomllib
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

DAYS_PER_YEAR = 365.25

MODEL_FAMILIES: tuple[str, ...] = ("landmark_cox", "cox", "forest")
TOP_LEVEL_KEYS: tuple[str, ...] = (
    "seed", "sources", "cohort", "landmarks", "models", "validation", "report",
)


class ConfigError(RiskbenchError):
    """The analysis configuration is invalid; the message names the key, the value and the fix."""


# --------------------------------------------------------------------------------------------------
# Small typed readers: each returns the checked value or raises ConfigError naming key and value.


def _where(source: str, section: str, key: str) -> str:
    return f"{source}: [{section}] {key}" if section else f"{source}: {key}"


def _reject(source: str, section: str, key: str, value: Any, allowed: str) -> ConfigError:
    return ConfigError(f"{_where(source, section, key)} = {value!r} is not allowed; expected {allowed}")


def _integer(minimum: int | None = None) -> Callable[[Any], int]:
    def check(value: Any) -> int:
        if isinstance(value, bool) or not isinstance(value, int):
            raise TypeError
        if minimum is not None and value < minimum:
            raise TypeError
        return value

    check.allowed = "an integer" + (f" >= {minimum}" if minimum is not None else "")  # type: ignore[attr-defined]
    return check


def _number(lower: float, upper: float = math.inf, *, lower_open: bool = False) -> Callable[[Any], float]:
    def check(value: Any) -> float:
        if isinstance(value, bool) or not isinstance(value, int | float):
            raise TypeError
        value = float(value)
        if not math.isfinite(value) or value > upper or value < lower or (lower_open and value == lower):
            raise TypeError
        return value

    bound = f"> {lower:g}" if lower_open else f">= {lower:g}"
    if math.isfinite(upper):
        bound += f" and <= {upper:g}"
    check.allowed = f"a number {bound}"  # type: ignore[attr-defined]
    return check


def _number_list(lower: float, *, lower_open: bool = False, non_empty: bool = True) -> Callable[[Any], tuple]:
    item = _number(lower, lower_open=lower_open)

    def check(value: Any) -> tuple[float, ...]:
        if not isinstance(value, list) or (non_empty and not value):
            raise TypeError
        out = tuple(item(v) for v in value)
        if len(set(out)) != len(out):
            raise TypeError
        return tuple(sorted(out))

    check.allowed = f"a non-empty list of distinct numbers, each {item.allowed[9:]}"  # type: ignore[attr-defined]
    return check


def _string(choices: tuple[str, ...] | None = None, *, allow_empty: bool = False) -> Callable[[Any], str]:
    def check(value: Any) -> str:
        if not isinstance(value, str) or (not allow_empty and not value.strip()):
            raise TypeError
        if choices is not None and value not in choices:
            raise TypeError
        return value

    check.allowed = (  # type: ignore[attr-defined]
        "one of " + ", ".join(repr(c) for c in choices) if choices else "a non-empty string"
    )
    return check


def _string_list(value: Any) -> tuple[str, ...]:
    if not isinstance(value, list) or not value or not all(isinstance(v, str) and v for v in value):
        raise TypeError
    if len(set(value)) != len(value):
        raise TypeError
    return tuple(value)


_string_list.allowed = "a non-empty list of distinct non-empty strings"  # type: ignore[attr-defined]


def _read_section(
    data: Any,
    source: str,
    section: str,
    fields: Mapping[str, Callable[[Any], Any]],
    defaults: Mapping[str, Any],
) -> dict[str, Any]:
    """Check one TOML table against its field readers; fill defaults; reject unknown keys."""
    if not isinstance(data, Mapping):
        raise ConfigError(f"{source}: [{section}] must be a table, got {data!r}")
    unknown = sorted(set(data) - set(fields))
    if unknown:
        raise ConfigError(
            f"{source}: unknown key {unknown[0]!r} in [{section}] (value {data[unknown[0]]!r}); "
            f"allowed keys: {', '.join(fields)}"
        )
    out: dict[str, Any] = {}
    for key, reader in fields.items():
        if key not in data:
            if key not in defaults:
                raise ConfigError(f"{source}: [{section}] needs {key!r} ({reader.allowed})")  # type: ignore[attr-defined]
            out[key] = defaults[key]
            continue
        try:
            out[key] = reader(data[key])
        except (TypeError, ValueError):
            raise _reject(source, section, key, data[key], reader.allowed) from None  # type: ignore[attr-defined]
    return out


# --------------------------------------------------------------------------------------------------
# The sections this module owns.


@dataclass(frozen=True)
class LandmarkPlan:
    """The prediction question: risk in (s, s + horizon] for each landmark s (both in years)."""

    landmarks_years: tuple[float, ...]
    horizon_years: float

    @property
    def landmarks_days(self) -> tuple[float, ...]:
        """Landmarks in days since entry."""
        return tuple(s * DAYS_PER_YEAR for s in self.landmarks_years)

    @property
    def horizon_days(self) -> float:
        """Prediction horizon in days."""
        return self.horizon_years * DAYS_PER_YEAR


@dataclass(frozen=True)
class ModelConfig:
    """One model of the analysis: a named covariate set fitted with one model family."""

    name: str
    covariates: tuple[str, ...]
    family: str = "landmark_cox"
    params: Mapping[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class ValidationPlan:
    """Internal validation: patient-grouped cross-validation and bootstrap optimism."""

    folds: int = 5
    bootstrap_reps: int = 50
    n_jobs: int = 1
    dask_address: str | None = None
    seed: int = 0
    compare: tuple[str, str] | None = None  # (candidate, reference) model names


@dataclass(frozen=True)
class ReportOptions:
    """What the report shows and how it protects small groups."""

    title: str = "Dynamic risk analysis"
    horizons_years: tuple[float, ...] = (1.0,)
    small_count_threshold: int = 10  # common practice (10 or 11)
    example_patients: int = 3
    triage_target_npv: float = 0.98
    decision_threshold_max: float = 0.5

    @property
    def horizons_days(self) -> tuple[float, ...]:
        """Horizons shown in the report, in days."""
        return tuple(h * DAYS_PER_YEAR for h in self.horizons_years)


@dataclass(frozen=True)
class AnalysisConfig:
    """A checked analysis configuration.

    ``sources`` (:class:`riskbench.cohort.sources.SourceSpec`) and ``cohort``
    (:class:`riskbench.cohort.spec.CohortSpec`) are parsed by the cohort stage; ``raw`` is the file's
    content as read, for the run manifest; ``base_dir`` is the configuration file's folder.
    """

    seed: int
    sources: Any
    cohort: Any
    landmarks: LandmarkPlan
    models: tuple[ModelConfig, ...]
    validation: ValidationPlan
    report: ReportOptions
    base_dir: Path | None = None
    path: Path | None = None
    raw: Mapping[str, Any] = field(default_factory=dict)

    def model(self, name: str) -> ModelConfig:
        """The model named ``name``."""
        for m in self.models:
            if m.name == name:
                return m
        raise ConfigError(f"no model named {name!r}; models: {', '.join(m.name for m in self.models)}")

    @property
    def comparison(self) -> tuple[str, str]:
        """(candidate, reference) model names for the paired comparison."""
        if self.validation.compare is not None:
            return self.validation.compare
        if len(self.models) < 2:
            raise ConfigError("a comparison needs two models; add a second [[models]] table")
        return (self.models[-1].name, self.models[0].name)

    @classmethod
    def from_dict(cls, data: Mapping[str, Any], *, base_dir: Path | None = None,
                  source: str = "configuration") -> AnalysisConfig:
        """Check a parsed TOML document; ``base_dir`` resolves relative source paths."""
        unknown = sorted(set(data) - set(TOP_LEVEL_KEYS))
        if unknown:
            raise ConfigError(
                f"{source}: unknown top-level key {unknown[0]!r} (value {data[unknown[0]]!r}); "
                f"allowed: {', '.join(TOP_LEVEL_KEYS)}"
            )
        seed_reader = _integer(0)
        try:
            seed = seed_reader(data.get("seed", 0))
        except TypeError:
            raise _reject(source, "", "seed", data.get("seed"), seed_reader.allowed) from None  # type: ignore[attr-defined]

        for section in ("sources", "cohort"):
            if section not in data:
                raise ConfigError(f"{source}: the [{section}] table is missing")
            if not isinstance(data[section], Mapping):
                raise ConfigError(f"{source}: [{section}] must be a table, got {data[section]!r}")
        base = (base_dir or Path.cwd()).resolve()
        # the cohort stage owns [sources] and [cohort]; parse them now so a bad key fails before any work
        source_spec, cohort_spec = _parse_cohort_sections(data["sources"], data["cohort"], base, source)

        lm = _read_section(
            data.get("landmarks"), source, "landmarks",
            {"landmarks_years": _number_list(0.0), "horizon_years": _number(0.0, lower_open=True)},
            {},
        ) if "landmarks" in data else _missing(source, "landmarks")
        landmarks = LandmarkPlan(**lm)

        models = _read_models(data.get("models"), source)

        v = _read_section(
            data.get("validation", {}), source, "validation",
            {
                "folds": _integer(2), "bootstrap_reps": _integer(0), "n_jobs": _integer(1),
                "dask_address": _string(allow_empty=True), "seed": _integer(0), "compare": _string_list,
            },
            {"folds": 5, "bootstrap_reps": 50, "n_jobs": 1, "dask_address": "", "seed": seed, "compare": None},
        )
        names = [m.name for m in models]
        if v["compare"] is not None:
            if len(v["compare"]) != 2 or any(n not in names for n in v["compare"]):
                raise _reject(source, "validation", "compare", list(v["compare"]),
                              f"two model names from: {', '.join(names)}")
        elif len(models) < 2:
            raise ConfigError(f"{source}: a comparison needs two [[models]] tables; found {len(models)}")
        validation = ValidationPlan(
            folds=v["folds"], bootstrap_reps=v["bootstrap_reps"], n_jobs=v["n_jobs"],
            dask_address=v["dask_address"] or None, seed=v["seed"],
            compare=tuple(v["compare"]) if v["compare"] else None,  # type: ignore[arg-type]
        )

        r = _read_section(
            data.get("report", {}), source, "report",
            {
                "title": _string(), "horizons_years": _number_list(0.0, lower_open=True),
                "small_count_threshold": _integer(1), "example_patients": _integer(0),
                "triage_target_npv": _number(0.5, 1.0), "decision_threshold_max": _number(0.0, 1.0, lower_open=True),
            },
            {"title": ReportOptions.title, "horizons_years": None, "small_count_threshold": 10,
             "example_patients": 3, "triage_target_npv": 0.98, "decision_threshold_max": 0.5},
        )
        if r["horizons_years"] is None:
            r["horizons_years"] = (landmarks.horizon_years,)
        too_long = [h for h in r["horizons_years"] if h > landmarks.horizon_years + 1e-9]
        if too_long:
            raise _reject(source, "report", "horizons_years", list(r["horizons_years"]),
                          f"horizons no longer than [landmarks] horizon_years = {landmarks.horizon_years:g}")
        report = ReportOptions(**r)
        return cls(seed=seed, sources=source_spec, cohort=cohort_spec, landmarks=landmarks,
                   models=models, validation=validation, report=report, base_dir=base, raw=dict(data))


def _missing(source: str, section: str) -> dict:
    raise ConfigError(f"{source}: the [{section}] table is missing")


def _read_models(data: Any, source: str) -> tuple[ModelConfig, ...]:
    if not isinstance(data, list) or not data:
        raise ConfigError(
            f"{source}: [[models]] is missing or empty (got {data!r}); add at least one table like\n"
            '[[models]]\nname = "clinical"\ncovariates = ["age_at_entry", "pack_years"]\nfamily = "landmark_cox"'
        )
    out: list[ModelConfig] = []
    for i, table in enumerate(data):
        section = f"models #{i + 1}"
        m = _read_section(
            table, source, section,
            {"name": _string(), "covariates": _string_list, "family": _string(MODEL_FAMILIES),
             "params": _table},
            {"family": "landmark_cox", "params": {}},
        )
        if any(m["name"] == o.name for o in out):
            raise _reject(source, section, "name", m["name"], "a name not used by another model")
        out.append(ModelConfig(**m))
    return tuple(out)


def _table(value: Any) -> dict:
    if not isinstance(value, Mapping):
        raise TypeError
    return dict(value)


_table.allowed = "a table of keyword arguments for the model"  # type: ignore[attr-defined]


def _parse_cohort_sections(sources: Any, cohort: Any, base_dir: Path, source: str) -> tuple[Any, Any]:
    """Delegate [sources] and [cohort] to the cohort stage's parsers, prefixing errors with the file."""
    from riskbench.cohort.sources import SourceSpec
    from riskbench.cohort.spec import CohortSpec

    try:
        return SourceSpec.from_dict(sources, base_dir), CohortSpec.from_dict(cohort)
    except ValueError as exc:
        raise ConfigError(f"{source}: {exc}") from None


def load_config(path: str | Path) -> AnalysisConfig:
    """Read and check an analysis configuration file (TOML).

    Parameters
    ----------
    path
        The ``.toml`` file. Relative paths inside ``[sources]`` are taken relative to its folder.

    Raises
    ------
    ConfigError
        If the file cannot be parsed, has unknown keys or values of the wrong type.
    """
    path = Path(path)
    if not path.is_file():
        raise ConfigError(f"{path}: no such configuration file")
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{path}: not valid TOML ({exc})") from None
    config = AnalysisConfig.from_dict(data, base_dir=path.resolve().parent, source=str(path))
    object.__setattr__(config, "path", path.resolve())
    return config


def file_sha256(path: str | Path) -> str:
    """SHA-256 hex digest of a file's bytes."""
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()
