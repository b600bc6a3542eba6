"""Check a configuration against its data before anything runs: headers, a sample, the follow-up.

:func:`check_analysis` reads each source's header and its first :data:`SAMPLE_ROWS` rows (with the
source's encoding and date format), the patient and outcome dates in full (two columns each), and reports
every disagreement as a :class:`~riskbench.config_problems.Problem` naming the configuration key that fixes
it: required columns and static covariates missing from the files, dates that do not parse with the
configured format (or read both day-first and month-first), outcome kinds the cohort stage does not know,
landmarks after which too few patients remain followed, and (as warnings) landmarks that fall just before
a common visit day or just after the carry-forward limit of a visit's values.

Messages name files, columns, line numbers and counts; they never quote patient ids or cell values.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from riskbench.config_problems import WARNING, Problem, did_you_mean, problem
from riskbench.time_units import format_duration
from riskbench.workflow.config_rules import carry_forward_warnings

#: Rows read from the top of each source for the checks on values (header + this many rows).
SAMPLE_ROWS = 5000
#: Fewer patients than this still followed after a landmark is an error (common practice: about 10).
MIN_AT_RISK = 10
#: Outcome events per covariate below which a warning is given (common practice: about 10).
EVENTS_PER_COVARIATE = 10
#: A landmark this many days or less before a common visit day gets a warning.
VISIT_MARGIN_DAYS = 3.0
#: A visit day is common when at least this share of the sampled measurements fall on it.
COMMON_VISIT_SHARE = 0.05
REQUIRED = {
    "patients": ("patient_id", "entry_date"),
    "measurements": ("patient_id", "date", "variable", "value"),
    "outcomes": ("patient_id", "date", "kind"),
}
KINDS = ("outcome", "competing", "end_of_follow_up")
#: An unmapped outcome kind on more than this share of the sampled outcome rows is an error, not a warning.
UNKNOWN_KIND_SHARE = 0.05
_DAY_FIRST, _MONTH_FIRST = "%d/%m/%Y", "%m/%d/%Y"


@dataclass
class _Table:
    name: str
    source: Any
    sample: pd.DataFrame | None  # our column names
    file_columns: tuple[str, ...]

    @property
    def where(self) -> str:
        return f"[sources.{self.name}]"

    def ours(self, column: str) -> str:
        """The file's name of our column ``column``."""
        return dict(self.source.columns).get(column, column)


def _read(path: Path, encoding: str, nrows: int | None, usecols: list[str] | None = None) -> pd.DataFrame:
    if path.suffix.lower() in (".parquet", ".pq"):
        import pyarrow.parquet as pq

        if nrows is None:
            return pq.read_table(path, columns=usecols).to_pandas()
        batch = next(pq.ParquetFile(path).iter_batches(batch_size=nrows, columns=usecols), None)
        return batch.to_pandas() if batch is not None else pd.DataFrame()
    # ragged lines are skipped here: the cohort stage gives each one a reason in the ledger
    return pd.read_csv(
        path,
        nrows=nrows,
        dtype=str,
        encoding=encoding,
        keep_default_na=False,
        na_filter=False,
        usecols=usecols,
        skip_blank_lines=False,
        comment=None,
        on_bad_lines="skip",
    )


def _load(name: str, source: Any, problems: list[Problem]) -> _Table:
    where = f"[sources.{name}]"
    encoding = getattr(source, "encoding", "utf-8")
    try:
        raw = _read(Path(source.path), encoding, SAMPLE_ROWS)
    except UnicodeDecodeError:
        problems.append(
            problem(
                where,
                "encoding",
                encoding,
                f'{source.path} is not {encoding} text; set encoding = "latin-1", '
                '"cp1252" or "utf-16" to match the file',
            )
        )
        return _Table(name, source, None, ())
    except (ValueError, OSError, pd.errors.ParserError) as exc:
        first = str(exc).splitlines()[0][:200] if str(exc) else type(exc).__name__
        problems.append(Problem(f"{where} path", f"{where} path: {source.path} cannot be read as a table ({first})"))
        return _Table(name, source, None, ())
    file_columns = tuple(str(c) for c in raw.columns)
    back = {f: o for o, f in dict(source.columns).items()}
    return _Table(name, source, raw.rename(columns=back), file_columns)


