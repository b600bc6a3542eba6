"""A fitted model that leaves the run: its files, its bundle description, and loading it back to predict.

Layout (inside a run folder, ``models/``; ``<stem>`` is :func:`riskbench.report.outputs.safe_file_stem` of the
model's name):

``<stem>.json``
    The fitted model (``CoxModel`` / ``LandmarkSupermodel`` / ``SharedTrajectoryModel`` ``to_json``; a joint
    model's file holds no measurement, :mod:`riskbench.models.joint_io`). A forest is ``<stem>.joblib`` with
    its ``.sha256`` beside it (:mod:`riskbench.models.forest_io`). A model fitted on multiply imputed data
    consists of m fitted models: ``<stem>.json`` and ``<stem>.part2.json`` ... ``<stem>.part<m>.json``; its
    risk is the mean of the m models' risks, as in the run.
``<stem>.imputer.joblib``
    Multiple imputation only: the chained-equations imputer for rows to predict
    (:class:`riskbench.models.imputation.PredictionImputer`, fitted on the development covariates; it keeps
    regression coefficients, not rows). Loaded only after its SHA-256 matches the bundle.
``<stem>.bundle.json``
    What is needed to use the model elsewhere (format ``riskbench.model_bundle``): ``name``, ``family``,
    ``covariates``; ``parts`` (file name, kind, SHA-256 of each model file); ``missing_data`` (method, the
    medians and indicator columns of the missing-indicator method, the imputer file); ``cohort_rules`` (the
    :class:`~riskbench.cohort.spec.CohortSpec` as plain values: variables with units, conversions, ranges,
    transforms and derived features, carry-forward and look-back in days, statics with codes and ranges);
    ``landmarks_days``, ``prediction_window_days``, ``horizons_days``; ``development_ranges`` (per covariate
    the smallest and largest value seen in development, and the values of a 0/1 covariate); the caution.
``<stem>.md``
    The model sheet (:mod:`riskbench.report.model_sheet`): the full equation and a worked example.

:func:`load_model` reads a bundle (or the model file beside it), checks every part's SHA-256 against the
bundle (and, inside a run folder, the bundle's own SHA-256 against ``manifest.json``) before anything is loaded,
and returns a :class:`SavedModel`. A changed, missing or foreign file is a
:class:`~riskbench.models.risk_contract.ModelInputError` naming the file and what to do.

``SavedModel.model`` answers ``predict_risk(table, horizon)`` exactly as the run's fitted model did.
``SavedModel.build_tables(sources)`` applies the model's own cohort rules to new raw tables (same input
contract) and gives one row per patient and landmark with the covariates as known at that landmark;
``SavedModel.predict(...)`` gives the risks with per-row flags (a covariate outside the development range, a
value older than the carry-forward limit, a covariate missing). A joint model
(``shared_trajectory_joint``) predicts from each patient's own marker measurements up to the landmark: ``predict``
reads them from the new tables' counting-process rows (:meth:`SavedModel.marker_history`), built with the same
rules.
"""

from __future__ import annotations

import dataclasses
import json
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import joblib
import numpy as np
import pandas as pd
from sklearn.base import clone

from riskbench.cohort import Cohort
from riskbench.cohort.spec import CohortSpec, StaticSpec, VariableSpec
from riskbench.models.cox_model import CoxModel
from riskbench.models.forest import SurvivalForest
from riskbench.models.forest_io import ModelIntegrityError, file_sha256, load_forest, save_forest
from riskbench.models.imputation import PredictionImputer, imputation_seeds
from riskbench.models.joint_family import SharedTrajectoryModel
from riskbench.models.landmark import LandmarkSupermodel
from riskbench.models.missing_data import MissingDataModel
from riskbench.models.model_file import package_versions
from riskbench.models.risk_contract import ModelInputError, covariate_values
from riskbench.report.model_sheet import CAUTION, write_model_sheet
from riskbench.report.outputs import atomic_write_text, safe_file_stem
from riskbench.validation.apparent_importance import forest_importance

