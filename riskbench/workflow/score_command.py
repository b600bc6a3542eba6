"""``riskbench score-patients``: apply a saved model to new raw tables and write each patient's predicted risk.

The new patients' tables follow the same input contract as a run's (patients, measurements, outcomes; the
outcomes table says until when each patient was followed: an ``end_of_follow_up`` row on the day the data were
extracted is enough). They come from a configuration's ``[sources]`` (``--config``: paths, column names, date
format, encoding; a whole analysis configuration, or a file holding only ``[sources]`` with optional ``[cohort]
kind_map`` and ``[privacy] key_file``) or from a folder holding ``patients``, ``measurements`` and ``outcomes`` as
``.csv`` or ``.parquet`` with our column names (``--data``; without an outcomes table, ``--followed-until`` says
the day every patient was last seen). The rows are built with the MODEL's cohort rules
(:meth:`riskbench.workflow.model_bundle.SavedModel.build_cohort`), never with the configuration's, at the
model's landmarks, at ``--landmarks`` or at one calendar date (``--at-date``); a joint model reads each
patient's marker measurements up to the row's landmark from the same cohort.

The output folder (made like a run folder: a marker file, replaced with ``--overwrite`` only when it carries
the marker) holds ``risks.csv`` -- one row per patient, landmark and horizon with the risk and the per-row
flags; text cells that a spreadsheet would run as a formula are neutralised -- and ``README.txt`` with the
caution, the model and its SHA-256, and what each column means. Patients appear under pseudonyms (HMAC-SHA-256
under the configuration's pseudonym key -- ``[privacy] key_file`` or ``<configuration>.key`` beside it --, or
``--key-file``, or ``<out>.key`` beside the output folder) unless ``--keep-ids`` is given; ids stay on this
machine either way, and no file maps pseudonyms back to ids.
"""

from __future__ import annotations

import argparse
import tempfile
import tomllib
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from riskbench.errors import RiskbenchError
from riskbench.models.landmark import LandmarkSupermodel
from riskbench.report.model_sheet import CAUTION
from riskbench.report.outputs import atomic_write_text, neutralise_csv_table
from riskbench.time_units import parse_duration
from riskbench.workflow.model_bundle import SavedModel, load_model
from riskbench.workflow.run_folder import fresh_output_folder, write_marker
from riskbench.workflow.scoring_rows import FLAG_COLUMNS

__all__ = ["ScoreInputError", "ScoredPatients", "predictable_rows", "register", "score_patients"]

RISKS_FILE = "risks.csv"
README_FILE = "README.txt"
TABLES = ("patients", "measurements", "outcomes")


class ScoreInputError(RiskbenchError):
    """The model, the new tables or the output folder cannot be used as asked (the message says why and how)."""


@dataclass(frozen=True)
class ScoredPatients:
    """What ``score_patients`` wrote: the folder, the risks table (as written) and counts for the terminal."""

    out: Path
    model: str
    risks: pd.DataFrame
    n_patients: int
    n_flagged: int
    n_not_predicted: int


def _table_in(folder: Path, name: str) -> Path | None:
    return next((folder / f"{name}.{ext}" for ext in ("parquet", "csv") if (folder / f"{name}.{ext}").is_file()), None)


def _folder_tables(folder: Path, followed_until: str | None = None) -> tuple[Any, Any, Any]:
    """The three tables of ``--data``; without an outcomes table, ``followed_until`` gives every patient an
    ``end_of_follow_up`` on that date (patients still under surveillance, last seen then)."""
    found: list[Any] = []
    for name in TABLES:
        path = _table_in(folder, name)
        if path is None and name == "outcomes" and followed_until is not None:
            found.append(_open_follow_up(found[0], followed_until))
            continue
        if path is None:
            hint = " (or give --followed-until for patients still under surveillance)" if name == "outcomes" else ""
            raise ScoreInputError(
                f"--data {folder}: no {name}.parquet or {name}.csv there; the folder must hold "
                f"the three tables of the input contract (patients, measurements, outcomes){hint}"
            )
        found.append(path)
    if followed_until is not None and not isinstance(found[2], pd.DataFrame):
        raise ScoreInputError(
            f"--followed-until is for a --data folder without an outcomes table, but {found[2]} "
            "exists; remove the option or the table"
        )
    return found[0], found[1], found[2]


