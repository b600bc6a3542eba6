"""The schema of the configuration sections the workflow owns (pydantic v2).

``[landmarks]``, ``[[models]]``, ``[missing_data]``, ``[validation]``, ``[execution]``, ``[report]`` and
``[privacy]``. Each table forbids unknown keys and coerces nothing; durations are texts with a unit.
:func:`migrate` rewrites the previous release's keys into the new ones and says so, once per key.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any, Literal

from pydantic import Field, field_validator

from riskbench.config_problems import show
from riskbench.config_types import ConfigTable, Duration, Name, PositiveDuration, Text, readable_duration
from riskbench.models.family_registry import ALIASES, FAMILIES

MISSING_DATA_METHODS = ("multiple_imputation", "complete_cases", "missing_indicator")
FAMILY_NAMES: tuple[str, ...] = tuple(FAMILIES)
TOP_LEVEL_KEYS: tuple[str, ...] = (
    "seed",
    "sources",
    "cohort",
    "landmarks",
    "models",
    "missing_data",
    "validation",
    "execution",
    "report",
    "privacy",
)


def _distinct(values: list[Any]) -> list[Any]:
    if len(set(values)) != len(values):
        raise ValueError("expected distinct values")
    return values


class LandmarksSection(ConfigTable):
    """``[landmarks]``: the prediction question (risk in (s, s + window] at each landmark s)."""

    landmarks: list[Duration] = Field(
        min_length=1, description='a non-empty list of distinct durations, e.g. ["0 years", "6 months"]'
    )
    prediction_window: PositiveDuration

    _distinct = field_validator("landmarks")(_distinct)


class ModelSection(ConfigTable):
    """One ``[[models]]`` table."""

    name: Name
    family: Literal[FAMILY_NAMES] = "landmark_cox"  # type: ignore[valid-type]
    covariates: list[str] = Field(min_length=1, description="a non-empty list of distinct covariate names")
    params: dict[str, Any] = Field(default_factory=dict, description="a table of the family's parameters")
    missing_data: Literal[MISSING_DATA_METHODS] | None = None  # type: ignore[valid-type]

    _distinct = field_validator("covariates")(_distinct)


class MissingDataSection(ConfigTable):
    """``[missing_data]``: how missing covariate values are handled (overridable per model)."""

    method: Literal[MISSING_DATA_METHODS] = "multiple_imputation"  # type: ignore[valid-type]
    imputations: int = Field(10, ge=2, le=1000, description="an integer from 2 to 1000")
    max_iterations: int = Field(10, ge=1, le=1000, description="an integer from 1 to 1000")


def _resamples(value: int) -> int:
    if value == 1:
        raise ValueError("expected 0 (no bootstrap) or at least 2 resamples (200 is common practice)")
    return value


class ValidationSection(ConfigTable):
    """``[validation]``."""

    folds: int = Field(5, ge=2, le=100, description="an integer from 2 to 100")
    bootstrap_resamples: int = Field(
        50, ge=0, le=100_000, description="0 (off) or an integer >= 2 (200 is common practice)"
    )
    optimism: bool | None = Field(None, description="true or false")
    candidate: Name | None = None
    reference: Name | None = None
    seed: int | None = Field(None, ge=0, description="an integer >= 0")
    develop_before: str | None = Field(
        None,
        description='a date "YYYY-MM-DD": patients entering before it '
        "develop the models, those entering on or after it validate them",
    )

    _resamples = field_validator("bootstrap_resamples")(_resamples)

    @field_validator("develop_before")
    @classmethod
    def _cutoff(cls, value: str | None) -> str | None:
        import datetime

        if value is None:
            return value
        try:
            return datetime.date.fromisoformat(value.strip()).isoformat()
        except ValueError:
            raise ValueError('expected a calendar date written "YYYY-MM-DD", such as "2021-01-01"') from None


class ExecutionSection(ConfigTable):
    """``[execution]``: where the resampling replicates run."""

    workers: int = Field(1, ge=1, le=512, description="an integer from 1 to 512")
    scheduler_address: str = Field(
        "", description='a Dask scheduler address such as "tls://host:8786"; "" runs locally'
    )
    allow_remote_scheduler: bool = Field(False, description="true or false")
    tls_ca_file: str = Field("", description="a file path")
    tls_client_cert_file: str = Field("", description="a file path")
    tls_client_key_file: str = Field("", description="a file path")
    replicates_per_task: int | None = Field(
        None, ge=1, le=100_000, description="an integer from 1 to 100000; leave it out for about four tasks per worker"
    )


class ReportSection(ConfigTable):
    """``[report]``."""

    title: Text = "Dynamic risk analysis"
    report_horizons: list[PositiveDuration] | None = Field(
        None, min_length=1, description='a non-empty list of durations, e.g. ["1 year", "2 years"]'
    )
    small_count_threshold: int = Field(10, ge=1, le=1000, description="an integer from 1 to 1000")
    example_patients: int = Field(3, ge=0, le=50, description="an integer from 0 to 50")
    triage: bool = Field(True, description="true or false")
    triage_target_npv: float = Field(0.98, ge=0.5, le=1.0, description="a number from 0.5 to 1")
    decision_curves: bool = Field(True, description="true or false")
    decision_threshold_max: float = Field(0.5, gt=0.0, le=1.0, description="a number > 0 and <= 1")
    decision_threshold_min: float = Field(0.0, ge=0.0, lt=1.0, description="a number from 0 up to (not including) 1")
    example_timelines: bool = Field(True, description="true or false")
    effect_units: dict[Name, float | Literal["iqr", "sd"]] = Field(
        default_factory=dict,
        description='a table covariate = step: a number > 0 in the covariate\'s unit, "iqr" '
        'or "sd" (hazard ratios are shown per that step; default per interquartile range, binary per 1)',
    )

    @field_validator("effect_units")
    @classmethod
    def _positive_steps(cls, value: dict[str, Any]) -> dict[str, Any]:
        bad = {k: v for k, v in value.items() if isinstance(v, float) and not (0 < v < float("inf"))}
        if bad:
            raise ValueError(f"expected steps > 0 (finite numbers), 'iqr' or 'sd'; {show(bad)} is not")
        return value

    @field_validator("report_horizons")
    @classmethod
    def _distinct_horizons(cls, value: list[float] | None) -> list[float] | None:
        return None if value is None else _distinct(value)


class PrivacySection(ConfigTable):
    """``[privacy]``."""

    key_file: str | None = Field(None, description="a file path for the pseudonym key")


SECTIONS: dict[str, type[ConfigTable]] = {
    "landmarks": LandmarksSection,
    "missing_data": MissingDataSection,
    "validation": ValidationSection,
    "execution": ExecutionSection,
    "report": ReportSection,
    "privacy": PrivacySection,
}


# --------------------------------------------------------------------------------------------------
# The previous release's keys


def _years_list(value: Any) -> Any:
    if isinstance(value, list):
        return [f"{v!r} years" if isinstance(v, (int, float)) and not isinstance(v, bool) else v for v in value]
    return value


def _rename(
    table: dict,
    old: str,
    new: str,
    where: str,
    deprecations: list[str],
    *,
    convert=None,
    target: dict | None = None,
    target_where: str | None = None,
) -> None:
    """Move ``table[old]`` to ``(target or table)[new]`` (converted) when the new key is not given."""
    if old not in table:
        return
    dest = table if target is None else target
    if new in dest:
        return  # both given: the old key stays and is reported as unknown
    value = table.pop(old)
    dest[new] = convert(value) if convert else value
    deprecations.append(
        f"{where} {old} = {show(value)} is deprecated; write {target_where or where} "
        f"{new} = {show(readable_duration(dest[new]))}"
    )


def migrate(data: Mapping[str, Any], deprecations: list[str]) -> dict[str, Any]:
    """A copy of the configuration with the previous release's keys rewritten (messages in ``deprecations``)."""
    out = {k: (dict(v) if isinstance(v, Mapping) else v) for k, v in data.items()}
    lm = out.get("landmarks")
    if isinstance(lm, dict):
        _rename(lm, "landmarks_years", "landmarks", "[landmarks]", deprecations, convert=_years_list)
        _rename(
            lm, "horizon_years", "prediction_window", "[landmarks]", deprecations, convert=lambda v: _years_list([v])[0]
        )
    models = out.get("models")
    if isinstance(models, list):
        out["models"] = [_migrate_model(m, i, deprecations) for i, m in enumerate(models)]
    val = out.get("validation")
    if isinstance(val, dict):
        _rename(val, "bootstrap_reps", "bootstrap_resamples", "[validation]", deprecations)
        compare = val.get("compare")
        if isinstance(compare, list) and len(compare) == 2 and "candidate" not in val and "reference" not in val:
            val.pop("compare")
            val["candidate"], val["reference"] = compare
            deprecations.append(
                f"[validation] compare = {show(compare)} is deprecated; write candidate = "
                f"{compare[0]!r} and reference = {compare[1]!r}"
            )
        if any(k in val for k in ("n_jobs", "dask_address")):
            execution = out.setdefault("execution", {})
            if isinstance(execution, dict):
                _rename(
                    val, "n_jobs", "workers", "[validation]", deprecations, target=execution, target_where="[execution]"
                )
                _rename(
                    val,
                    "dask_address",
                    "scheduler_address",
                    "[validation]",
                    deprecations,
                    target=execution,
                    target_where="[execution]",
                )
        if "seed" in val:
            deprecations.append(
                f"[validation] seed = {show(val['seed'])} is deprecated; every random step now "
                "derives from the top-level seed (leave [validation] seed out)"
            )
    rep = out.get("report")
    if isinstance(rep, dict):
        _rename(rep, "horizons_years", "report_horizons", "[report]", deprecations, convert=_years_list)
    return out


def _migrate_model(model: Any, index: int, deprecations: list[str]) -> Any:
    if not isinstance(model, Mapping):
        return model
    model = dict(model)
    family = model.get("family")
    if isinstance(family, str) and family in ALIASES:
        model["family"] = ALIASES[family]
        deprecations.append(
            f"[[models]] #{index + 1} family = {family!r} is deprecated; write family = "
            f"{ALIASES[family]!r} (the Cox model on the whole time-varying follow-up)"
        )
    return model