def _column_problems(t: _Table, cohort: Any) -> list[Problem]:
    required = list(REQUIRED[t.name])
    wide = t.name == "measurements" and getattr(t.source, "layout", "long") == "wide"
    if wide:
        required = ["patient_id", "date", *[v.name for v in cohort.variables]]
    out = []
    for column in required:
        if t.ours(column) not in t.file_columns:
            out.append(
                Problem(
                    f"{t.where} columns",
                    f"{t.where} {t.source.path} has no column {t.ours(column)!r}"
                    f"{'' if t.ours(column) == column else f' (mapped to {column!r})'}; the file's columns: "
                    f'{", ".join(t.file_columns)}; map it with columns = {{ {column} = "<file column>" }}'
                    f"{did_you_mean(t.ours(column), t.file_columns)}",
                )
            )
    return out


def _static_problems(t: _Table, cohort: Any) -> list[Problem]:
    have = set(t.file_columns)
    age_ok = t.ours("birth_date") in have or t.ours("age_at_entry") in have
    out = []
    spec_of = getattr(cohort, "static_spec", None)
    for name in cohort.static:
        if name == "age_at_entry":
            ok = age_ok
            needs = f"a {t.ours('birth_date')!r} or {t.ours('age_at_entry')!r} column"
        elif name in ("sex_male", "sex"):
            ok, needs = t.ours("sex") in have, f"a {t.ours('sex')!r} column"
        else:
            column = (spec_of(name).column if callable(spec_of) else None) or name
            ok, needs = t.ours(column) in have, f"a column {t.ours(column)!r}"
        if not ok:
            out.append(
                problem(
                    "[cohort]",
                    "static",
                    name,
                    f"needs {needs} in {t.source.path} (the file's columns: {', '.join(t.file_columns)})"
                    "; map it in [sources.patients] columns or remove it from static",
                    choices=t.file_columns,
                )
            )
    if cohort.current_age and not age_ok:
        out.append(
            problem(
                "[cohort]",
                "current_age",
                True,
                f"needs a birth_date or age_at_entry column in {t.source.path}; set current_age = false",
            )
        )
    return out


def _filled(values: pd.Series) -> pd.Series:
    text = values.astype(str).str.strip()
    return text[(text != "") & (text.str.lower() != "nan") & (text != "None")]


def _share_problem(key: str, text: str, bad: int, total: int) -> list[Problem]:
    """An error when most sampled values are affected (a wrong setting), a warning when a few are."""
    if bad == 0:
        return []
    return [Problem(key, f"{text}: {bad} of {total} sampled values", "error" if bad > total / 2 else WARNING)]


def _static_value_problems(t: _Table, cohort: Any) -> list[Problem]:
    """Sampled static values against declared codes and plausible ranges (each failure excludes a patient)."""
    spec_of = getattr(cohort, "static_spec", None)
    if t.sample is None or not callable(spec_of):
        return []
    out = []
    for name in cohort.static:
        spec = spec_of(name)
        column = spec.column or ("sex" if spec.name == "sex" else spec.name)
        if column not in t.sample.columns or (spec.name == "age_at_entry" and spec.column is None):
            continue
        values = _filled(t.sample[column])
        if values.empty:
            continue
        key = f"[cohort.statics.{spec.name}]"
        if spec.kind == "categorical":
            declared = {str(c).strip().upper() for c in spec.codes}
            bad = int((~values.str.upper().isin(declared)).sum())
            out += _share_problem(
                f"{key} codes",
                f"{key} codes = {sorted(spec.codes)}: column {t.ours(column)!r} of "
                f"{t.source.path} has codes outside them (those patients are excluded); declare "
                "every code the file uses",
                bad,
                len(values),
            )
            continue
        numbers = pd.to_numeric(values, errors="coerce")
        lo, hi = getattr(spec, "lower_bound", spec.plausible_min), spec.plausible_max
        outside = (
            numbers.isna()
            | ((numbers < lo) if lo is not None else False)
            | ((numbers > hi) if hi is not None else False)
        )
        bounds = (
            f"[{lo:g}, {hi:g}]"
            if lo is not None and hi is not None
            else f"at least {lo:g}"
            if lo is not None
            else f"at most {hi:g}"
            if hi is not None
            else "any number"
        )
        out += _share_problem(
            f"{key} range",
            f"{key} range ({bounds}): column {t.ours(column)!r} of "
            f"{t.source.path} has values that are not numbers in this range (those patients are "
            "excluded)",
            int(outside.sum()),
            len(values),
        )
    return out


