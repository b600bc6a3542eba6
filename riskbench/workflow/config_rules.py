"""Rules that tie the configuration's sections together (no data needed).

Each rule returns :class:`~riskbench.config_problems.Problem` objects naming the key: model covariates
against the columns the cohort stage will create, each family's ``params`` (names, types, allowed
values, defaults), enough landmarks for the landmark effects, the comparison pair, report horizons within
the prediction window, the scheduler rule, the pseudonym key outside any run folder, and a warning when
the carry-forward limit ends just before a landmark.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from riskbench.config_problems import WARNING, Problem, problem
from riskbench.models.family_registry import family, param_problems
from riskbench.time_units import format_duration

#: A carry-forward limit that ends this close before a landmark lets the values expire just there.
CARRY_MARGIN_DAYS = 7.0
#: Files a riskbench run folder holds; a key file must not live in a folder with one of them.
RUN_FOLDER_MARKS = ("manifest.json", "report.html", ".riskbench-run")
_EFFECT_LANDMARKS = {"none": 1, "linear": 2, "quadratic": 3}


def _model_where(config: Any, index: int) -> str:
    return f"[[models]] #{index + 1} ({config.models[index].name})"


def covariate_problems(config: Any) -> list[Problem]:
    """Every model covariate must be a column the cohort stage creates."""
    available = list(config.cohort.covariate_columns)
    statics = (
        '[cohort] static lists none: list the static covariates, e.g. static = ["age_at_entry"]'
        if not config.cohort.static
        else "a patients-table column must be listed in [cohort] static"
    )
    out = []
    for i, m in enumerate(config.models):
        for c in m.covariates:
            if c in available:
                continue
            hint = (
                f"not a column the cohort stage creates; list them with `riskbench list-covariates CONFIG` ({statics})"
            )
            out.append(problem(_model_where(config, i), "covariates", c, hint, choices=available))
    return out


def family_problems(config: Any) -> list[Problem]:
    """Family parameters (names, types, allowed values) and landmark effects against the landmarks."""
    out = []
    n_landmarks = len(set(config.landmarks.landmarks_days))
    columns = {"patient_id", *config.cohort.covariate_columns}
    for i, m in enumerate(config.models):
        where = _model_where(config, i)
        for key, value, allowed, choices in param_problems(m.family, m.params):
            out.append(problem(where, f"params.{key}", value, allowed, choices=choices))
        if m.family == "landmark_cox":
            effects = m.params.get("landmark_effects", family(m.family).param("landmark_effects").default)
            needed = _EFFECT_LANDMARKS.get(effects, 0)
            if needed > n_landmarks:
                out.append(
                    problem(
                        where,
                        "params.landmark_effects",
                        effects,
                        f"needs at least {needed} distinct landmarks and [landmarks] landmarks has {n_landmarks}; "
                        "add landmarks or use landmark_effects = 'none' / 'linear'",
                    )
                )
        if m.family == "time_varying_cox":
            for key in ("strata", "weights", "cluster"):
                value = m.params.get(key)
                if isinstance(value, str) and value not in columns:
                    out.append(
                        problem(
                            where,
                            f"params.{key}",
                            value,
                            "expected a column of the counting-process table",
                            choices=columns,
                        )
                    )
    return out


def comparison_problems(config: Any) -> list[Problem]:
    """candidate and reference name two different configured models."""
    names = [m.name for m in config.models]
    v = config.validation
    out = [
        problem("[validation]", key, value, f"expected one of the models: {', '.join(names)}", choices=names)
        for key, value in (("candidate", v.candidate), ("reference", v.reference))
        if value is not None and value not in names
    ]
    if v.candidate is not None and v.candidate == v.reference:
        out.append(
            problem(
                "[validation]",
                "reference",
                v.reference,
                f"expected a model other than the candidate (models: {', '.join(names)})",
            )
        )
    return out


def horizon_problems(config: Any) -> list[Problem]:
    """Report horizons no longer than the prediction window."""
    window = config.landmarks.horizon_days
    long = [h for h in config.report.horizons_days if h > window + 1e-9]
    if not long:
        return []
    return [
        problem(
            "[report]",
            "report_horizons",
            [format_duration(h) for h in config.report.horizons_days],
            f"each horizon must be no longer than [landmarks] prediction_window = {format_duration(window)!r}",
        )
    ]


def scheduler_problems(config: Any) -> list[Problem]:
    """The remote-scheduler rule (see :func:`riskbench.validation.parallel.check_scheduler`)."""
    from riskbench.validation.parallel import check_scheduler

    return [Problem("[execution] scheduler_address", text) for text in check_scheduler(config.execution)]


def key_file_problems(config: Any) -> list[Problem]:
    """The pseudonym key must not sit inside a run folder (it would travel with the results)."""
    if config.privacy is None:
        return []
    key = Path(config.privacy.key_file)
    for folder in key.parents:
        marks = [m for m in RUN_FOLDER_MARKS if (folder / m).exists()]
        if marks:
            return [
                problem(
                    "[privacy]",
                    "key_file",
                    str(key),
                    f"the key file would lie inside the run folder {folder} (it holds {marks[0]}); keep "
                    "the key outside every run folder, e.g. beside the configuration",
                )
            ]
    if key.exists() and key.is_dir():
        return [problem("[privacy]", "key_file", str(key), "expected a file path, not a folder")]
    return []


def carry_forward_warnings(config: Any, visit_days: tuple[float, ...] = (0.0,)) -> list[Problem]:
    """Warn when a value dated on a common visit day stops being carried just before a landmark."""
    limit = config.cohort.max_carry_days
    if limit is None:
        return []
    out = []
    for s in config.landmarks.landmarks_days:
        for day in visit_days:
            gap = s - (day + limit)
            if 0 < gap <= CARRY_MARGIN_DAYS:
                when = "entry" if day == 0 else f"day {day:g}"
                out.append(
                    Problem(
                        "[cohort] max_carry",
                        f"[cohort] max_carry = {format_duration(limit)!r} ends {gap:g} days before the landmark "
                        f"{format_duration(s)!r} ({s:g} days), so values measured at {when} are no longer carried "
                        f"there; a few days longer (e.g. {format_duration(limit + CARRY_MARGIN_DAYS + 1)!r}) keeps "
                        "them",
                        WARNING,
                    )
                )
                break
    return out


def check_rules(config: Any) -> list[Problem]:
    """Every rule across sections, errors and warnings."""
    return [
        *covariate_problems(config),
        *family_problems(config),
        *comparison_problems(config),
        *horizon_problems(config),
        *scheduler_problems(config),
        *key_file_problems(config),
        *carry_forward_warnings(config),
    ]
