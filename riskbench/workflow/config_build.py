"""Build an :class:`~riskbench.workflow.config.AnalysisConfig` from a parsed TOML document.

Every section is checked against its schema even when another section fails, so one pass reports every
problem. The rules that tie sections together (covariates against the cohort's columns, family
parameters, the comparison pair, report horizons, scheduler and key file) follow in
:mod:`riskbench.workflow.config_rules` once every section has been read.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from pathlib import Path
from typing import Any

from pydantic import ValidationError

from riskbench.cohort.config_schema import check_cohort, check_sources
from riskbench.config_problems import Problem, default_where, did_you_mean, problem, schema_problems, show
from riskbench.workflow import config as cfg
from riskbench.workflow.config_schema import SECTIONS, TOP_LEVEL_KEYS, ModelSection, migrate


def _section(name: str, data: Mapping[str, Any], problems: list[Problem]) -> Any:
    schema = SECTIONS[name]
    raw = data.get(name, {})
    try:
        return schema.model_validate(raw)
    except ValidationError as exc:
        problems += schema_problems(exc, schema, raw, default_where(name))
        return None


def _models(data: Mapping[str, Any], problems: list[Problem]) -> list[ModelSection] | None:
    raw = data.get("models")
    if not isinstance(raw, list) or not raw:
        problems.append(
            Problem(
                "[[models]]",
                f"[[models]] is missing or empty (got {show(raw)}); add at least "
                'one table: [[models]] name = "clinical" covariates = [...]',
            )
        )
        return None
    out: list[ModelSection] = []
    for i, table in enumerate(raw):
        name = table.get("name") if isinstance(table, Mapping) else None
        label = f"[[models]] #{i + 1}" + (f" ({name})" if isinstance(name, str) else "")
        try:
            out.append(ModelSection.model_validate(table))
        except ValidationError as exc:
            problems += schema_problems(exc, ModelSection, table, _placed_at(label))
    names = [m.name for m in out]
    for n in sorted({n for n in names if names.count(n) > 1}):
        problems.append(problem("[[models]]", "name", n, "expected a name not used by another model"))
    return out if len(out) == len(raw) else None


def _seed(data: Mapping[str, Any], problems: list[Problem]) -> int:
    seed = data.get("seed", 0)
    if isinstance(seed, bool) or not isinstance(seed, int) or seed < 0:
        problems.append(problem("", "seed", seed, "expected an integer >= 0"))
        return 0
    return seed


def _placed_at(label: str) -> Callable[[list[Any]], str]:
    """A problem locator that names every problem of one [[models]] table by that table's label."""
    return lambda _table: label


def _path(text: str, base_dir: Path) -> Path | None:
    if not text:
        return None
    p = Path(text).expanduser()
    return p if p.is_absolute() else (base_dir / p)


def build_config(
    data: Mapping[str, Any], *, base_dir: Path, config_path: Path | None = None
) -> tuple[Any, list[Problem]]:
    """(AnalysisConfig or None, problems): None when any error was found."""
    problems: list[Problem] = []
    if not isinstance(data, Mapping):
        return None, [Problem("configuration", "the configuration must be a TOML document of tables")]
    for key in sorted(set(data) - set(TOP_LEVEL_KEYS)):
        problems.append(
            Problem(
                key,
                f"unknown top-level key {key!r} = {show(data[key])}; allowed: "
                f"{', '.join(TOP_LEVEL_KEYS)}{did_you_mean(key, TOP_LEVEL_KEYS)}",
            )
        )
    deprecations: list[str] = []
    original, data = data, migrate(data, deprecations)
    seed = _seed(data, problems)

    sources = cohort = None
    for name in ("sources", "cohort", "landmarks"):
        if name not in data:
            problems.append(Problem(f"[{name}]", f"the [{name}] table is missing"))
    if "sources" in data:
        sources, found = check_sources(data["sources"], base_dir)
        problems += found
    if "cohort" in data:
        cohort, found = check_cohort(data["cohort"], deprecations)
        problems += found
    sections = {name: _section(name, data, problems) for name in SECTIONS if name != "landmarks"}
    landmarks = _section("landmarks", data, problems) if "landmarks" in data else None
    models = _models(data, problems)

    if (
        problems
        or sources is None
        or cohort is None
        or landmarks is None
        or models is None
        or None in sections.values()
    ):
        return None, problems + _partial_rules(cohort, models, landmarks)
    config = _assemble(original, seed, sources, cohort, landmarks, models, sections, base_dir, config_path, problems)
    if config is None:
        return None, problems
    from riskbench.workflow.config_rules import check_rules

    problems += check_rules(config)
    warnings = tuple(p.message for p in problems if not p.is_error)
    object.__setattr__(config, "deprecations", tuple(deprecations))
    object.__setattr__(config, "warnings", warnings)
    return (None if any(p.is_error for p in problems) else config), problems


