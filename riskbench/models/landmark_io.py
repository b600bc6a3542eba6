"""The JSON file of a fitted :class:`~riskbench.models.landmark.LandmarkSupermodel` (written by its ``to_json``).

The file holds the constructor parameters, the landmark design (fitted landmarks, scale S, the powers of
s/S in the coefficients and in the baseline, the design column names), each cause-specific fit
(coefficients, model-based and cluster-robust covariance, design means, Breslow baseline increments per
stratum in days from the landmark, event count, log partial likelihoods), the longest follow-up that caps
horizons and the package versions. Floats are written with ``repr`` precision, so a round trip reproduces
predictions exactly.

This module knows the file, not the model class: ``LandmarkSupermodel.to_json`` / ``from_json`` call it and
build their objects from the plain values it returns, so the dependency runs one way.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from riskbench.models.model_file import read_model_file, write_model_file
from riskbench.models.risk_contract import ModelInputError

__all__ = ["FORMAT", "SavedLandmark", "read_landmark_file", "save_landmark_model"]

FORMAT = "riskbench.landmark_supermodel"
FORMAT_VERSION = 1


def _fit_doc(fit: Any) -> dict[str, Any] | None:
    if fit is None:
        return None
    return {
        "coef": fit.coef.tolist(),
        "var": fit.var.tolist(),
        "robust_var": fit.robust_var.tolist(),
        "means": fit.means.tolist(),
        "n_events": int(fit.n_events),
        "loglik": float(fit.loglik),
        "loglik_null": float(fit.loglik_null),
        # JSON keys are text: the strata go in a list of [stratum, times, increments]
        "baseline": [[float(k), t.tolist(), h.tolist()] for k, (t, h) in sorted(fit.baseline.items())],
    }


def _fit_values(doc: dict[str, Any] | None) -> dict[str, Any] | None:
    """The fields of a ``CauseSpecificFit`` as read back (log likelihoods NaN in files written before them)."""
    if doc is None:
        return None
    return {
        "coef": np.asarray(doc["coef"], float),
        "var": np.asarray(doc["var"], float),
        "robust_var": np.asarray(doc["robust_var"], float),
        "means": np.asarray(doc["means"], float),
        "baseline": {float(k): (np.asarray(t, float), np.asarray(h, float)) for k, t, h in doc["baseline"]},
        "n_events": int(doc["n_events"]),
        "loglik": float(doc.get("loglik", np.nan)),
        "loglik_null": float(doc.get("loglik_null", np.nan)),
    }


def save_landmark_model(model: Any, path: str | Path) -> Path:
    """Write a fitted ``LandmarkSupermodel`` to ``path`` (JSON); returns the path."""
    if not hasattr(model, "outcome_"):
        raise ModelInputError("only a fitted LandmarkSupermodel can be saved; call fit(stack) first.")
    body = {
        "design": {
            "landmarks_days": model.landmarks_.tolist(),
            "landmark_scale_days": model.landmark_scale_,
            "effect_power": model._effect_power_,
            "baseline_power": model._baseline_power_,
            "design_columns": list(model.design_columns_),
            "max_time_days": model.max_time_,
        },
        "outcome": _fit_doc(model.outcome_),
        "competing": _fit_doc(model.competing_),
    }
    return write_model_file(path, FORMAT, FORMAT_VERSION, model, body)


@dataclass(frozen=True)
class SavedLandmark:
    """What a landmark super-model file holds, as plain values.

    Attributes
    ----------
    params : dict
        Constructor parameters.
    landmarks, landmark_scale, max_time : ndarray, float, float
        Fitted landmarks, the scale S and the longest follow-up (days).
    effect_power, baseline_power : int
        Highest power of s/S in the coefficients and in the baseline.
    design_columns : list of str
    outcome, competing : dict or None
        The fields of each cause-specific fit (``competing`` is None without competing events).
    versions : dict
        Package versions that wrote the file.
    """

    params: dict[str, Any]
    landmarks: np.ndarray
    landmark_scale: float
    max_time: float
    effect_power: int
    baseline_power: int
    design_columns: list[str]
    outcome: dict[str, Any]
    competing: dict[str, Any] | None
    versions: dict[str, str]


def read_landmark_file(path: str | Path) -> SavedLandmark:
    """Read a file written by :func:`save_landmark_model`.

    Raises
    ------
    ModelInputError
        If the file cannot be read, is not a riskbench landmark super-model or has a newer format version.
    """
    doc = read_model_file(path, FORMAT, FORMAT_VERSION, "landmark super-model")
    design = doc["design"]
    outcome = _fit_values(doc["outcome"])
    if outcome is None:
        raise ModelInputError(f"{path} holds no outcome fit; save the model again with to_json.")
    return SavedLandmark(
        params=doc["params"],
        landmarks=np.asarray(design["landmarks_days"], float),
        landmark_scale=float(design["landmark_scale_days"]),
        max_time=float(design["max_time_days"]),
        effect_power=int(design["effect_power"]),
        baseline_power=int(design["baseline_power"]),
        design_columns=list(design["design_columns"]),
        outcome=outcome,
        competing=_fit_values(doc["competing"]),
        versions=doc.get("versions", {}),
    )