def _unit_problems(t: _Table, cohort: Any) -> list[Problem]:
    """Sampled measurement units against each variable's unit and conversions."""
    if t.sample is None or "unit" not in t.sample.columns or "variable" not in t.sample.columns:
        return []
    out = []
    names = t.sample["variable"].astype(str).str.strip()
    units = t.sample["unit"].astype(str).str.strip()
    for v in cohort.variables:
        rows = units[(names == v.name) & (units != "") & (units.str.lower() != "nan")]
        unknown = sorted(set(rows) - set(v.factors))
        if not unknown:
            continue
        key = f"[cohort.variables.{v.name}] conversions"
        bad = int(rows.isin(unknown).sum())
        out += _share_problem(
            key,
            f"{key}: {len(unknown)} unit(s) of {v.name!r} in {t.source.path} are neither "
            f"{v.unit!r} nor converted (those rows are excluded); add unit = factor to conversions"
            f"{did_you_mean(unknown[0], v.factors)}",
            bad,
            len(rows),
        )
    return out


def _parse(values: pd.Series, fmt: str | None) -> pd.Series:
    """Dates of a text column read with ``fmt`` (ISO when None); a typed date column is taken as it is."""
    if pd.api.types.is_datetime64_any_dtype(values):
        return values.dt.tz_localize(None) if getattr(values.dt, "tz", None) is not None else values
    return pd.to_datetime(values.astype(str).str.strip(), format=fmt or "ISO8601", errors="coerce")


def _date_problems(t: _Table, column: str) -> list[Problem]:
    if t.sample is None or column not in t.sample.columns:
        return []
    if pd.api.types.is_datetime64_any_dtype(t.sample[column]):
        return []  # a typed date column (Parquet) needs no format
    filled = _filled(t.sample[column])
    if filled.empty:
        return []
    fmt = t.source.date_format
    key = f"{t.where} date_format"
    parsed = _parse(filled, fmt)
    bad = parsed.isna()
    shown = repr(fmt) if fmt else "not set (ISO dates such as 2020-03-04)"
    if bad.any():
        first_line = int(bad.idxmax()) + 2  # header is line 1
        alternatives = [
            f
            for f in (_DAY_FIRST, _MONTH_FIRST, "%d.%m.%Y", "%Y/%m/%d", "%d-%m-%Y")
            if f != fmt and _parse(filled, f).notna().all()
        ]
        hint = (
            f"; every sampled value reads with date_format = {alternatives[0]!r}"
            if alternatives
            else "; set date_format to the strftime format of the file's dates"
        )
        if len(alternatives) > 1 and {_DAY_FIRST, _MONTH_FIRST} <= set(alternatives):
            hint = (
                '; the dates read both day-first ("%d/%m/%Y") and month-first ("%m/%d/%Y"): set '
                "date_format to the one the file uses"
            )
        share = bad.mean()
        severity = "error" if share > 0.01 else WARNING
        if severity == WARNING:
            hint = "; those rows are excluded as unparseable dates (the ledger counts them)"
        return [
            Problem(
                key,
                f"{key} is {shown}, but {int(bad.sum())} of {len(filled)} sampled {column!r} values "
                f"in {t.source.path} do not parse with it (first at line {first_line}){hint}",
                severity,
            )
        ]
    if fmt in (_DAY_FIRST, _MONTH_FIRST):
        other = _MONTH_FIRST if fmt == _DAY_FIRST else _DAY_FIRST
        if _parse(filled, other).notna().all() and len(filled) >= 1:
            return [
                Problem(
                    key,
                    f"{key} = {fmt!r}: every sampled {column!r} value in {t.source.path} also reads "
                    f"as {other!r} (no day above 12 in the sample); check which one the file uses",
                    WARNING,
                )
            ]
    return []