def _partial_rules(cohort: Any, models: list[ModelSection] | None, landmarks: Any) -> list[Problem]:
    """The cross-section rules whose sections were read, when another section failed (all problems at once)."""
    from types import SimpleNamespace

    from riskbench.workflow.config_rules import covariate_problems, family_problems

    if cohort is None or models is None:
        return []
    config = SimpleNamespace(cohort=cohort, models=models)
    if landmarks is None:
        return covariate_problems(config)
    config.landmarks = SimpleNamespace(landmarks_days=tuple(landmarks.landmarks))
    return covariate_problems(config) + family_problems(config)


def _assemble(
    data: Mapping[str, Any],
    seed: int,
    sources: Any,
    cohort: Any,
    lm: Any,
    models: list[ModelSection],
    s: dict[str, Any],
    base_dir: Path,
    config_path: Path | None,
    problems: list[Problem],
) -> Any:
    val, ex, rep, md, priv = s["validation"], s["execution"], s["report"], s["missing_data"], s["privacy"]
    execution = cfg.ExecutionPlan(
        workers=ex.workers,
        scheduler_address=ex.scheduler_address.strip() or None,
        allow_remote_scheduler=ex.allow_remote_scheduler,
        tls_ca_file=_path(ex.tls_ca_file, base_dir),
        tls_client_cert_file=_path(ex.tls_client_cert_file, base_dir),
        tls_client_key_file=_path(ex.tls_client_key_file, base_dir),
        replicates_per_task=ex.replicates_per_task,
    )
    optimism = val.optimism if val.optimism is not None else val.bootstrap_resamples > 0
    if optimism and val.bootstrap_resamples == 0:
        problems.append(
            problem(
                "[validation]",
                "optimism",
                True,
                "bootstrap optimism needs bootstrap_resamples >= 2; set optimism = false or "
                "bootstrap_resamples = 200 (common practice)",
            )
        )
    candidate, reference = val.candidate, val.reference
    names = [m.name for m in models]
    if (candidate is None) != (reference is None):
        missing = "reference" if reference is None else "candidate"
        problems.append(
            Problem(
                f"[validation] {missing}",
                f"[validation] needs {missing!r} too: candidate and reference name the two "
                f"models compared (models: {', '.join(names)})",
            )
        )
    elif candidate is None:
        if len(models) < 2:
            problems.append(Problem("[[models]]", f"a comparison needs two [[models]] tables; found {len(models)}"))
        else:
            candidate, reference = names[-1], names[0]
    validation = cfg.ValidationPlan(
        folds=val.folds,
        bootstrap_resamples=val.bootstrap_resamples,
        optimism=optimism,
        candidate=candidate,
        reference=reference,
        seed=val.seed if val.seed is not None else seed,
        execution=execution,
        develop_before=val.develop_before,
    )
    landmarks = cfg.LandmarkPlan(tuple(sorted(lm.landmarks)), lm.prediction_window)
    horizons = tuple(sorted(rep.report_horizons)) if rep.report_horizons else (landmarks.horizon_days,)
    report = cfg.ReportOptions(
        title=rep.title,
        horizons_days=horizons,
        small_count_threshold=rep.small_count_threshold,
        example_patients=rep.example_patients,
        triage=rep.triage,
        triage_target_npv=rep.triage_target_npv,
        decision_curves=rep.decision_curves,
        decision_threshold_max=rep.decision_threshold_max,
        decision_threshold_min=rep.decision_threshold_min,
        example_timelines=rep.example_timelines,
        effect_units=dict(rep.effect_units),
    )
    if rep.decision_threshold_min >= rep.decision_threshold_max:
        problems.append(
            Problem(
                "[report] decision_threshold_min",
                f"[report] decision_threshold_min = {rep.decision_threshold_min:g} must be below "
                f"decision_threshold_max = {rep.decision_threshold_max:g} (the decision curves run "
                "from the one to the other)",
            )
        )
    used = {c for m in models for c in m.covariates}
    for name in sorted(set(rep.effect_units) - used):
        problems.append(
            Problem(
                f"[report] effect_units.{name}",
                f"[report] effect_units names {show(name)}, which no [[models]] table uses as a "
                f"covariate{did_you_mean(name, sorted(used))}",
            )
        )
    default_key = f"{config_path.stem}.key" if config_path is not None else "riskbench.key"
    key_file = _path(priv.key_file or default_key, base_dir) or Path(default_key)  # the text is never empty
    privacy = cfg.PrivacyOptions(key_file=key_file.resolve())
    model_configs = tuple(
        cfg.ModelConfig(
            name=m.name,
            covariates=tuple(m.covariates),
            family=m.family,
            params=dict(m.params),
            missing_data=m.missing_data,
        )
        for m in models
    )
    if problems:
        return None
    return cfg.AnalysisConfig(
        seed=seed,
        sources=sources,
        cohort=cohort,
        landmarks=landmarks,
        models=model_configs,
        validation=validation,
        report=report,
        missing_data=cfg.MissingDataPlan(md.method, md.imputations, md.max_iterations),
        execution=execution,
        privacy=privacy,
        base_dir=base_dir,
        raw=dict(data),
    )
