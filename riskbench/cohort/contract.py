"""Contract checks: put every input row in exactly one ledger state and keep the usable rows.

Checks run in a fixed order and a row takes the state of the first check it fails (see ``CHECK_ORDER``).
The results are DuckDB tables:

- ``ledger`` (a view): ``table, row_number, patient_id, state`` for every input row;
- ``pat``: included patients with ``patient_id, entry_ts, end_days, end_status`` and static covariates;
- ``meas``: used measurements, one per patient, variable and time: ``pidx, day, vidx, x`` (integer keys of
  ``pat`` and of the spec's variables; ``x`` in the canonical unit, log-transformed where the spec says so).
"""

from __future__ import annotations

from datetime import date, timedelta

import duckdb
import numpy as np
import pyarrow as pa

from riskbench.cohort.errors import CohortInputError
from riskbench.cohort.reading import (
    LoadedTable,
    blank,
    days_between,
    number_expr,
    quote,
    sql_text,
    timestamp_expr,
    trimmed_expr,
)
from riskbench.cohort.reasons import RowState as S
from riskbench.cohort.spec import CohortSpec
from riskbench.cohort.statics import STATIC_STATES, static_table

#: States of the lines of a CSV file that hold no row; they come first in every table's flow.
LINE_STATES = (S.BLANK_LINE, S.WRONG_FIELD_COUNT)
#: Date checks of a non-blank date, in order (see :func:`date_checks`).
DATE_STATES = (S.DATE_WITH_TIME_ZONE, S.UNPARSEABLE_DATE, S.IMPLAUSIBLE_DATE, S.FUTURE_DATE)
#: The order in which each table's checks are applied (the flow table follows it).
CHECK_ORDER: dict[str, tuple[S, ...]] = {
    "patients": (
        *LINE_STATES,
        S.MISSING_REQUIRED,
        *DATE_STATES,
        S.EXACT_DUPLICATE,
        *STATIC_STATES,
        S.OUTCOME_BEFORE_ENTRY,
        S.NO_FOLLOW_UP,
        S.USED,
    ),
    "outcomes": (
        *LINE_STATES,
        S.MISSING_REQUIRED,
        *DATE_STATES,
        S.UNKNOWN_KIND,
        S.UNKNOWN_PATIENT,
        S.EXACT_DUPLICATE,
        S.PATIENT_EXCLUDED,
        S.LATER_EVENT,
        S.USED,
    ),
    "measurements": (
        *LINE_STATES,
        S.MISSING_REQUIRED,
        *DATE_STATES,
        S.UNPARSEABLE_VALUE,
        S.UNKNOWN_VARIABLE,
        S.UNKNOWN_PATIENT,
        S.EXACT_DUPLICATE,
        S.PATIENT_EXCLUDED,
        S.UNKNOWN_UNIT,
        S.IMPLAUSIBLE_VALUE,
        S.BEFORE_LOOKBACK,
        S.AFTER_FOLLOW_UP,
        S.SAME_DAY_MERGED,
        S.USED,
    ),
}
#: Dates before this are implausible (a typo such as 0954 for 1954).
EARLIEST_DATE = "1900-01-01"
#: A time of day followed by a time-zone suffix: Z, UTC, GMT or an offset such as +02:00, -0500, +01.
TIME_ZONE_PATTERN = r"\d{1,2}:\d{2}(:\d{2}(\.\d*)?)?\s*([Zz]|UTC|GMT|[+-]\d{2}(:?\d{2})?)$"
KIND_STATUS = {"outcome": 1, "competing": 2, "end_of_follow_up": 0}
# At one date, an outcome outranks a competing event, which outranks a plain end of follow-up.
KIND_RANK = {"outcome": 1, "competing": 2, "end_of_follow_up": 3}
ERROR_ROWS_SHOWN = 10
# A (patient, variable, time) group of measurement rows as one 64-bit hash: grouping on it is much quicker
# than on the three columns. A collision only adds a group that is not crowded; the exact steps that follow
# (window partitions on the real keys) then find nothing to merge or drop in it.
_GROUP_HASH = "hash(k.kidx, c.vidx, m.ts)"