def _kind_problems(t: _Table, cohort: Any) -> list[Problem]:
    """Outcome kinds neither known nor mapped: an error when they are common (a missing kind_map entry)."""
    if t.sample is None or "kind" not in t.sample.columns:
        return []
    mapped = dict(cohort.kind_map)
    kinds = _filled(t.sample["kind"])
    unknown = kinds[~kinds.isin(set(KINDS) | set(mapped))]
    out = []
    for k, n in unknown.value_counts().head(5).items():
        share = n / max(len(kinds), 1)
        out.append(
            problem(
                "[cohort]",
                "kind_map",
                mapped,
                f"the outcome kind {k!r} ({share:.1%} of the sampled rows of {t.source.path}) is neither "
                f'{", ".join(KINDS)} nor mapped, so those rows are excluded; add {k} = "outcome" | '
                f'"competing" | "end_of_follow_up" to kind_map{did_you_mean(k, KINDS)}',
                severity="error" if share > UNKNOWN_KIND_SHARE else WARNING,
            )
        )
    return out


def _variable_problems(t: _Table, cohort: Any) -> list[Problem]:
    if t.sample is None or "variable" not in t.sample.columns or getattr(t.source, "layout", "long") != "long":
        return []
    seen = set(t.sample["variable"].astype(str).str.strip().unique())
    out = []
    for v in cohort.variables:
        if v.name in seen:
            continue
        near = did_you_mean(v.name, seen - {v.name})
        out.append(
            Problem(
                f"[cohort.variables.{v.name}]",
                f"[cohort.variables.{v.name}]: no sampled row of {t.source.path} has variable = {v.name!r}{near}",
                "error" if near else WARNING,
            )
        )
    return out


def _entry_dates(patients: _Table) -> pd.Series | None:
    """Every row of the patients file: its parsed entry date, indexed by the trimmed patient id (repeated ids
    kept). The full file is read once, two columns only; None when it cannot be read."""
    try:
        p = _read(
            Path(patients.source.path),
            getattr(patients.source, "encoding", "utf-8"),
            None,
            [patients.ours("patient_id"), patients.ours("entry_date")],
        )
    except (ValueError, OSError, KeyError):
        return None
    return pd.Series(
        _parse(p.iloc[:, 1], patients.source.date_format).to_numpy(), index=p.iloc[:, 0].astype(str).str.strip()
    )


def _follow_up(entries: pd.Series | None, outcomes: _Table, kind_map: dict) -> pd.DataFrame | None:
    """Per patient with an entry and an outcome row: ``days`` from entry to the last outcome date and
    ``event`` (an outcome row of kind outcome, after kind_map). ``entries`` from :func:`_entry_dates`; the
    outcomes file is read in full, three columns."""
    if entries is None:
        return None
    try:
        o = _read(
            Path(outcomes.source.path),
            getattr(outcomes.source, "encoding", "utf-8"),
            None,
            [outcomes.ours("patient_id"), outcomes.ours("date"), outcomes.ours("kind")],
        )
    except (ValueError, OSError, KeyError):
        return None
    entry = entries[~entries.index.duplicated(keep=False)].dropna()
    rows = pd.DataFrame(
        {
            "patient_id": o.iloc[:, 0].astype(str).str.strip().to_numpy(),
            "end": _parse(o.iloc[:, 1], outcomes.source.date_format).to_numpy(),
            "kind": o.iloc[:, 2].astype(str).str.strip().map(lambda k: kind_map.get(k, k)).to_numpy(),
        }
    )
    rows = rows.dropna(subset=["end"])
    per = rows.groupby("patient_id").agg(end=("end", "max"), event=("kind", lambda k: bool((k == "outcome").any())))
    per = per[per.index.isin(entry.index)]
    per["days"] = (per["end"] - entry.reindex(per.index)).dt.total_seconds() / 86400.0
    return per[per["days"] > 0]


def _id_hint(unknown: pd.Series, known: set[str]) -> str:
    """Why sampled ids miss the patients file, when a common spelling difference explains it (no id quoted)."""
    spellings = (
        (
            lambda v: v.str.replace(r"\.0+$", "", regex=True),
            "they are written as decimals ('.0' at the end) in one file and as whole numbers in the other",
        ),
        (lambda v: v.str.lstrip("0"), "they differ in leading zeros"),
        (lambda v: v.str.lower(), "they differ in upper and lower case"),
    )
    folded = {k.lower() for k in known} | {k.lstrip("0") for k in known} | set(known)
    for fold, why in spellings:
        if fold(unknown).isin(folded).mean() > 0.5:
            return f"; most would match if written the same way: {why}"
    return ""


