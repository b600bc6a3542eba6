"""Static covariates of the patients table: parsed, checked against their plausible range or declared codes.

A patient row whose static value cannot be used is not silently given a missing value: text in a numeric
static is ``unparseable_static``, a value outside the plausible range (an age at entry outside 0-120 years, so
also a birth date after entry; a negative count) is ``implausible_static``, and a code that a categorical
static does not declare is ``undeclared_code``. The patient is then excluded and its other rows become
``patient_excluded``. A blank cell is a missing value, left to the missing-data step.
"""

from __future__ import annotations

import duckdb

from riskbench.cohort.errors import CohortInputError
from riskbench.cohort.reading import LoadedTable, blank, days_between, number_expr, quote, sql_text
from riskbench.cohort.reasons import RowState as S
from riskbench.cohort.spec import DAYS_PER_YEAR, CohortSpec, StaticSpec

#: The static checks in the order they are applied (after the patients' exact duplicates).
STATIC_STATES = (S.UNPARSEABLE_STATIC, S.IMPLAUSIBLE_STATIC, S.UNDECLARED_CODE)


def needs_age(spec: CohortSpec) -> bool:
    """Whether the cohort uses the age at entry (as a static or for the current age)."""
    return spec.current_age or any(s.name == "age_at_entry" for s in spec.static_specs)


def _age_from_birth(spec: CohortSpec) -> bool:
    return spec.static_spec("age_at_entry").column is None


def source_columns(spec: CohortSpec) -> tuple[str, ...]:
    """The patients-table columns (our names) the static covariates read; each must be present.

    The age at entry from ``birth_date`` or an ``age_at_entry`` column is resolved by
    :func:`static_table` (either column will do).
    """
    cols = []
    for s in spec.static_specs:
        if s.name == "age_at_entry" and _age_from_birth(spec):
            continue
        cols.append(s.source_column)
    return tuple(dict.fromkeys(cols))


def _range_sql(value: str, spec: StaticSpec, lower: float | None) -> str:
    """SQL: the (non-NULL) value lies outside the static's plausible range, or a count is not whole."""
    parts = []
    if lower is not None:
        parts.append(f"{value} < {float(lower)!r}")
    if spec.plausible_max is not None:
        parts.append(f"{value} > {float(spec.plausible_max)!r}")
    if spec.kind == "count":
        parts.append(f"{value} <> floor({value})")
    return "(" + " OR ".join(parts) + ")" if parts else "FALSE"


def static_table(con: duckdb.DuckDBPyConnection, loaded: LoadedTable, spec: CohortSpec) -> None:
    """Create ``p_static`` (``row_number, entry_age_years, <static columns>, static_state``) for the rows of
    ``p1`` still unresolved, then put the rows whose statics fail a check in that state."""
    cols = loaded.columns
    unparseable, implausible, undeclared, outputs = [], [], [], []
    age_spec = spec.static_spec("age_at_entry")
    age = "NULL::DOUBLE"
    if needs_age(spec):
        if not _age_from_birth(spec):
            age_col = age_spec.source_column
        elif "birth_date" in cols:
            age_col = None
        elif "age_at_entry" in cols:
            age_col = "age_at_entry"
        else:
            raise CohortInputError(
                f"{loaded.label}: the age at entry (static 'age_at_entry' or current_age = true) needs a "
                f"'birth_date' or 'age_at_entry' column; the file's columns are {sorted(loaded.file_columns)}. "
                "Map one in [sources.patients] columns, or set current_age = false and drop age_at_entry"
            )
        if age_col is None:
            age = f"({days_between('p.entry_ts', 'p.birth_ts')} / {DAYS_PER_YEAR})"
        else:
            age = number_expr(loaded, age_col, "p")
            unparseable.append(f"(NOT {blank(age_col, 'p', loaded.types[age_col])} AND {age} IS NULL)")
        implausible.append(f"coalesce({_range_sql(age, age_spec, age_spec.lower_bound)}, FALSE)")
    for s in spec.static_specs:
        if s.name == "age_at_entry":
            outputs.append(f"{age} AS age_at_entry")
            continue
        col = s.source_column
        is_blank = blank(col, "p", loaded.types[col])
        if s.kind == "categorical":
            cases = " ".join(
                f"WHEN {sql_text(str(code).strip().upper())} THEN {sql_text(level)}" for code, level in s.codes.items()
            )
            level = f"(CASE upper(trim(CAST(p.{quote(col)} AS VARCHAR))) {cases} END)"
            undeclared.append(f"(NOT {is_blank} AND {level} IS NULL)")
            outputs += [
                f"CASE WHEN {level} IS NULL THEN NULL WHEN {level} = {sql_text(out[len(s.name) + 1 :])} "
                f"THEN 1.0 ELSE 0.0 END::DOUBLE AS {quote(out)}"
                for out in s.output_columns
            ]
        else:
            value = number_expr(loaded, col, "p")
            unparseable.append(f"(NOT {is_blank} AND {value} IS NULL)")
            implausible.append(f"coalesce({_range_sql(value, s, s.lower_bound)}, FALSE)")
            outputs.append(f"{value} AS {quote(s.name)}")
    state = " ".join(
        f"WHEN {' OR '.join(conds)} THEN '{st}'"
        for conds, st in zip((unparseable, implausible, undeclared), STATIC_STATES)
        if conds
    )
    state_sql = f"CASE {state} END" if state else "NULL::VARCHAR"
    con.execute(f"""
        CREATE TEMP TABLE p_static AS SELECT p.row_number, {age} AS entry_age_years,
            {"".join(o + ", " for o in outputs)}{state_sql} AS static_state
        FROM p1 p WHERE p.state IS NULL""")
    con.execute("""UPDATE p1 SET state = s.static_state FROM p_static s
                   WHERE p1.row_number = s.row_number AND s.static_state IS NOT NULL""")