def date_checks(
    loaded: LoadedTable,
    column: str,
    run_day: date,
    alias: str | None = None,
    *,
    trimmed: str | None = None,
    ts: str | None = None,
) -> dict[S, str]:
    """SQL conditions, one per state of :data:`DATE_STATES`, for a date column that is not blank.

    A time-zone suffix is refused (the offset is neither applied nor cut off); a date that does not parse, a
    year before 1900 and a date after ``run_day`` each get their own state. A column typed as a time-zone
    aware timestamp (Parquet, DataFrame) is an error: it has no local dates. ``trimmed`` is the SQL of the
    column as trimmed text and ``ts`` of its parsed timestamp, when a query computed them already.
    """
    kind = loaded.types[column].upper()
    if "WITH TIME ZONE" in kind or kind.startswith("TIMESTAMPTZ"):
        raise CohortInputError(
            f"{loaded.label}: column {column!r} holds time-zone-aware timestamps; riskbench needs local dates "
            "(convert them to the local date of the clinic, or to text without a zone)"
        )
    ts = ts or timestamp_expr(loaded, column, alias, trimmed=trimmed)
    col = f"{alias}.{quote(column)}" if alias else quote(column)
    text = trimmed or f"trim(CAST({col} AS VARCHAR))"
    zone = (
        f"(length({text}) > 10 AND regexp_matches({text}, {sql_text(TIME_ZONE_PATTERN)}))"
        if kind.startswith("VARCHAR")
        else "FALSE"
    )
    next_day = (run_day + timedelta(days=1)).isoformat()
    return {
        S.DATE_WITH_TIME_ZONE: zone,
        S.UNPARSEABLE_DATE: f"{ts} IS NULL",
        S.IMPLAUSIBLE_DATE: f"{ts} < TIMESTAMP '{EARLIEST_DATE}'",
        S.FUTURE_DATE: f"{ts} >= TIMESTAMP '{next_day}'",
    }


def _date_cases(*columns: dict[S, str]) -> str:
    """SQL ``WHEN ... THEN ...`` clauses of the date checks of one or more columns, in check order."""
    return " ".join(f"WHEN {' OR '.join('(' + c[st] + ')' for c in columns)} THEN '{st}'" for st in DATE_STATES)


def _first_blank(loaded: LoadedTable, columns: tuple[str, ...], alias: str | None = None) -> str:
    return " OR ".join(blank(c, alias, loaded.types[c]) for c in columns)


def _dedupe(con: duckdb.DuckDBPyConnection, name: str, columns: tuple[str, ...]) -> None:
    """Mark later copies of identical still-unresolved rows of table ``name`` as exact duplicates."""
    keys = ", ".join(f"CAST({quote(c)} AS VARCHAR)" for c in columns)
    con.execute(f"""
        UPDATE {name} SET state = '{S.EXACT_DUPLICATE}' FROM (
            SELECT row_number AS rn FROM (
                SELECT row_number, row_number() OVER (PARTITION BY {keys} ORDER BY row_number) AS k
                FROM {name} WHERE state IS NULL) WHERE k > 1) d
        WHERE {name}.row_number = d.rn""")