__all__ = [
    "BUNDLE_FORMAT",
    "CAUTION",
    "MODELS",
    "SavedModel",
    "bundle_path_of",
    "cohort_rules_of",
    "development_ranges",
    "load_model",
    "save_run_model",
]

BUNDLE_FORMAT = "riskbench.model_bundle"
BUNDLE_VERSION = 1
#: The folder of a run that holds the saved models.
MODELS = "models"
BUNDLE_SUFFIX = ".bundle.json"

#: The part kinds a bundle can hold, with the model class each one loads.
_KINDS: dict[str, Any] = {
    "cox": CoxModel,
    "landmark": LandmarkSupermodel,
    "forest": SurvivalForest,
    "joint": SharedTrajectoryModel,
}
_PART = re.compile(r"\.part\d+$")


# --------------------------------------------------------------------------------------------------
# plain values of the cohort rules and of the development data


def cohort_rules_of(spec: CohortSpec) -> dict[str, Any]:
    """The cohort rules of ``spec`` as JSON-ready values (durations in days)."""
    return _plain(dataclasses.asdict(spec))


def _plain(value: Any) -> Any:
    if isinstance(value, Mapping):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if isinstance(value, np.generic):
        return value.item()
    return value


def cohort_spec_from_rules(rules: Mapping[str, Any]) -> CohortSpec:
    """The :class:`CohortSpec` of plain cohort rules written by :func:`cohort_rules_of`.

    Raises
    ------
    ModelInputError
        If the rules do not describe a cohort (a foreign or damaged bundle).
    """
    try:
        values = dict(rules)
        values["variables"] = tuple(VariableSpec(**v) for v in values.get("variables", ()))
        values["statics"] = tuple(StaticSpec(**s) for s in values.get("statics", ()))
        for key in ("static", "exam_variables"):
            values[key] = tuple(values.get(key, ()))
        return CohortSpec(**values)
    except (TypeError, ValueError) as exc:
        raise ModelInputError(
            f"the bundle's cohort_rules do not describe a cohort ({exc}); save the model again from its run."
        ) from None


def development_ranges(table: pd.DataFrame, covariates: Sequence[str]) -> dict[str, dict[str, Any]]:
    """Per covariate the smallest and largest value in the development rows (and the values of a 0/1 one).

    Returns
    -------
    dict
        ``{covariate: {"min": float, "max": float[, "values": [0.0, 1.0]]}}``; a covariate with no observed
        value gets ``None`` for both.
    """
    x = covariate_values(table, list(covariates), what="development table", allow_missing=True)
    out: dict[str, dict[str, Any]] = {}
    for j, name in enumerate(covariates):
        seen = x[:, j][np.isfinite(x[:, j])]
        if seen.size == 0:
            out[name] = {"min": None, "max": None}
            continue
        entry: dict[str, Any] = {"min": float(seen.min()), "max": float(seen.max())}
        distinct = np.unique(seen)
        if distinct.size <= 2 and np.isin(distinct, (0.0, 1.0)).all():
            entry["values"] = [float(v) for v in distinct]
        out[name] = entry
    return out


# --------------------------------------------------------------------------------------------------
# saving


def _kind(model: Any) -> str:
    for kind, cls in _KINDS.items():
        if isinstance(model, cls):
            return kind
    raise ModelInputError(
        f"a model of class {type(model).__name__} cannot be saved as a run model yet; riskbench "
        f"saves {', '.join(c.__name__ for c in _KINDS.values())} (optionally with a missing-data "
        "method)."
    )


def _part_name(stem: str, k: int, kind: str) -> str:
    suffix = ".joblib" if kind == "forest" else ".json"
    return f"{stem}{'' if k == 1 else f'.part{k}'}{suffix}"


def _save_part(model: Any, path: Path, kind: str) -> str:
    if kind == "forest":
        return save_forest(model, path)
    model.to_json(path)
    return file_sha256(path)