def _id_problems(entries: pd.Series | None, others: tuple[_Table, ...]) -> list[Problem]:
    """Patient ids of the measurements and outcomes samples that the patients file does not know: most of
    them (a wrong column or a different spelling of the ids) is an error, a few a warning (the ledger
    excludes those rows as unknown patients)."""
    if entries is None or entries.empty:
        return []
    known = set(entries.index)
    out = []
    for t in others:
        if t.sample is None or "patient_id" not in t.sample.columns:
            continue
        ids = _filled(t.sample["patient_id"])
        unknown = ids[~ids.isin(known)]
        if unknown.empty:
            continue
        key = f"{t.where} columns"
        text = (
            f"{key}: {len(unknown)} of {len(ids)} sampled rows of {t.source.path} name a patient id "
            f"(column {t.ours('patient_id')!r}) that is not in the patients file{_id_hint(unknown, known)}"
        )
        if len(unknown) > len(ids) / 2:
            out.append(
                Problem(
                    key,
                    text + '; map the right column with columns = { patient_id = "..." } or '
                    "write the ids the same way in every file",
                )
            )
        else:
            out.append(Problem(key, text + "; the cohort stage excludes those rows (ledger: unknown_patient)", WARNING))
    return out


def _temporal_split_problems(config: Any, entries: pd.Series | None) -> list[Problem]:
    """``[validation] develop_before`` must leave patients on both sides (developing and validating)."""
    cutoff = getattr(config.validation, "develop_before", None)
    if not cutoff or entries is None or not entries.notna().any():
        return []
    dates = entries.dropna()
    before = int((dates < pd.Timestamp(cutoff)).sum())
    if 0 < before < len(dates):
        return []
    side = "before" if before == 0 else "on or after"
    return [
        problem(
            "[validation]",
            "develop_before",
            cutoff,
            f"no patient entered {side} this date (entries run from {dates.min():%Y-%m-%d} to "
            f"{dates.max():%Y-%m-%d}); choose a date between them so that both parts hold patients",
        )
    ]


def _landmark_problems(config: Any, follow_up: pd.DataFrame) -> list[Problem]:
    out = []
    days = follow_up["days"]
    longest = float(days.max()) if len(days) else 0.0
    for s in config.landmarks.landmarks_days:
        at_risk = int((days > s).sum())
        if at_risk >= MIN_AT_RISK:
            continue
        count = "no patient is" if at_risk == 0 else f"fewer than {MIN_AT_RISK} patients are"
        out.append(
            problem(
                "[landmarks]",
                "landmarks",
                format_duration(s),
                f"{count} still followed after this landmark ({s:g} days; the longest follow-up in the outcomes file "
                f"is {longest:.0f} days); use landmarks that leave at least {MIN_AT_RISK} patients at risk",
            )
        )
    if len(days) < config.validation.folds:
        out.append(
            problem(
                "[validation]",
                "folds",
                config.validation.folds,
                f"expected at most the number of patients with follow-up ({len(days)})",
            )
        )
    return out


def _event_problems(config: Any, follow_up: pd.DataFrame, path: Path) -> list[Problem]:
    """Enough outcome events: at least one per fold, and (a warning) about 10 per covariate."""
    events = int(follow_up["event"].sum())
    if events == 0:
        return [
            problem(
                "[cohort]",
                "kind_map",
                dict(config.cohort.kind_map),
                f"no patient of {path} has an outcome row of kind 'outcome' (after kind_map): there is "
                'nothing to predict; map the file\'s outcome kind to "outcome"',
            )
        ]
    out = []
    if events < config.validation.folds:
        out.append(
            problem(
                "[validation]",
                "folds",
                config.validation.folds,
                "expected at most the number of patients with an outcome event, so that every fold "
                "has one; use fewer folds",
            )
        )
    for i, m in enumerate(config.models):
        if events < EVENTS_PER_COVARIATE * len(m.covariates):
            out.append(
                problem(
                    f"[[models]] #{i + 1} ({m.name})",
                    "covariates",
                    f"{len(m.covariates)} covariates",
                    f"about {EVENTS_PER_COVARIATE} outcome events per covariate are common practice and the outcomes "
                    f"file has fewer than {EVENTS_PER_COVARIATE * len(m.covariates)}; estimates may be unstable",
                    severity=WARNING,
                )
            )
    return out


