"""Save and load a fitted :class:`~riskbench.models.landmark.LandmarkSupermodel` as JSON.

The file holds the constructor parameters, the landmark design (fitted landmarks, scale S, the powers of
s/S in the coefficients and in the baseline, the design column names), each cause-specific fit
(coefficients, model-based and cluster-robust covariance, design means, Breslow baseline increments per
stratum in days from the landmark, event count), the longest follow-up that caps horizons and the package
versions. Floats are written with ``repr`` precision, so a round trip reproduces predictions exactly.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np

from riskbench.models.model_file import read_model_file, write_model_file
from riskbench.models.landmark import CauseSpecificFit, LandmarkSupermodel
from riskbench.models.risk_contract import ModelInputError

__all__ = ["FORMAT", "load_landmark_model", "save_landmark_model"]

FORMAT = "riskbench.landmark_supermodel"
FORMAT_VERSION = 1


def _fit_doc(fit: CauseSpecificFit | None) -> dict[str, Any] | None:
    if fit is None:
        return None
    return {
        "coef": fit.coef.tolist(), "var": fit.var.tolist(), "robust_var": fit.robust_var.tolist(),
        "means": fit.means.tolist(), "n_events": int(fit.n_events),
        # JSON keys are text: the strata go in a list of [stratum, times, increments]
        "baseline": [[float(k), t.tolist(), h.tolist()] for k, (t, h) in sorted(fit.baseline.items())],
    }


def _fit_from(doc: dict[str, Any] | None) -> CauseSpecificFit | None:
    if doc is None:
        return None
    return CauseSpecificFit(
        coef=np.asarray(doc["coef"], float), var=np.asarray(doc["var"], float),
        robust_var=np.asarray(doc["robust_var"], float), means=np.asarray(doc["means"], float),
        baseline={float(k): (np.asarray(t, float), np.asarray(h, float)) for k, t, h in doc["baseline"]},
        n_events=int(doc["n_events"]))


def save_landmark_model(model: LandmarkSupermodel, path: str | Path) -> Path:
    """Write a fitted ``LandmarkSupermodel`` to ``path`` (JSON); returns the path."""
    if not hasattr(model, "outcome_"):
        raise ModelInputError("only a fitted LandmarkSupermodel can be saved; call fit(stack) first.")
    body = {
        "design": {
            "landmarks_days": model.landmarks_.tolist(), "landmark_scale_days": model.landmark_scale_,
            "effect_power": model._effect_power_, "baseline_power": model._baseline_power_,
            "design_columns": list(model.design_columns_), "max_time_days": model.max_time_,
        },
        "outcome": _fit_doc(model.outcome_),
        "competing": _fit_doc(model.competing_),
    }
    return write_model_file(path, FORMAT, FORMAT_VERSION, model, body)


def load_landmark_model(path: str | Path) -> LandmarkSupermodel:
    """Read a ``LandmarkSupermodel`` written by :func:`save_landmark_model`.

    Raises
    ------
    ModelInputError
        If the file cannot be read, is not a riskbench landmark super-model or has a newer format version.
    """
    doc = read_model_file(path, FORMAT, FORMAT_VERSION, "landmark super-model")
    design = doc["design"]
    model = LandmarkSupermodel(**doc["params"])
    model.landmarks_ = np.asarray(design["landmarks_days"], float)
    model.landmark_scale_ = float(design["landmark_scale_days"])
    model._effect_power_ = int(design["effect_power"])
    model._baseline_power_ = int(design["baseline_power"])
    model.design_columns_ = list(design["design_columns"])
    model.max_time_ = float(design["max_time_days"])
    model.outcome_ = _fit_from(doc["outcome"])
    model.competing_ = _fit_from(doc["competing"])
    model.coef_, model.var_, model.robust_var_ = model.outcome_.coef, model.outcome_.var, model.outcome_.robust_var
    model.saved_versions_ = doc.get("versions", {})
    return model