def check_patients(con: duckdb.DuckDBPyConnection, loaded: LoadedTable, spec: CohortSpec, run_day: date) -> None:
    """First pass over patients: required fields, dates, exact duplicates, duplicate ids (an error), then
    the static covariates (:func:`riskbench.cohort.statics.static_table`)."""
    cols = loaded.columns
    birth = timestamp_expr(loaded, "birth_date") if "birth_date" in cols else "NULL::TIMESTAMP"
    checks = [date_checks(loaded, "entry_date", run_day)]
    if "birth_date" in cols:
        given = f"NOT {blank('birth_date', None, loaded.types['birth_date'])}"
        checks.append({st: f"{given} AND {c}" for st, c in date_checks(loaded, "birth_date", run_day).items()})
    con.execute(f"""
        CREATE TEMP TABLE p1 AS SELECT row_number, trim(CAST(patient_id AS VARCHAR)) AS patient_id,
            {timestamp_expr(loaded, "entry_date")} AS entry_ts, {birth} AS birth_ts, * EXCLUDE (row_number, patient_id),
            CASE WHEN {_first_blank(loaded, ("patient_id", "entry_date"))} THEN '{S.MISSING_REQUIRED}'
                 {_date_cases(*checks)}
            END AS state
        FROM raw_patients""")
    _dedupe(con, "p1", tuple(c for c in cols))
    dups = con.execute(f"""
        SELECT list(row_number ORDER BY row_number), count(*) OVER () FROM p1 WHERE state IS NULL
        GROUP BY patient_id HAVING count(*) > 1 ORDER BY min(row_number) LIMIT {ERROR_ROWS_SHOWN}""").fetchall()
    if dups:
        word = loaded.row_word
        shown = "; ".join(f"{word}s {rows}" for rows, _ in dups)
        raise CohortInputError(
            f"{loaded.label}: {dups[0][1]} patient id(s) appear on more than one {word} with different contents "
            f"({shown}). Each patient must have exactly one {word} in the patients table; remove or correct "
            "the extra ones."
        )
    static_table(con, loaded, spec)


def check_outcomes(con: duckdb.DuckDBPyConnection, loaded: LoadedTable, spec: CohortSpec, run_day: date) -> None:
    """Outcome rows: resolve each patient's first terminal event and the patients' follow-up states."""
    kind_map = {k: k for k in KIND_STATUS} | dict(spec.kind_map)
    kind_case = " ".join(f"WHEN {sql_text(k)} THEN {sql_text(v)}" for k, v in kind_map.items())
    ts = timestamp_expr(loaded, "date")
    con.execute(f"""
        CREATE TEMP TABLE o1 AS SELECT row_number, trim(CAST(patient_id AS VARCHAR)) AS patient_id,
            {ts} AS ts, CASE trim(CAST(kind AS VARCHAR)) {kind_case} END AS kind_std,
            * EXCLUDE (row_number, patient_id),
            CASE WHEN {_first_blank(loaded, ("patient_id", "date", "kind"))} THEN '{S.MISSING_REQUIRED}'
                 {_date_cases(date_checks(loaded, "date", run_day))}
                 WHEN (CASE trim(CAST(kind AS VARCHAR)) {kind_case} END) IS NULL THEN '{S.UNKNOWN_KIND}'
                 WHEN trim(CAST(patient_id AS VARCHAR)) NOT IN (SELECT patient_id FROM p1
                      WHERE patient_id IS NOT NULL) THEN '{S.UNKNOWN_PATIENT}'
            END AS state
        FROM raw_outcomes""")
    _dedupe(con, "o1", loaded.columns)
    status_case = " ".join(f"WHEN '{k}' THEN {v}" for k, v in KIND_STATUS.items())
    rank_case = " ".join(f"WHEN '{k}' THEN {v}" for k, v in KIND_RANK.items())
    con.execute(f"""
        CREATE TEMP TABLE first_event AS SELECT * FROM (
            SELECT o.row_number, o.patient_id, {days_between("o.ts", "p.entry_ts")} AS end_days,
                CASE o.kind_std {status_case} END AS end_status,
                row_number() OVER (PARTITION BY o.patient_id
                    ORDER BY o.ts, CASE o.kind_std {rank_case} END, o.row_number) AS k
            FROM o1 o JOIN p1 p ON o.patient_id = p.patient_id AND p.state IS NULL
            WHERE o.state IS NULL) WHERE k = 1""")
    con.execute(f"""
        UPDATE p1 SET state = CASE WHEN f.end_days IS NULL THEN '{S.NO_FOLLOW_UP}'
                                   WHEN f.end_days < 0 THEN '{S.OUTCOME_BEFORE_ENTRY}'
                                   WHEN f.end_days = 0 THEN '{S.NO_FOLLOW_UP}'
                                   ELSE '{S.USED}' END
        FROM (SELECT p.patient_id, f.end_days FROM p1 p LEFT JOIN first_event f USING (patient_id)
              WHERE p.state IS NULL) f
        WHERE p1.patient_id = f.patient_id AND p1.state IS NULL""")
    con.execute(f"""
        UPDATE o1 SET state = CASE WHEN NOT p.ok THEN '{S.PATIENT_EXCLUDED}'
                                   WHEN o1.row_number IN (SELECT row_number FROM first_event) THEN '{S.USED}'
                                   ELSE '{S.LATER_EVENT}' END
        FROM (SELECT patient_id, bool_or(state = '{S.USED}') AS ok FROM p1 GROUP BY patient_id) p
        WHERE o1.patient_id = p.patient_id AND o1.state IS NULL""")