def _missing_data_doc(model: MissingDataModel, folder: Path, stem: str) -> dict[str, Any]:
    doc: dict[str, Any] = {
        "method": model.method,
        "imputations": int(model.imputations),
        "max_iterations": int(model.max_iterations),
        "random_state": int(model.random_state),
        "fitted_once": bool(model.fitted_once_),
        "indicator_columns": list(model.indicator_columns_),
        "medians": dict(model.medians_),
        "imputer": None,
    }
    if model.method == "multiple_imputation":
        seeds = imputation_seeds(int(model.random_state), int(model.imputations))
        imputer = model._prediction_imputer(seeds[0])  # the imputer the run uses; fitted now if not yet
        path = folder / f"{stem}.imputer.joblib"
        joblib.dump(imputer, path, compress=3)
        doc["imputer"] = {"file": path.name, "sha256": file_sha256(path)}
    return doc


def save_run_model(
    run_dir: str | Path,
    name: str,
    family: str,
    model: Any,
    *,
    cohort_rules: CohortSpec,
    development: pd.DataFrame,
    landmarks_days: Sequence[float],
    prediction_window_days: float,
    horizons_days: Sequence[float] | np.ndarray,
    labels: Mapping[str, str] | None = None,
    seed: int = 0,
) -> Path:
    """Save a fitted model of a run under ``<run_dir>/models/`` with its bundle description and model sheet.

    Parameters
    ----------
    run_dir : path
        The run folder (``models/`` is created in it).
    name, family : str
        The model's name (any text: the file stem is derived from it) and family (``landmark_cox``,
        ``time_varying_cox``, ``forest``, ``shared_trajectory_joint``).
    model : fitted model
        ``CoxModel``, ``LandmarkSupermodel``, ``SurvivalForest`` or ``SharedTrajectoryModel``, or a
        ``MissingDataModel`` around one of the first three.
    cohort_rules : CohortSpec
        The rules that built the model's input rows.
    development : DataFrame
        The rows the model was fitted on (landmark stack, or counting-process rows); only the covariate
        ranges are kept.
    landmarks_days, prediction_window_days, horizons_days : days
        The landmarks s, the prediction window w and the horizons the run predicted at.
    labels : mapping, optional
        Readable covariate labels for the sheet.
    seed : int
        Seed of the permutations of a forest's variable importance
        (:func:`riskbench.validation.apparent_importance.forest_importance`).

    Returns
    -------
    Path
        The bundle file ``models/<stem>.bundle.json``.
    """
    folder = Path(run_dir) / MODELS
    folder.mkdir(parents=True, exist_ok=True)
    stem = safe_file_stem(name)
    wrapper = model if isinstance(model, MissingDataModel) else None
    parts = list(wrapper.models_) if wrapper is not None else [model]
    kinds = [_kind(part) for part in parts]  # a family that cannot be saved is refused before anything is written
    covariates = list(wrapper.covariates if wrapper is not None else model.covariates)
    part_docs = []
    for k, (part, kind) in enumerate(zip(parts, kinds), start=1):
        path = folder / _part_name(stem, k, kind)
        part_docs.append({"file": path.name, "kind": kind, "sha256": _save_part(part, path, kind)})
    doc = {
        "format": BUNDLE_FORMAT,
        "format_version": BUNDLE_VERSION,
        "name": str(name),
        "family": str(family),
        "covariates": covariates,
        "parts": part_docs,
        "missing_data": None if wrapper is None else _missing_data_doc(wrapper, folder, stem),
        "cohort_rules": cohort_rules_of(cohort_rules),
        "landmarks_days": [float(s) for s in landmarks_days],
        "prediction_window_days": float(prediction_window_days),
        "horizons_days": [float(h) for h in horizons_days],
        "development_ranges": development_ranges(development, covariates),
        "labels": {c: str(labels[c]) for c in covariates if labels and c in labels},
        "variable_importance": (
            forest_importance(model, development, covariates, float(prediction_window_days), seed=seed)
            if part_docs[0]["kind"] == "forest"
            else None
        ),
        "caution": CAUTION,
        "versions": package_versions(),
    }
    bundle = folder / f"{stem}{BUNDLE_SUFFIX}"
    atomic_write_text(bundle, json.dumps(doc, indent=1, allow_nan=True))
    write_model_sheet(load_model(bundle), folder / f"{stem}.md")
    return bundle


# --------------------------------------------------------------------------------------------------
# loading