def _open_follow_up(patients: Path, followed_until: str) -> pd.DataFrame:
    """An outcomes table with one ``end_of_follow_up`` row per patient of ``patients`` on ``followed_until``."""
    from riskbench.workflow.scoring_rows import parse_date

    day = parse_date(followed_until).isoformat()
    if patients.suffix == ".parquet":
        ids = pd.read_parquet(patients, columns=["patient_id"])["patient_id"]
    else:
        ids = pd.read_csv(patients, usecols=["patient_id"], dtype=str, keep_default_na=False)["patient_id"]
    ids = ids[ids.astype(str).str.strip() != ""].drop_duplicates()
    return pd.DataFrame({"patient_id": ids.to_numpy(), "date": day, "kind": "end_of_follow_up"})


def new_tables(
    config_path: str | Path | None, data: str | Path | None, followed_until: str | None = None
) -> tuple[tuple[Any, Any, Any], dict[str, Any], Path | None]:
    """The three sources of the patients to score, the reading keys, and the pseudonym key file of the
    configuration (None with ``--data``).

    ``config_path`` may be a whole analysis configuration (checked as ``run-analysis`` checks it) or a file
    holding only ``[sources]`` (with optional ``[cohort] kind_map`` and ``[privacy] key_file``).
    """
    if (config_path is None) == (data is None):
        raise ScoreInputError(
            "give the new patients' tables with --config (a configuration whose [sources] name "
            "them) or --data (a folder with patients, measurements and outcomes)"
        )
    if data is not None:
        return _folder_tables(Path(data), followed_until), {}, None
    if followed_until is not None:
        raise ScoreInputError(
            "--followed-until goes with --data (a folder without an outcomes table); with "
            "--config, give the outcomes table in [sources]"
        )
    assert config_path is not None
    path = Path(config_path)
    try:
        raw = tomllib.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError) as exc:
        raise ScoreInputError(f"cannot read the configuration {path}: {exc}") from None
    if "models" in raw:  # a whole analysis: every key checked, previous-release keys converted
        from riskbench.workflow.config import load_config
        from riskbench.workflow.pseudonyms import key_file_of

        config = load_config(path)
        src = config.sources
        return (
            (src.patients, src.measurements, src.outcomes),
            {"kind_map": dict(config.cohort.kind_map)},
            key_file_of(config),
        )
    if not isinstance(raw.get("sources"), dict):
        raise ScoreInputError(
            f"{path} has no [sources] section naming the patients, measurements and outcomes "
            "tables of the patients to score"
        )
    from riskbench.cohort.config_schema import read_sources

    base = path.resolve().parent
    src = read_sources(raw["sources"], base)
    kind_map = dict((raw.get("cohort") or {}).get("kind_map") or {})
    key = (raw.get("privacy") or {}).get("key_file") or f"{path.stem}.key"
    return (
        (src.patients, src.measurements, src.outcomes),
        {"kind_map": kind_map} if kind_map else {},
        (base / key).resolve(),
    )


def predictable_rows(saved: SavedModel, rows: pd.DataFrame) -> np.ndarray:
    """Why each row cannot be predicted (empty text: it can).

    A landmark super-model with one baseline per landmark predicts only at its fitted landmarks, one with a
    smooth baseline only inside the range of its fitted landmarks (it would extrapolate outside); a model
    without a missing-data method, or with complete cases, needs every covariate (a joint model every one but
    its marker, which it reads from the patient's measurement history).
    """
    landmarks = rows["landmark"].to_numpy(float)
    why = np.full(len(rows), "", dtype=object)
    part = saved.parts[0]
    if isinstance(part, LandmarkSupermodel):
        fitted = np.asarray(part.landmarks_, float)
        if part.baseline == "stratified":
            off = ~np.isclose(landmarks[:, None], fitted[None, :]).any(axis=1)
            text = f"the model predicts only at its fitted landmarks ({', '.join(f'{s:g}' for s in fitted)} days)"
        else:
            off = (landmarks < fitted.min() - 1e-9) | (landmarks > fitted.max() + 1e-9)
            text = f"outside the model's landmark range {fitted.min():g} to {fitted.max():g} days"
        why[off] = text
    method = None if saved.missing_data is None else saved.missing_data.get("method")
    if method in (None, "complete_cases"):
        missing = rows[list(saved.required_covariates)].isna().any(axis=1).to_numpy()
        why[missing & (why == "")] = "a covariate is missing and the model uses complete cases only"
    return why


def _pseudonyms(ids: pd.Series, key_file: Path, out: Path) -> pd.Series:
    from riskbench.workflow.pseudonyms import load_or_create_key, pseudonym_map

    mapping = pseudonym_map(ids, load_or_create_key(key_file, run_dir=out))
    return ids.map(lambda v: mapping.get(str(v)))


