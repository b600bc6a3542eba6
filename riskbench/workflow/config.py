"""The analysis configuration: one TOML file that fixes every choice of a run.

Sections
--------
``seed``              top-level integer; every random step of the run derives from it.
``[sources]``         where the three input tables are, their column names, date format and encoding.
``[cohort]``          cohort rules: carry-forward, look-back, variables, statics, features.
``[landmarks]``       ``landmarks`` (durations) and ``prediction_window``: the prediction question.
``[[models]]``        ``name``, ``family``, ``covariates``, ``params``, optional ``missing_data``.
``[missing_data]``    ``method``, ``imputations``, ``max_iterations``.
``[validation]``      ``folds``, ``bootstrap_resamples``, ``optimism``, ``candidate``, ``reference``,
                      ``develop_before``.
``[execution]``       ``workers``, ``scheduler_address``, ``allow_remote_scheduler``, TLS files,
                      ``replicates_per_task``
``[report]``          ``title``, ``report_horizons``, ``small_count_threshold`` and the switches of each part.
``[privacy]``         ``key_file`` (pseudonym key; default ``<config stem>.key`` beside the configuration).

Every duration is a text with a unit (``"6 months"``), read by :func:`riskbench.time_units.parse_duration`.
The whole file is checked before anything runs and every problem is reported at once
(:class:`ConfigError`, one line per problem naming the key, the value, what is allowed and a "did you mean").
The previous release's keys still work; ``AnalysisConfig.deprecations`` names the key that replaces each.
``load_config(path, check_data=True)`` also checks the configuration against the headers and a sample of
the source files (:func:`riskbench.workflow.config_data_check.check_analysis`).
"""

from __future__ import annotations

import hashlib
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from riskbench.config_problems import Problem
from riskbench.errors import RiskbenchError
from riskbench.models.missing_data import MissingDataPlan
from riskbench.time_units import DAYS_PER_YEAR


class ConfigError(RiskbenchError):
    """The analysis configuration is invalid; each line names the key, the value and the fix.

    Attributes
    ----------
    problems : tuple of Problem
        Every problem found (errors; warnings are on the configuration).
    """

    def __init__(self, message: str, problems: tuple[Problem, ...] = ()) -> None:
        super().__init__(message)
        self.problems = problems


# --------------------------------------------------------------------------------------------------
# The checked configuration


@dataclass(frozen=True)
class LandmarkPlan:
    """The prediction question: risk in (s, s + horizon] for each landmark s (days since entry)."""

    landmarks_days: tuple[float, ...]
    horizon_days: float

    @property
    def landmarks_years(self) -> tuple[float, ...]:
        """Landmarks in years (for old callers)."""
        return tuple(s / DAYS_PER_YEAR for s in self.landmarks_days)

    @property
    def horizon_years(self) -> float:
        """The prediction window in years (for old callers)."""
        return self.horizon_days / DAYS_PER_YEAR


@dataclass(frozen=True)
class ModelConfig:
    """One model of the analysis: a named covariate set fitted with one model family."""

    name: str
    covariates: tuple[str, ...]
    family: str = "landmark_cox"
    params: Mapping[str, Any] = field(default_factory=dict)
    missing_data: str | None = None  # per-model override of [missing_data] method


@dataclass(frozen=True)
class ExecutionPlan:
    """Where resampling replicates run: local worker processes or a Dask scheduler."""

    workers: int = 1
    scheduler_address: str | None = None
    allow_remote_scheduler: bool = False
    tls_ca_file: Path | None = None
    tls_client_cert_file: Path | None = None
    tls_client_key_file: Path | None = None
    replicates_per_task: int | None = None


@dataclass(frozen=True)
class ValidationPlan:
    """Internal validation: patient-grouped cross-validation and bootstrap optimism."""

    folds: int = 5
    bootstrap_resamples: int = 50
    optimism: bool = True
    candidate: str | None = None
    reference: str | None = None
    seed: int = 0
    execution: ExecutionPlan = field(default_factory=ExecutionPlan, repr=False, compare=False)
    develop_before: str | None = None  # ISO date: temporal split (riskbench.workflow.temporal_validation)

    @property
    def bootstrap_reps(self) -> int:
        """Old name of ``bootstrap_resamples``."""
        return self.bootstrap_resamples

    @property
    def n_jobs(self) -> int:
        """Old name of ``[execution] workers``."""
        return self.execution.workers

    @property
    def dask_address(self) -> str | None:
        """Old name of ``[execution] scheduler_address``."""
        return self.execution.scheduler_address

    @property
    def compare(self) -> tuple[str, str] | None:
        """Old ``(candidate, reference)`` pair."""
        if self.candidate is None or self.reference is None:
            return None
        return (self.candidate, self.reference)


