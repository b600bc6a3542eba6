"""Contract checks: put every input row in exactly one ledger state and keep the usable rows.

Checks run in a fixed order and a row takes the state of the first check it fails (see ``CHECK_ORDER``).
The results are DuckDB tables:

- ``ledger`` (a view): ``table, row_number, patient_id, state`` for every input row;
- ``pat``: included patients with ``patient_id, entry_ts, end_days, end_status`` and static covariates;
- ``meas``: used measurements, one per patient, variable and time: ``pidx, day, vidx, x`` (integer keys of
  ``pat`` and of the spec's variables; ``x`` in the canonical unit, log-transformed where the spec says so).
"""

from __future__ import annotations

import duckdb
import numpy as np
import pyarrow as pa

from riskbench.cohort.errors import CohortInputError
from riskbench.cohort.reading import LoadedTable, blank, number_expr, quote, timestamp_expr, trimmed_expr
from riskbench.cohort.reasons import RowState as S
from riskbench.cohort.spec import DAYS_PER_YEAR, CohortSpec

# The order in which each table's checks are applied (the flow table follows it).
CHECK_ORDER: dict[str, tuple[S, ...]] = {
    "patients": (S.MISSING_REQUIRED, S.UNPARSEABLE_DATE, S.EXACT_DUPLICATE, S.OUTCOME_BEFORE_ENTRY,
                 S.NO_FOLLOW_UP, S.USED),
    "outcomes": (S.MISSING_REQUIRED, S.UNPARSEABLE_DATE, S.UNKNOWN_KIND, S.UNKNOWN_PATIENT, S.EXACT_DUPLICATE,
                 S.PATIENT_EXCLUDED, S.LATER_EVENT, S.USED),
    "measurements": (S.MISSING_REQUIRED, S.UNPARSEABLE_DATE, S.UNPARSEABLE_VALUE, S.UNKNOWN_VARIABLE,
                     S.UNKNOWN_PATIENT, S.EXACT_DUPLICATE, S.PATIENT_EXCLUDED, S.UNKNOWN_UNIT,
                     S.IMPLAUSIBLE_VALUE, S.BEFORE_LOOKBACK, S.AFTER_FOLLOW_UP, S.SAME_DAY_MERGED, S.USED),
}
KIND_STATUS = {"outcome": 1, "competing": 2, "end_of_follow_up": 0}
# At one date, an outcome outranks a competing event, which outranks a plain end of follow-up.
KIND_RANK = {"outcome": 1, "competing": 2, "end_of_follow_up": 3}
ERROR_ROWS_SHOWN = 10
# A (patient, variable, time) group of measurement rows as one 64-bit hash: grouping on it is much quicker
# than on the three columns. A collision only adds a group that is not crowded; the exact steps that follow
# (window partitions on the real keys) then find nothing to merge or drop in it.
_GROUP_HASH = "hash(k.kidx, c.vidx, m.ts)"


def _sql_str(value: str) -> str:
    return "'" + value.replace("'", "''") + "'"


def _days(ts: str, origin: str) -> str:
    """SQL: days from ``origin`` to ``ts`` (fractional when a time of day is given)."""
    return f"((epoch({ts}) - epoch({origin})) / 86400.0)"


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


def check_patients(con: duckdb.DuckDBPyConnection, loaded: LoadedTable, spec: CohortSpec) -> None:
    """First pass over patients: required fields, dates, exact duplicates, then duplicate ids (an error)."""
    cols = loaded.columns
    birth = timestamp_expr(loaded, "birth_date") if "birth_date" in cols else "NULL::TIMESTAMP"
    birth_bad = "FALSE"
    if "birth_date" in cols:
        birth_bad = f"(NOT {blank('birth_date', None, loaded.types['birth_date'])} AND {birth} IS NULL)"
    con.execute(f"""
        CREATE TEMP TABLE p1 AS SELECT row_number, trim(CAST(patient_id AS VARCHAR)) AS patient_id,
            {timestamp_expr(loaded, 'entry_date')} AS entry_ts, {birth} AS birth_ts, * EXCLUDE (row_number, patient_id),
            CASE WHEN {_first_blank(loaded, ('patient_id', 'entry_date'))} THEN '{S.MISSING_REQUIRED}'
                 WHEN {timestamp_expr(loaded, 'entry_date')} IS NULL OR {birth_bad} THEN '{S.UNPARSEABLE_DATE}'
            END AS state
        FROM raw_patients""")
    _dedupe(con, "p1", tuple(c for c in cols))
    dups = con.execute(f"""
        SELECT patient_id, list(row_number ORDER BY row_number) FROM p1 WHERE state IS NULL
        GROUP BY patient_id HAVING count(*) > 1 ORDER BY min(row_number) LIMIT {ERROR_ROWS_SHOWN}""").fetchall()
    if dups:
        shown = "; ".join(f"{pid!r} at rows {rows}" for pid, rows in dups)
        raise CohortInputError(
            f"{loaded.label}: duplicate patient ids with different contents ({shown}). Each patient must "
            "have exactly one row in the patients table; remove or correct the extra rows.")