def _readme(saved: SavedModel, keep_ids: bool, at_date: Any, horizons: Sequence[float], n_rows: int) -> str:
    from riskbench.models.forest_io import file_sha256

    bundle = saved.bundle_path
    who = (
        "patient_id: the identifiers of your source tables. This file identifies patients: keep it on this "
        "machine and within your data-protection rules; riskbench sent nothing elsewhere."
        if keep_ids
        else "patient: run pseudonyms (keyed HMAC-SHA-256 of the source id). Nothing maps them back to ids; with the "
        "key file the same ids give the same pseudonyms again. The source ids stayed on this machine."
    )
    when = (
        f"prediction_date: the date of the prediction ({at_date}); landmark_days: days from entry to it."
        if at_date is not None
        else "landmark_days: the landmark s, days since the patient's entry."
    )
    lines = [
        "Predicted risks from a saved riskbench model",
        "",
        "CAUTION: " + CAUTION,
        "",
        f"Model: {saved.name} (family {saved.family}); bundle {bundle.name if bundle else '?'} "
        f"SHA-256 {file_sha256(bundle) if bundle else '?'}.",
        "The rows were built from the new raw tables with the model's own cohort rules (see its model sheet).",
        f"{n_rows} rows; horizons {', '.join(f'{h:g}' for h in horizons)} days.",
        "",
        "Columns of risks.csv:",
        who,
        when,
        "horizon_days: the prediction window h, days.",
        "risk: the predicted probability of the outcome in (s, s + h]; empty when the row could not be predicted.",
        "outside_development_range: covariates whose value lies outside what the model saw in development "
        "(extrapolation: read the risk with care).",
        "older_than_carry_forward: variables whose last value is older than the carry-forward limit, so the "
        "covariate is missing at s.",
        "missing_covariates: covariates with no value at s (filled by the model's missing-data method, if any).",
        "not_predicted: why the row has no risk (empty when it has one).",
        "",
        "Text cells that a spreadsheet could run as a formula start with a single quote.",
    ]
    return "\n".join(lines) + "\n"


def score_patients(
    model_path: str | Path,
    out: str | Path,
    *,
    config: str | Path | None = None,
    data: str | Path | None = None,
    landmarks: Sequence[str] | None = None,
    at_date: str | None = None,
    horizons: Sequence[str] | None = None,
    keep_ids: bool = False,
    key_file: str | Path | None = None,
    overwrite: bool = False,
    followed_until: str | None = None,
) -> ScoredPatients:
    """Score the patients of new raw tables with a saved model into the folder ``out`` (module docstring).

    ``landmarks`` and ``horizons`` are durations with units (``"1 year"``); ``at_date`` a date ``YYYY-MM-DD``;
    ``followed_until`` (with ``data`` lacking an outcomes table) the date every patient was last seen.

    Raises
    ------
    RiskbenchError
        The model cannot be loaded, the tables cannot be read, an option is not understood, or ``out`` exists
        and is not an output riskbench made.
    """
    saved = load_model(model_path)
    if landmarks and at_date:
        raise ScoreInputError("give either --landmarks or --at-date, not both")
    sources, reading, config_key_file = new_tables(config, data, followed_until)
    out = Path(out)
    marks = None if not landmarks else [parse_duration(t) for t in landmarks]
    hs = [saved.prediction_window_days] if not horizons else [parse_duration(t) for t in horizons]
    fresh_output_folder(out, overwrite, "the output of score-patients")
    with tempfile.TemporaryDirectory(prefix=".score-", dir=out) as temp:
        cohort = saved.build_cohort(*sources, temp_folder=temp, **reading)
        rows = saved.rows_of(cohort, landmarks_days=marks, at_date=at_date)
        history = saved.marker_history(cohort)  # a joint model's measurements up to each landmark
    if rows.empty:
        raise ScoreInputError(
            "no patient of the new tables is under follow-up at the requested landmarks or date "
            "(follow-up ends with the last outcomes row; add an end_of_follow_up row on the day "
            "the data were extracted)"
        )
    why = predictable_rows(saved, rows)
    ok = why == ""
    table = saved.predict(rows[ok].reset_index(drop=True), horizons_days=hs, marker_history=history)
    table["not_predicted"] = ""
    if not ok.all():
        skipped = _unpredicted(saved, rows[~ok], hs)
        skipped["not_predicted"] = np.tile(why[~ok], len(hs))
        table = pd.concat([table, skipped], ignore_index=True)
    n_patients = int(table["patient_id"].nunique())
    if not keep_ids:
        key = Path(key_file) if key_file is not None else config_key_file or out.parent / f"{out.name}.key"
        table["patient_id"] = _pseudonyms(table["patient_id"], key, out)
        table = table.rename(columns={"patient_id": "patient"})
    table = table.sort_values([table.columns[0], "landmark", "horizon_days"], kind="stable", ignore_index=True)
    table = table.rename(columns={"landmark": "landmark_days"})
    text = neutralise_csv_table(table).to_csv(index=False, lineterminator="\n")
    atomic_write_text(out / RISKS_FILE, text)
    atomic_write_text(out / README_FILE, _readme(saved, keep_ids, at_date, hs, len(table)))
    write_marker(out, "complete")
    flagged = (table[list(FLAG_COLUMNS[:2])] != "").any(axis=1)
    return ScoredPatients(
        out=out,
        model=saved.name,
        risks=table,
        n_patients=n_patients,
        n_flagged=int(flagged.sum()),
        n_not_predicted=int(table["risk"].isna().sum()),
    )