def bundle_path_of(path: str | Path) -> Path:
    """The bundle file of ``path``: the bundle itself, or the one beside a model file of the bundle."""
    path = Path(path)
    if path.name.endswith(BUNDLE_SUFFIX):
        return path
    stem = path.name
    for suffix in (".sha256", ".json", ".joblib"):
        stem = stem.removesuffix(suffix)
    stem = _PART.sub("", stem.removesuffix(".imputer"))
    return path.with_name(f"{stem}{BUNDLE_SUFFIX}")


def _checked_file(folder: Path, entry: Mapping[str, Any], what: str, bundle: Path) -> Path:
    """The file an entry of the bundle names, after checking that it lies in ``folder`` and matches its SHA-256."""
    name = str(entry.get("file", ""))
    path = folder / name
    if not name or Path(name).name != name or not path.is_file():
        raise ModelInputError(
            f"{bundle} names {what} {name!r}, which is not a file beside it; copy the whole models/ folder of the run."
        )
    expected = str(entry.get("sha256", "")).lower()
    actual = file_sha256(path)
    if actual != expected:
        raise ModelIntegrityError(
            f"{path} has SHA-256 {actual}, but {bundle} records {expected or '(nothing)'}: the file was changed "
            "or replaced after saving; refusing to load it. Take the model from a trusted copy of the run."
        )
    return path


def _check_against_manifest(bundle: Path) -> None:
    """Inside a run folder, the bundle's own SHA-256 must match the run manifest's record of it (a bundle copied
    out of its run has no manifest beside it and is checked by its parts' digests only)."""
    manifest = bundle.parent.parent / "manifest.json"
    if bundle.parent.name != MODELS or not manifest.is_file():
        return
    try:
        recorded = json.loads(manifest.read_text(encoding="utf-8")).get("outputs_sha256", {})
    except (OSError, UnicodeDecodeError, json.JSONDecodeError, AttributeError):
        return  # not a riskbench manifest: nothing to compare with
    expected = recorded.get(f"{MODELS}/{bundle.name}") if isinstance(recorded, dict) else None
    if expected is not None and file_sha256(bundle) != expected:
        raise ModelIntegrityError(
            f"{bundle} does not match the SHA-256 that the run's manifest.json records for it: the bundle was "
            "changed after the run; refusing to load it. Take the model from a trusted copy of the run."
        )