def _visit_days(entries: pd.Series | None, measurements: _Table) -> tuple[tuple[float, ...], int]:
    """Common measurement days since entry in the sample, and the number of sampled measurements used."""
    m = measurements.sample
    if entries is None or m is None or "date" not in m.columns or "patient_id" not in m.columns:
        return (), 0
    entry = entries[~entries.index.duplicated(keep=False)]
    when = _parse(m["date"], measurements.source.date_format)
    start = entry.reindex(m["patient_id"].astype(str).str.strip()).to_numpy()
    days = pd.Series((when.to_numpy() - start) / np.timedelta64(1, "D")).dropna().round()
    days = days[days > 0]
    if days.empty:
        return (), 0
    share = days.value_counts(normalize=True)
    return tuple(float(d) for d in share[share >= COMMON_VISIT_SHARE].index), len(days)


def _visit_warnings(config: Any, visits: tuple[float, ...]) -> list[Problem]:
    out = []
    for s in config.landmarks.landmarks_days:
        for v in visits:
            gap = v - s
            if 0 < gap <= VISIT_MARGIN_DAYS:
                out.append(
                    Problem(
                        "[landmarks] landmarks",
                        f"[landmarks] landmarks: {format_duration(s)!r} ({s:g} days) falls {gap:g} days before "
                        f"day {v:g}, "
                        f"a common visit day in the measurements sample: values of that visit are not yet known at the "
                        f'landmark, so the landmark sees mostly stale values; write "{v:g} days" to include the visit',
                        WARNING,
                    )
                )
    return out


def check_analysis(config: Any) -> list[Problem]:
    """Every problem of ``config`` that needs the data (errors and warnings), with the key that fixes it.

    Parameters
    ----------
    config : AnalysisConfig
        A configuration that passed the file checks (:func:`riskbench.workflow.config.load_config`).

    Returns
    -------
    list of Problem
        Empty when the data agree with the configuration.
    """
    problems: list[Problem] = []
    tables = {
        name: _load(name, getattr(config.sources, name), problems) for name in ("patients", "measurements", "outcomes")
    }
    if any(t.sample is None for t in tables.values()):
        return problems
    for t in tables.values():
        problems += _column_problems(t, config.cohort)
    problems += _static_problems(tables["patients"], config.cohort)
    if any(p.is_error for p in problems):
        return problems
    for name, columns in (
        ("patients", ("entry_date", "birth_date")),
        ("measurements", ("date",)),
        ("outcomes", ("date",)),
    ):
        for column in columns:
            problems += _date_problems(tables[name], column)
    problems += _kind_problems(tables["outcomes"], config.cohort)
    problems += _variable_problems(tables["measurements"], config.cohort)
    problems += _static_value_problems(tables["patients"], config.cohort)
    problems += _unit_problems(tables["measurements"], config.cohort)
    entries = _entry_dates(tables["patients"])  # the patients file read once for the checks below
    problems += _id_problems(entries, (tables["measurements"], tables["outcomes"]))
    problems += _temporal_split_problems(config, entries)
    if any(p.is_error for p in problems):
        return problems
    follow_up = _follow_up(entries, tables["outcomes"], dict(config.cohort.kind_map))
    if follow_up is not None:
        problems += _landmark_problems(config, follow_up)
        problems += _event_problems(config, follow_up, config.sources.outcomes.path)
    visits, _ = _visit_days(entries, tables["measurements"])
    problems += _visit_warnings(config, visits)
    problems += carry_forward_warnings(config, visits)  # entry (day 0) is checked with the file
    return _unique(problems)


def _unique(problems: list[Problem]) -> list[Problem]:
    seen: dict[str, Problem] = {}
    for p in problems:
        seen.setdefault(p.message, p)
    return list(seen.values())