def check_outcomes(con: duckdb.DuckDBPyConnection, loaded: LoadedTable, spec: CohortSpec) -> None:
    """Outcome rows: resolve each patient's first terminal event and the patients' follow-up states."""
    kind_map = {k: k for k in KIND_STATUS} | dict(spec.kind_map)
    kind_case = " ".join(f"WHEN {_sql_str(k)} THEN {_sql_str(v)}" for k, v in kind_map.items())
    ts = timestamp_expr(loaded, "date")
    con.execute(f"""
        CREATE TEMP TABLE o1 AS SELECT row_number, trim(CAST(patient_id AS VARCHAR)) AS patient_id,
            {ts} AS ts, CASE trim(CAST(kind AS VARCHAR)) {kind_case} END AS kind_std,
            * EXCLUDE (row_number, patient_id),
            CASE WHEN {_first_blank(loaded, ('patient_id', 'date', 'kind'))} THEN '{S.MISSING_REQUIRED}'
                 WHEN {ts} IS NULL THEN '{S.UNPARSEABLE_DATE}'
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
            SELECT o.row_number, o.patient_id, {_days('o.ts', 'p.entry_ts')} AS end_days,
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


def build_patient_table(con: duckdb.DuckDBPyConnection, loaded: LoadedTable, spec: CohortSpec) -> None:
    """Create ``pat``: the included patients with follow-up and static covariates."""
    cols = loaded.columns
    if "birth_date" in cols:
        age = f"({_days('p.entry_ts', 'p.birth_ts')} / {DAYS_PER_YEAR})"
    elif "age_at_entry" in cols:
        age = number_expr(loaded, "age_at_entry", "p")
    else:
        age = None
    statics = []
    for name in spec.static:
        if name == "sex_male":
            if "sex" not in cols:
                raise CohortInputError(f"{loaded.label}: static covariate 'sex_male' needs a 'sex' column "
                                       f"(F/M); the patients table has {list(cols)}")
            statics.append("CASE upper(trim(CAST(p.sex AS VARCHAR))) WHEN 'M' THEN 1.0 WHEN 'MALE' THEN 1.0 "
                           "WHEN 'F' THEN 0.0 WHEN 'FEMALE' THEN 0.0 END::DOUBLE AS sex_male")
        elif name == "age_at_entry":
            if age is None:
                raise CohortInputError(f"{loaded.label}: static covariate 'age_at_entry' needs a 'birth_date' "
                                       f"or 'age_at_entry' column; the patients table has {list(cols)}")
            statics.append(f"{age} AS age_at_entry")
        else:
            if name not in cols:
                raise CohortInputError(f"{loaded.label}: static covariate {name!r} is not a column of the "
                                       f"patients table (columns: {list(cols)}); map it or drop it from static")
            statics.append(f"{number_expr(loaded, name, 'p')} AS {quote(name)}")
    if spec.current_age and age is None:
        raise CohortInputError(f"{loaded.label}: current age needs a 'birth_date' or 'age_at_entry' column; "
                               "set current_age = false otherwise")
    age_sql = f"{age} AS entry_age_years" if age is not None else "NULL::DOUBLE AS entry_age_years"
    static_sql = "".join(", " + s for s in statics)
    con.execute(f"""
        CREATE TEMP TABLE pat AS SELECT
            CAST(row_number() OVER (ORDER BY p.patient_id) AS INTEGER) AS pidx,
            p.patient_id, p.entry_ts, f.end_days, f.end_status,
            {age_sql}{static_sql}
        FROM p1 p JOIN first_event f USING (patient_id) WHERE p.state = '{S.USED}'""")


def check_measurements(con: duckdb.DuckDBPyConnection, loaded: LoadedTable, spec: CohortSpec) -> None:
    """Measurement rows: parse, convert units, check ranges and windows, merge same-time values.

    The row checks run in one pass; exact duplicates and same-time merges are then settled inside the few
    crowded (patient, variable, time) groups.
    """
    units, canon = [], []
    for i, v in enumerate(spec.variables):
        lo = "NULL" if v.plausible_min is None else repr(v.plausible_min)
        hi = "NULL" if v.plausible_max is None else repr(v.plausible_max)
        canon.append(f"({_sql_str(v.name)}, {i}::SMALLINT, {_sql_str(v.unit)}, {str(v.transform == 'log').upper()})")
        for unit, factor in v.factors.items():
            units.append(f"({i}::SMALLINT, {_sql_str(unit)}, {factor!r}, {lo}::DOUBLE, {hi}::DOUBLE)")
    if not units:
        raise CohortInputError("the cohort spec has no variables; add at least one under [cohort.variables]")
    con.execute(f"CREATE TEMP TABLE var_canon(variable VARCHAR, vidx SMALLINT, unit VARCHAR, is_log BOOLEAN); "
                f"INSERT INTO var_canon VALUES {', '.join(canon)}")
    con.execute(f"CREATE TEMP TABLE units(vidx SMALLINT, unit VARCHAR, factor DOUBLE, lo DOUBLE, hi DOUBLE); "
                f"INSERT INTO units VALUES {', '.join(units)}")
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
    day = _days("m.ts", "k.entry_ts")
    value = "m.raw_value * u.factor"
    # Exact duplicates are settled after this pass (they share patient, variable and time, see below).
    con.execute(f"""
        CREATE TEMP TABLE m2 AS SELECT m.row_number, CASE WHEN k.kidx IS NULL THEN m.patient_id END AS other_id,
            k.pidx, k.kidx, c.vidx, {_GROUP_HASH} AS h, {day} AS day, {value} AS value, c.is_log,
            CASE WHEN m.is_blank THEN '{S.MISSING_REQUIRED}'
                 WHEN m.ts IS NULL THEN '{S.UNPARSEABLE_DATE}'
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
        FROM (SELECT row_number, CAST(t_patient_id AS VARCHAR) AS patient_id, CAST(t_variable AS VARCHAR) AS var,
                     {unit_raw} AS unit_given, {timestamp_expr(loaded, 'date', trimmed='t_date')} AS ts,
                     {number_expr(loaded, 'value', trimmed='t_value')} AS raw_value,
                     {" OR ".join(blank(c, None, loaded.types[c], trimmed=f"t_{c}") for c in required)} AS is_blank
              FROM (SELECT row_number, {trimmed} FROM raw_measurements m)) m
        LEFT JOIN var_canon c ON m.var = c.variable
        LEFT JOIN id_lookup k ON m.patient_id = k.patient_id
        LEFT JOIN units u ON u.vidx = c.vidx AND u.unit = coalesce(m.unit_given, c.unit)""")
    # Identical rows share patient, variable and time, so only rows in crowded (patient, variable, time)
    # groups can be duplicates or need merging: one grouping on integer keys finds them, and the exact
    # comparison of every column runs on those few rows only. The checks before the duplicate check depend
    # only on a row's content, so identical rows that failed them already share that state.
    early = ", ".join(f"'{st}'" for st in CHECK_ORDER["measurements"][:CHECK_ORDER["measurements"].index(
        S.EXACT_DUPLICATE)])
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
    _merge_same_time(con, spec)
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


def _merge_same_time(con: duckdb.DuckDBPyConnection, spec: CohortSpec) -> None:
    """Create ``merged`` (``row_number, pidx, vidx, day, is_log, state, value``): the rows of crowded
    same-time groups resolved; one row per (patient, variable, time) is used, the others merged into it."""
    rule = spec.same_day_rule
    names = {i: v.name for i, v in enumerate(spec.variables)}
    if rule == "error":
        # Only rows of crowded groups can clash.
        clash = con.execute(f"""
            SELECT k.patient_id, m.vidx, m.day, list(m.row_number ORDER BY m.row_number),
                list(m.value ORDER BY m.row_number)
            FROM m2 m SEMI JOIN crowded USING (h) JOIN id_lookup k USING (kidx) WHERE m.state IS NULL
            GROUP BY k.patient_id, m.vidx, m.day
            HAVING min(m.value) <> max(m.value) ORDER BY min(m.row_number) LIMIT {ERROR_ROWS_SHOWN}""").fetchall()
        if clash:
            shown = "; ".join(f"patient {p!r} {names[v]} at day {d:g}: rows {r} values {vals}"
                              for p, v, d, r, vals in clash)
            raise CohortInputError(
                f"measurements: conflicting values of one variable at the same date ({shown}). The cohort "
                "spec says same_day_rule = 'error'; correct the source rows or choose 'mean' or 'last'.")
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
    """Create the view ``ledger`` over the per-table states (computed when read)."""
    con.execute("""
        CREATE TEMP VIEW ledger AS
        SELECT 'patients' AS "table", row_number, patient_id, state FROM p1
        UNION ALL SELECT 'measurements', m.row_number, coalesce(k.patient_id, m.other_id),
                coalesce(m.state, g.state, 'used')
            FROM m2 m LEFT JOIN id_lookup k USING (kidx) LEFT JOIN merged g USING (row_number)
        UNION ALL SELECT 'outcomes', row_number, patient_id, state FROM o1""")
