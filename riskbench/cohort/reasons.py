"""Ledger states: every input row ends in exactly one of these.

The synthetic cohort's messy variant records how many rows it spoiled per code (``defects.json``),
and the cohort stage's ledger must report the same counts, so both sides import the codes from here.
"""

from __future__ import annotations

from enum import StrEnum


class RowState(StrEnum):
    """Final state of one input row (patients, measurements or outcomes table)."""

    USED = "used"
    # --- any table read from CSV (a line that holds no data row)
    BLANK_LINE = "blank_line"  # an empty (or white-space only) line after the header
    WRONG_FIELD_COUNT = "wrong_field_count"  # more or fewer fields than the header names
    # --- any table
    MISSING_REQUIRED = "missing_required_value"  # a required field (id, date, kind, value) is blank
    UNPARSEABLE_DATE = "unparseable_date"
    DATE_WITH_TIME_ZONE = "date_with_time_zone"  # a time-zone suffix (Z, +02:00): refused, never shifted or cut
    IMPLAUSIBLE_DATE = "implausible_date"  # a year before 1900
    FUTURE_DATE = "future_date"  # after the day the cohort is built
    UNKNOWN_PATIENT = "unknown_patient"  # id not in the patients table
    EXACT_DUPLICATE = "exact_duplicate"  # identical to an earlier row; the first copy is kept
    PATIENT_EXCLUDED = "patient_excluded"  # row of a patient excluded for one of the patient reasons
    # --- patients table
    NO_FOLLOW_UP = "no_follow_up"  # no outcome / end-of-follow-up row at all, or zero follow-up
    OUTCOME_BEFORE_ENTRY = "outcome_before_entry"  # first terminal event dated before entry
    UNPARSEABLE_STATIC = "unparseable_static"  # text that is not a number in a numeric static covariate
    IMPLAUSIBLE_STATIC = "implausible_static"  # a static value outside its plausible range (age 0-120, ...)
    UNDECLARED_CODE = "undeclared_code"  # a categorical static's code that its declared codes do not list
    # --- measurements table
    UNPARSEABLE_VALUE = "unparseable_value"
    UNKNOWN_VARIABLE = "unknown_variable"
    UNKNOWN_UNIT = "unknown_unit"  # unit not in the configured conversion table for that variable
    IMPLAUSIBLE_VALUE = "implausible_value"  # outside the configured plausible range (after unit conversion)
    SAME_DAY_MERGED = "same_day_merged"  # extra rows of a conflicting (patient, variable, day) group, merged
    BEFORE_LOOKBACK = "before_lookback"  # dated before entry by more than the look-back window
    AFTER_FOLLOW_UP = "after_follow_up"  # dated after the end of the patient's follow-up
    # --- outcomes table
    LATER_EVENT = "later_event"  # a terminal row after the first one (the first ends follow-up)
    UNKNOWN_KIND = "unknown_kind"


EXCLUDED_STATES: frozenset[RowState] = frozenset(s for s in RowState if s is not RowState.USED)