def _unpredicted(saved: SavedModel, rows: pd.DataFrame, horizons: Sequence[float]) -> pd.DataFrame:
    """Rows the model cannot predict: their flags, no risk."""
    keep = [c for c in ("patient_id", "landmark", "prediction_date") if c in rows.columns]
    base = pd.concat([rows[keep].reset_index(drop=True), saved.flags(rows).reset_index(drop=True)], axis=1)
    frames = []
    for h in horizons:
        part = base.copy()
        part.insert(len(keep), "horizon_days", float(h))
        part.insert(len(keep) + 1, "risk", np.nan)
        frames.append(part)
    return pd.concat(frames, ignore_index=True)


def _score(args: argparse.Namespace) -> int:
    result = score_patients(
        args.model,
        args.out,
        config=args.config,
        data=args.data,
        landmarks=args.landmarks,
        at_date=args.at_date,
        horizons=args.horizons,
        keep_ids=args.keep_ids,
        key_file=args.key_file,
        overwrite=args.overwrite,
        followed_until=args.followed_until,
    )
    print(
        f"scored {result.n_patients} patients ({len(result.risks)} rows) with model {result.model!r}; rows "
        f"flagged: {result.n_flagged}; rows without a risk: {result.n_not_predicted}"
    )
    print("research software, not a medical device: read README.txt before using the risks")
    print(result.out / RISKS_FILE)
    return 0


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add ``score-patients`` to the ``riskbench`` parser."""
    sub = subparsers.add_parser(
        "score-patients",
        help="apply a saved model to new patients' raw tables and write each patient's predicted risk",
        description=(
            "Build the new patients' rows with the saved model's own cohort rules and write risks.csv (risk per "
            "patient, landmark or prediction date, and horizon, with flags for values outside the development "
            "range or older than the carry-forward limit) and README.txt into OUT. Patients appear under "
            "pseudonyms unless --keep-ids; ids never leave this machine."
        ),
    )
    sub.add_argument("model", help="a saved model: models/<name>.bundle.json of a run (or the model file beside it)")
    sub.add_argument("--out", required=True, help="output folder to create")
    sub.add_argument(
        "--config",
        help="configuration whose [sources] name the new patients' tables (a whole analysis "
        "configuration or only [sources])",
    )
    sub.add_argument("--data", help="folder with patients, measurements and outcomes (.csv or .parquet)")
    sub.add_argument(
        "--landmarks",
        nargs="+",
        metavar="DURATION",
        help='landmarks since entry, e.g. "0 years" "1 year" (default: the model\'s landmarks)',
    )
    sub.add_argument(
        "--followed-until",
        metavar="YYYY-MM-DD",
        help="with --data and no outcomes table: every patient is under surveillance, last seen then",
    )
    sub.add_argument("--at-date", metavar="YYYY-MM-DD", help="predict at this calendar date instead of landmarks")
    sub.add_argument(
        "--horizons",
        nargs="+",
        metavar="DURATION",
        help='prediction horizons, e.g. "1 year" "2 years" (default: the model\'s window)',
    )
    sub.add_argument(
        "--keep-ids",
        action="store_true",
        help="write the source patient ids instead of pseudonyms (the file then stays on this machine)",
    )
    sub.add_argument("--key-file", help="pseudonym key file (default: the configuration's, or OUT.key beside OUT)")
    sub.add_argument("--overwrite", action="store_true", help="replace OUT if an earlier score-patients made it")
    sub.set_defaults(handler=_score)