def build_patient_table(con: duckdb.DuckDBPyConnection, spec: CohortSpec) -> None:
    """Create ``pat``: the included patients with follow-up, age at entry and static covariates."""
    static_sql = "".join(f", s.{quote(c)}" for c in spec.static_columns)
    con.execute(f"""
        CREATE TEMP TABLE pat AS SELECT
            CAST(row_number() OVER (ORDER BY p.patient_id) AS INTEGER) AS pidx,
            p.patient_id, p.entry_ts, f.end_days, f.end_status, s.entry_age_years{static_sql}
        FROM p1 p JOIN first_event f USING (patient_id) JOIN p_static s ON s.row_number = p.row_number
        WHERE p.state = '{S.USED}'""")


def check_measurements(con: duckdb.DuckDBPyConnection, loaded: LoadedTable, spec: CohortSpec, run_day: date) -> None:
    """Measurement rows: parse, convert units, check ranges and windows, merge same-time values.

    The row checks run in one pass; exact duplicates and same-time merges are then settled inside the few
    crowded (patient, variable, time) groups.
    """
    units, canon = [], []
    for i, v in enumerate(spec.variables):
        lo = "NULL" if v.plausible_min is None else repr(v.plausible_min)
        hi = "NULL" if v.plausible_max is None else repr(v.plausible_max)
        canon.append(f"({sql_text(v.name)}, {i}::SMALLINT, {sql_text(v.unit)}, {str(v.transform == 'log').upper()})")
        for unit, factor in v.factors.items():
            units.append(f"({i}::SMALLINT, {sql_text(unit)}, {factor!r}, {lo}::DOUBLE, {hi}::DOUBLE)")
    if not units:
        raise CohortInputError("the cohort spec has no variables; add at least one under [cohort.variables]")
    con.execute(
        f"CREATE TEMP TABLE var_canon(variable VARCHAR, vidx SMALLINT, unit VARCHAR, is_log BOOLEAN); "
        f"INSERT INTO var_canon VALUES {', '.join(canon)}"
    )
    con.execute(
        f"CREATE TEMP TABLE units(vidx SMALLINT, unit VARCHAR, factor DOUBLE, lo DOUBLE, hi DOUBLE); "
        f"INSERT INTO units VALUES {', '.join(units)}"
    )
    # One join on the text id gives both "known id" and the included patient's key and window.
    con.execute("""CREATE TEMP TABLE id_lookup AS SELECT k.patient_id, k.kidx, p.pidx, p.entry_ts, p.end_days
                   FROM (SELECT patient_id, CAST(row_number() OVER () AS INTEGER) AS kidx
                         FROM (SELECT DISTINCT patient_id FROM p1 WHERE patient_id IS NOT NULL)) k
                   LEFT JOIN pat p USING (patient_id)""")
    # Each text column is trimmed once, in the innermost query, and its parsed forms are built on that.
    required = ("patient_id", "date", "variable", "value")
    texts = required + (("unit",) if "unit" in loaded.columns else ())
    trimmed = ", ".join(f"{trimmed_expr(loaded, c, 'm')} AS t_{c}" for c in texts)
    unit_raw = "nullif(CAST(t_unit AS VARCHAR), '')" if "unit" in loaded.columns else "NULL"
    day = days_between("m.ts", "k.entry_ts")
    value = "m.raw_value * u.factor"
    # Exact duplicates are settled after this pass (they share patient, variable and time, see below).
    con.execute(f"""
        CREATE TEMP TABLE m2 AS SELECT m.row_number, CASE WHEN k.kidx IS NULL THEN m.patient_id END AS other_id,
            k.pidx, k.kidx, c.vidx, {_GROUP_HASH} AS h, {day} AS day, {value} AS value, c.is_log,
            CASE WHEN m.is_blank THEN '{S.MISSING_REQUIRED}'
                 {_date_cases(date_checks(loaded, "date", run_day, trimmed="m.t_date", ts="m.ts"))}
                 WHEN m.raw_value IS NULL THEN '{S.UNPARSEABLE_VALUE}'
                 WHEN c.vidx IS NULL THEN '{S.UNKNOWN_VARIABLE}'
                 WHEN k.patient_id IS NULL THEN '{S.UNKNOWN_PATIENT}'
                 WHEN k.pidx IS NULL THEN '{S.PATIENT_EXCLUDED}'
                 WHEN u.factor IS NULL THEN '{S.UNKNOWN_UNIT}'
                 WHEN (u.lo IS NOT NULL AND {value} < u.lo) OR (u.hi IS NOT NULL AND {value} > u.hi)
                   OR (c.is_log AND {value} <= 0) THEN '{S.IMPLAUSIBLE_VALUE}'
                 WHEN {day} < -{spec.lookback_days!r} THEN '{S.BEFORE_LOOKBACK}'
                 WHEN {day} > k.end_days THEN '{S.AFTER_FOLLOW_UP}'
            END AS state
        FROM (SELECT row_number, t_date, CAST(t_patient_id AS VARCHAR) AS patient_id,
                     CAST(t_variable AS VARCHAR) AS var,
                     {unit_raw} AS unit_given, {timestamp_expr(loaded, "date", trimmed="t_date")} AS ts,
                     {number_expr(loaded, "value", trimmed="t_value")} AS raw_value,
                     {" OR ".join(blank(c, None, loaded.types[c], trimmed=f"t_{c}") for c in required)} AS is_blank
              FROM (SELECT row_number, {trimmed} FROM raw_measurements m)) m
        LEFT JOIN var_canon c ON m.var = c.variable
        LEFT JOIN id_lookup k ON m.patient_id = k.patient_id
        LEFT JOIN units u ON u.vidx = c.vidx AND u.unit = coalesce(m.unit_given, c.unit)""")
    # Identical rows share patient, variable and time, so only rows in crowded (patient, variable, time)
    # groups can be duplicates or need merging: one grouping on integer keys finds them, and the exact
    # comparison of every column runs on those few rows only. The checks before the duplicate check depend
    # only on a row's content, so identical rows that failed them already share that state.
    early = ", ".join(
        f"'{st}'" for st in CHECK_ORDER["measurements"][: CHECK_ORDER["measurements"].index(S.EXACT_DUPLICATE)]
    )
    _find_crowded(con, f"state IS NULL OR state NOT IN ({early})")
    same = ", ".join(quote(c) for c in loaded.columns)
    con.execute(f"""
        UPDATE m2 SET state = '{S.EXACT_DUPLICATE}' WHERE row_number IN (
            SELECT row_number FROM (
                SELECT row_number, row_number() OVER (PARTITION BY {same} ORDER BY row_number) AS copy
                FROM raw_measurements WHERE row_number IN (
                    SELECT row_number FROM m2 SEMI JOIN crowded USING (h)
                    WHERE state IS NULL OR state NOT IN ({early})))
            WHERE copy > 1)""")
    _merge_same_time(con, spec, loaded)
    con.execute(f"""
        CREATE TEMP TABLE meas AS SELECT pidx, day, vidx, CASE WHEN is_log THEN ln(value) ELSE value END AS x
        FROM (SELECT pidx, day, vidx, is_log, value FROM m2 ANTI JOIN crowded USING (h) WHERE state IS NULL
              UNION ALL SELECT pidx, day, vidx, is_log, value FROM merged WHERE state = '{S.USED}')""")