def _read_bundle(bundle: Path) -> dict[str, Any]:
    try:
        doc = json.loads(bundle.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise ModelInputError(
            f"no model bundle at {bundle}; give the <model>.bundle.json file of a run's "
            "models/ folder (or the model file beside it)."
        ) from None
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise ModelInputError(f"cannot read the model bundle {bundle}: {exc}") from None
    if not isinstance(doc, dict) or doc.get("format") != BUNDLE_FORMAT:
        raise ModelInputError(f"{bundle} is not a riskbench model bundle (format {BUNDLE_FORMAT!r} expected).")
    if int(doc.get("format_version", 0)) > BUNDLE_VERSION:
        raise ModelInputError(
            f"{bundle} has bundle format version {doc['format_version']}, newer than this "
            f"riskbench reads ({BUNDLE_VERSION}); upgrade riskbench."
        )
    missing = [
        k
        for k in (
            "name",
            "family",
            "covariates",
            "parts",
            "cohort_rules",
            "landmarks_days",
            "prediction_window_days",
            "development_ranges",
        )
        if k not in doc
    ]
    if missing or not doc["parts"]:
        raise ModelInputError(f"{bundle} lacks {missing or ['parts']}; save the model again from its run.")
    return doc


def _load_part(path: Path, kind: str) -> Any:
    if kind == "forest":
        return load_forest(path)
    if kind not in _KINDS:
        raise ModelInputError(f"{path}: unknown model kind {kind!r} in the bundle; expected one of {list(_KINDS)}.")
    return _KINDS[kind].from_json(path)


def _restore_missing_data(
    doc: Mapping[str, Any], parts: list[Any], covariates: list[str], folder: Path, bundle: Path
) -> MissingDataModel:
    """The run's ``MissingDataModel`` rebuilt from its saved parts (private fitted state set on purpose)."""
    estimator = clone(parts[0]).set_params(covariates=list(covariates))
    model = MissingDataModel(
        estimator,
        method=doc["method"],
        imputations=int(doc["imputations"]),
        max_iterations=int(doc["max_iterations"]),
        random_state=int(doc["random_state"]),
    )
    model.models_ = parts
    model.fitted_once_ = bool(doc["fitted_once"])
    model.indicator_columns_ = list(doc.get("indicator_columns", []))
    model.medians_ = {str(k): float(v) for k, v in dict(doc.get("medians", {})).items()}
    model.training_missing_ = {}
    model.note_ = f"{doc['method']}: loaded from {bundle.name}"
    if doc["method"] == "multiple_imputation":
        if not doc.get("imputer"):
            raise ModelInputError(
                f"{bundle}: a multiple-imputation model without its imputer file; save the model again from its run."
            )
        path = _checked_file(folder, doc["imputer"], "the imputer", bundle)
        imputer = joblib.load(path)
        if not isinstance(imputer, PredictionImputer):
            raise ModelIntegrityError(f"{path} holds a {type(imputer).__name__}, not an imputer.")
        model._prediction_imputer_ = imputer
    return model


def load_model(path: str | Path) -> SavedModel:
    """Load a model saved by :func:`save_run_model` (``path``: its ``.bundle.json`` or a model file beside it).

    Raises
    ------
    ModelInputError
        The bundle is missing, damaged, not a riskbench model bundle, or a file it names is missing or does
        not match its recorded SHA-256 (:class:`~riskbench.models.forest_io.ModelIntegrityError`).
    """
    bundle = bundle_path_of(path)
    doc = _read_bundle(bundle)
    _check_against_manifest(bundle)
    folder = bundle.parent
    parts = [
        _load_part(_checked_file(folder, entry, "the model file", bundle), str(entry.get("kind")))
        for entry in doc["parts"]
    ]
    covariates = [str(c) for c in doc["covariates"]]
    md = doc.get("missing_data")
    model = parts[0] if md is None else _restore_missing_data(md, parts, covariates, folder, bundle)
    return SavedModel(
        name=str(doc["name"]),
        family=str(doc["family"]),
        model=model,
        parts=tuple(parts),
        covariates=tuple(covariates),
        cohort_rules=dict(doc["cohort_rules"]),
        landmarks_days=tuple(float(s) for s in doc["landmarks_days"]),
        prediction_window_days=float(doc["prediction_window_days"]),
        horizons_days=tuple(float(h) for h in doc.get("horizons_days", [doc["prediction_window_days"]])),
        development_ranges=dict(doc["development_ranges"]),
        missing_data=md,
        labels=dict(doc.get("labels", {})),
        variable_importance=doc.get("variable_importance"),
        bundle_path=bundle,
        versions=dict(doc.get("versions", {})),
    )


# --------------------------------------------------------------------------------------------------
# the loaded model


@dataclass(frozen=True)
class SavedModel:
    """A model loaded by :func:`load_model`.

    Attributes
    ----------
    name, family : str
    model : fitted model
        Answers ``predict_risk(table, horizon)`` (horizon in days) as the run's model did.
    parts : tuple
        The fitted models inside (m of them after multiple imputation).
    covariates : tuple of str
    cohort_rules : dict
        The cohort rules as plain values (:meth:`cohort_spec` rebuilds the ``CohortSpec``).
    landmarks_days, prediction_window_days, horizons_days : days
    development_ranges : dict
        ``{covariate: {"min", "max"[, "values"]}}``.
    missing_data : dict or None
        The missing-data method and what it needs to predict.
    labels : dict
        Readable covariate labels.
    variable_importance : list of dict or None
        A forest's permutation importance (``covariate``, ``importance``: drop in Harrell's C).
    bundle_path : Path
    versions : dict
        Package versions that saved it.
    """

    name: str
    family: str
    model: Any
    parts: tuple[Any, ...]
    covariates: tuple[str, ...]
    cohort_rules: dict[str, Any]
    landmarks_days: tuple[float, ...]
    prediction_window_days: float
    horizons_days: tuple[float, ...]
    development_ranges: dict[str, dict[str, Any]]
    missing_data: dict[str, Any] | None = None
    labels: dict[str, str] = field(default_factory=dict)
    variable_importance: list[dict[str, Any]] | None = None
    bundle_path: Path | None = None
    versions: dict[str, str] = field(default_factory=dict)

    def cohort_spec(self, **reading: Any) -> CohortSpec:
        """The model's :class:`CohortSpec`; ``reading`` overrides how new sources are read (``columns``,
        ``date_format``, ``measurement_layout``, ``kind_map``), never the modelling rules."""
        allowed = {"columns", "date_format", "measurement_layout", "kind_map"}
        other = sorted(set(reading) - allowed)
        if other:
            raise ModelInputError(
                f"cohort_spec: {other} are rules of the model and cannot be changed; only "
                f"{sorted(allowed)} describe the new sources."
            )
        return cohort_spec_from_rules({**self.cohort_rules, **reading})

    @property
    def max_carry_days(self) -> float | None:
        """The carry-forward limit of the model's cohort rules (days; None: no limit)."""
        value = self.cohort_rules.get("max_carry_days")
        return None if value is None else float(value)

    def build_tables(
        self,
        patients: Any,
        measurements: Any,
        outcomes: Any,
        *,
        landmarks_days: Sequence[float] | None = None,
        at_date: Any = None,
        temp_folder: str | Path | None = None,
        **reading: Any,
    ) -> pd.DataFrame:
        """Rows to predict from new raw tables, built with the model's own cohort rules.

        Parameters
        ----------
        patients, measurements, outcomes : path, DataFrame or TableSource
            The three source tables in the input contract (the outcomes table may hold only
            ``end_of_follow_up`` rows: the last day each patient was seen).
        landmarks_days : sequence of days, optional
            Landmarks s (days since each patient's entry); default the model's landmarks.
        at_date : date, text or mapping, optional
            Instead of landmarks: one calendar date (or ``{patient_id: date}``) at which to predict; s is
            then the days from each patient's entry to that date.
        temp_folder : path, optional
            Where the cohort stage's working files go (they hold source ids).
        reading : mapping
            How the sources are read (see :meth:`cohort_spec`).

        Returns
        -------
        DataFrame
            ``patient_id`` (source ids), ``landmark`` (days), ``prediction_date`` (with ``at_date``), the
            covariates as known at s and the staleness of each variable; patients whose follow-up ended at or
            before s are left out (no risk can be predicted for them).
        """
        cohort = self.build_cohort(patients, measurements, outcomes, temp_folder=temp_folder, **reading)
        return self.rows_of(cohort, landmarks_days=landmarks_days, at_date=at_date)

    def build_cohort(
        self, patients: Any, measurements: Any, outcomes: Any, *, temp_folder: str | Path | None = None, **reading: Any
    ) -> Cohort:
        """The cohort of new raw tables built with the model's own cohort rules (arguments as in
        :meth:`build_tables`)."""
        from riskbench.cohort import build_cohort

        spec = self.cohort_spec(**reading)
        return build_cohort(patients, measurements, outcomes, spec, temp_folder=temp_folder)

    def rows_of(
        self, cohort: Cohort, *, landmarks_days: Sequence[float] | None = None, at_date: Any = None
    ) -> pd.DataFrame:
        """Rows to predict of a cohort from :meth:`build_cohort`, at landmarks (days; default the model's) or at a
        calendar date (see :meth:`build_tables`)."""
        from riskbench.workflow.scoring_rows import rows_at_dates, rows_at_landmarks

        if at_date is not None:
            return rows_at_dates(cohort, at_date)
        marks = self.landmarks_days if landmarks_days is None else tuple(float(s) for s in landmarks_days)
        return rows_at_landmarks(cohort, marks, self.prediction_window_days)

    def marker_history(self, cohort: Cohort) -> pd.DataFrame | None:
        """A joint model's input besides the rows: the marker measurements of the cohort's patients
        (``patient_id``, ``time`` in days since entry, the marker), read from its counting-process rows as the
        model read them in development. None for the other families (their rows hold all they read)."""
        part = self.parts[0]
        return part.history_from(cohort.counting_process) if isinstance(part, SharedTrajectoryModel) else None

    def model_with_history(self, marker_history: pd.DataFrame | None) -> Any:
        """The model to predict with: a joint model reading ``marker_history`` (:meth:`marker_history`), any
        other model as loaded."""
        if marker_history is None or not isinstance(self.model, SharedTrajectoryModel):
            return self.model
        return self.model.with_history(marker_history)

    @property
    def required_covariates(self) -> tuple[str, ...]:
        """Covariates a row must have to be predicted without a missing-data method: all of them, but a joint
        model's marker (a row without a value is a patient not yet measured; the model reads the history)."""
        part = self.parts[0]
        if isinstance(part, SharedTrajectoryModel):
            return tuple(c for c in self.covariates if c != part.model_.marker)
        return self.covariates

    def flags(self, rows: pd.DataFrame) -> pd.DataFrame:
        """Per row: covariates outside the development range, variables whose last value is older than the
        carry-forward limit, and covariates missing (each a ``;``-separated list of covariate names)."""
        from riskbench.workflow.scoring_rows import row_flags

        return row_flags(rows, self.covariates, self.development_ranges, self.cohort_spec(), self.max_carry_days)

    def predict(
        self,
        rows: pd.DataFrame | None = None,
        *,
        sources: Sequence[Any] | None = None,
        landmarks_days: Sequence[float] | None = None,
        at_date: Any = None,
        horizons_days: Sequence[float] | None = None,
        marker_history: pd.DataFrame | None = None,
    ) -> pd.DataFrame:
        """Predicted risks, one row per input row and horizon.

        Give either ``rows`` (covariates as known at ``landmark``, e.g. from :meth:`build_tables` or a run's
        landmark stack) or ``sources`` = (patients, measurements, outcomes), which are built into rows with the
        model's cohort rules at ``landmarks_days`` or ``at_date``. ``horizons_days`` defaults to the model's
        prediction window. A joint model reads each patient's marker measurements up to the row's landmark:
        from ``sources`` they are taken from the built cohort; with ``rows`` give them as ``marker_history``
        (:meth:`marker_history` of the rows' cohort), or each row's history is rebuilt from the row alone (its
        current value and first value, as for a held-out patient).

        Returns
        -------
        DataFrame
            ``patient_id`` (as given), ``landmark`` (days), ``prediction_date`` (when given),
            ``horizon_days``, ``risk`` (probability of the outcome in (s, s + horizon]; NaN when a row cannot
            be predicted, see the flags), ``outside_development_range``, ``older_than_carry_forward``,
            ``missing_covariates``.
        """
        if (rows is None) == (sources is None):
            raise ModelInputError("predict needs either rows or sources=(patients, measurements, outcomes).")
        if rows is None:
            assert sources is not None
            if len(sources) != 3:
                raise ModelInputError("sources must be (patients, measurements, outcomes).")
            cohort = self.build_cohort(*sources)
            rows = self.rows_of(cohort, landmarks_days=landmarks_days, at_date=at_date)
            marker_history = self.marker_history(cohort)
        horizons = (self.prediction_window_days,) if horizons_days is None else tuple(float(h) for h in horizons_days)
        from riskbench.models.risk_contract import risk_curve

        curve = np.full((len(rows), len(horizons)), np.nan)
        if len(rows):
            model = self.model_with_history(marker_history)
            curve = np.asarray(risk_curve(model, rows.reset_index(drop=True), np.asarray(horizons)), float)
        keep = [c for c in ("patient_id", "landmark", "prediction_date") if c in rows.columns]
        base = pd.concat([rows[keep].reset_index(drop=True), self.flags(rows).reset_index(drop=True)], axis=1)
        frames = []
        for j, h in enumerate(horizons):
            part = base.copy()
            part.insert(len(keep), "horizon_days", h)
            part.insert(len(keep) + 1, "risk", curve[:, j])
            frames.append(part)
        return pd.concat(frames, ignore_index=True) if frames else base