@dataclass(frozen=True)
class ReportOptions:
    """What the report shows and how it protects small groups."""

    title: str = "Dynamic risk analysis"
    horizons_days: tuple[float, ...] = (DAYS_PER_YEAR,)
    small_count_threshold: int = 10  # common practice (10 or 11)
    example_patients: int = 3
    triage: bool = True
    triage_target_npv: float = 0.98
    decision_curves: bool = True
    decision_threshold_max: float = 0.5
    decision_threshold_min: float = 0.0  # decision curves start here (0: treat everyone with any risk)
    example_timelines: bool = True
    #: covariate column -> step of its hazard ratio: a number in the covariate's unit, "iqr" or "sd"
    #: (:mod:`riskbench.report.effects`; covariates not listed: per interquartile range, binary per 1).
    effect_units: Mapping[str, float | str] = field(default_factory=dict)

    @property
    def horizons_years(self) -> tuple[float, ...]:
        """Report horizons in years (for old callers)."""
        return tuple(h / DAYS_PER_YEAR for h in self.horizons_days)


@dataclass(frozen=True)
class PrivacyOptions:
    """Where the pseudonym key lives (an absolute path, never inside a run folder)."""

    key_file: Path


@dataclass(frozen=True)
class AnalysisConfig:
    """A checked analysis configuration.

    ``sources`` (:class:`riskbench.cohort.sources.SourceSpec`) and ``cohort``
    (:class:`riskbench.cohort.spec.CohortSpec`) are the cohort stage's objects; ``raw`` is the file's
    content as read, for the run manifest; ``base_dir`` is the configuration file's folder;
    ``deprecations`` and ``warnings`` are one-line messages (``check-config`` prints them).
    """

    seed: int
    sources: Any
    cohort: Any
    landmarks: LandmarkPlan
    models: tuple[ModelConfig, ...]
    validation: ValidationPlan
    report: ReportOptions
    missing_data: MissingDataPlan = field(default_factory=MissingDataPlan)
    execution: ExecutionPlan = field(default_factory=ExecutionPlan)
    privacy: PrivacyOptions | None = None
    base_dir: Path | None = None
    path: Path | None = None
    raw: Mapping[str, Any] = field(default_factory=dict)
    deprecations: tuple[str, ...] = ()
    warnings: tuple[str, ...] = ()

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
    def from_dict(
        cls,
        data: Mapping[str, Any],
        *,
        base_dir: Path | None = None,
        source: str = "configuration",
        config_path: Path | None = None,
    ) -> AnalysisConfig:
        """Check a parsed TOML document completely; ``base_dir`` resolves relative paths.

        Raises
        ------
        ConfigError
            Listing every problem found, one per line.
        """
        from riskbench.workflow.config_build import build_config

        config, problems = build_config(data, base_dir=(base_dir or Path.cwd()).resolve(), config_path=config_path)
        raise_problems(problems, source)
        return config


def raise_problems(problems: list[Problem], source: str) -> None:
    """Raise one :class:`ConfigError` listing every error among ``problems`` (warnings pass)."""
    errors = [p for p in problems if p.is_error]
    if not errors:
        return
    if len(errors) == 1:
        raise ConfigError(f"{source}: {errors[0].message}", tuple(errors))
    lines = "\n".join(f"  {p.message}" for p in errors)
    raise ConfigError(f"{source}: {len(errors)} problems:\n{lines}", tuple(errors))


def load_config(path: str | Path, *, check_data: bool = False) -> AnalysisConfig:
    """Read and check an analysis configuration file (TOML).

    Parameters
    ----------
    path
        The ``.toml`` file. Relative paths inside it are taken relative to its folder.
    check_data
        Also check the configuration against the source files' headers and a sample of their rows
        (covariates the cohort will create, date formats, statics, landmarks against the follow-up).

    Raises
    ------
    ConfigError
        Listing every problem: unparseable file, unknown keys, values of the wrong type or out of range,
        and (with ``check_data``) disagreements with the data.
    """
    path = Path(path)
    if not path.is_file():
        raise ConfigError(f"{path}: no such configuration file")
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{path}: not valid TOML ({exc})") from None
    except UnicodeDecodeError:
        raise ConfigError(f"{path}: not a UTF-8 text file; save the configuration as UTF-8") from None
    config = AnalysisConfig.from_dict(
        data, base_dir=path.resolve().parent, source=str(path), config_path=path.resolve()
    )
    object.__setattr__(config, "path", path.resolve())
    if check_data:
        from riskbench.workflow.config_data_check import check_analysis

        problems = check_analysis(config)
        raise_problems(problems, str(path))
        found = tuple(p.message for p in problems if not p.is_error)
        object.__setattr__(config, "warnings", config.warnings + found)
    return config


def file_sha256(path: str | Path) -> str:
    """SHA-256 hex digest of a file's bytes."""
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()