def _find_crowded(con: duckdb.DuckDBPyConnection, candidates: str) -> None:
    """Create ``crowded`` (``h``): the group hashes shared by more than one ``m2`` row where ``candidates``.

    Nearly every group has one row, so a hash aggregate would build a table as large as the input; sorting
    the hashes (in parallel, in DuckDB) and comparing neighbours is about twice as quick.
    """
    hashes = con.sql(f"SELECT h FROM m2 WHERE {candidates} ORDER BY h").to_arrow_table().column("h").to_numpy()
    repeated = np.unique(hashes[1:][hashes[1:] == hashes[:-1]])
    con.register("crowded_hashes", pa.table({"h": pa.array(repeated, type=pa.uint64())}))
    con.execute("CREATE TEMP TABLE crowded AS SELECT h FROM crowded_hashes")
    con.unregister("crowded_hashes")


def _merge_same_time(con: duckdb.DuckDBPyConnection, spec: CohortSpec, loaded: LoadedTable) -> None:
    """Create ``merged`` (``row_number, pidx, vidx, day, is_log, state, value``): the rows of crowded
    same-time groups resolved; one row per (patient, variable, time) is used, the others merged into it."""
    rule = spec.same_day_rule
    names = {i: v.name for i, v in enumerate(spec.variables)}
    if rule == "error":
        # Only rows of crowded groups can clash.
        clash = con.execute(f"""
            SELECT m.vidx, list(m.row_number ORDER BY m.row_number), count(*) OVER ()
            FROM m2 m SEMI JOIN crowded USING (h) WHERE m.state IS NULL
            GROUP BY m.pidx, m.vidx, m.day
            HAVING min(m.value) <> max(m.value) ORDER BY min(m.row_number) LIMIT {ERROR_ROWS_SHOWN}""").fetchall()
        if clash:
            word = loaded.row_word
            shown = "; ".join(f"{names[v]} on {word}s {r}" for v, r, _ in clash)
            raise CohortInputError(
                f"{loaded.label}: {clash[0][2]} group(s) of {word}s give one patient different values of one "
                f"variable at the same time ({shown}). The cohort spec says same_day_rule = 'error'; correct "
                "those rows or choose 'mean' or 'last'."
            )
    keep = "k_first = n" if rule == "last" else "k_first = 1"
    merged = "avg(value) OVER g" if rule == "mean" else "value"
    # Only the few crowded (patient, variable, time) groups need a window; every other row is used as it is.
    con.execute(f"""
        CREATE TEMP TABLE merged AS SELECT row_number, pidx, vidx, day, is_log,
            CASE WHEN {keep} THEN '{S.USED}' ELSE '{S.SAME_DAY_MERGED}' END AS state, value_m AS value FROM (
            SELECT m.*, {merged} AS value_m,
                row_number() OVER (g ORDER BY row_number) AS k_first, count(*) OVER g AS n
            FROM m2 m SEMI JOIN crowded USING (h) WHERE m.state IS NULL
            WINDOW g AS (PARTITION BY m.pidx, m.vidx, m.day))""")


def build_ledger(con: duckdb.DuckDBPyConnection) -> None:
    """Create the view ``ledger`` over the per-table states (computed when read), including the lines of
    CSV files that hold no row (``lines_<table>``, no patient id)."""
    con.execute("""
        CREATE TEMP VIEW ledger AS
        SELECT 'patients' AS "table", row_number, patient_id, state FROM p1
        UNION ALL SELECT 'measurements', m.row_number, coalesce(k.patient_id, m.other_id),
                coalesce(m.state, g.state, 'used')
            FROM m2 m LEFT JOIN id_lookup k USING (kidx) LEFT JOIN merged g USING (row_number)
        UNION ALL SELECT 'outcomes', row_number, patient_id, state FROM o1
        UNION ALL SELECT 'patients', row_number, NULL, state FROM lines_patients
        UNION ALL SELECT 'measurements', row_number, NULL, state FROM lines_measurements
        UNION ALL SELECT 'outcomes', row_number, NULL, state FROM lines_outcomes""")
