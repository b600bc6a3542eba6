"""The JSON file of a fitted :class:`~riskbench.models.cox_model.CoxModel` (written by its ``to_json``).

The file holds everything prediction needs and everything a reader needs to judge the model:
constructor parameters (covariate spec), coefficients, model-based and robust covariance, the
centring and scaling used inside the fit, the baseline cumulative hazard per stratum (days), the
likelihood tests, and the package versions that produced it.  Floats are written with ``repr``
precision, so a round trip reproduces predictions exactly.

This module knows the fit (:class:`~riskbench.models.cox_engine.CoxFit`) and the file, not the model class:
``CoxModel.to_json`` / ``CoxModel.from_json`` call it, so the dependency runs one way.
"""

from __future__ import annotations

from dataclasses import dataclass, fields
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from riskbench.models.cox_engine import CoxFit, LikelihoodTest
from riskbench.models.model_file import read_model_file, write_model_file
from riskbench.models.risk_contract import ModelInputError

__all__ = ["FORMAT", "SavedCox", "read_cox_file", "save_cox_model"]

FORMAT = "riskbench.cox_model"
FORMAT_VERSION = 1


def _plain(value: Any) -> Any:
    """JSON-ready copy of a CoxFit field."""
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, LikelihoodTest):
        return {"statistic": value.statistic, "df": value.df, "p_value": value.p_value}
    if isinstance(value, pd.DataFrame):
        return {col: [v.item() if hasattr(v, "item") else v for v in value[col]] for col in value.columns}
    if isinstance(value, tuple):
        return [v.item() if hasattr(v, "item") else v for v in value]
    if isinstance(value, np.generic):
        return value.item()
    return value


def save_cox_model(model: Any, path: str | Path) -> Path:
    """Write a fitted ``CoxModel`` to ``path`` (JSON); returns the path."""
    if not hasattr(model, "fit_"):
        raise ModelInputError("only a fitted CoxModel can be saved; call fit(table) first.")
    body = {
        "time_scale": model.time_scale_,
        "fit": {f.name: _plain(getattr(model.fit_, f.name)) for f in fields(CoxFit)},
    }
    return write_model_file(path, FORMAT, FORMAT_VERSION, model, body)


def _test(d: dict[str, Any] | None) -> LikelihoodTest | None:
    return None if d is None else LikelihoodTest(float(d["statistic"]), int(d["df"]), float(d["p_value"]))


@dataclass(frozen=True)
class SavedCox:
    """What a Cox model file holds: constructor ``params``, the ``fit``, its ``time_scale`` and the ``versions``
    of the packages that wrote it."""

    params: dict[str, Any]
    fit: CoxFit
    time_scale: str
    versions: dict[str, str]


def read_cox_file(path: str | Path) -> SavedCox:
    """Read a file written by :func:`save_cox_model` (``CoxModel.from_json`` builds the model from it).

    Raises
    ------
    ModelInputError
        If the file is not a riskbench Cox model or has a newer format version.
    """
    doc = read_model_file(path, FORMAT, FORMAT_VERSION, "Cox model")
    raw = doc["fit"]
    arrays = {"coef", "var", "robust_var", "center", "scale"}
    values: dict[str, Any] = {}
    for f in fields(CoxFit):
        v = raw[f.name]
        if f.name in arrays:
            v = None if v is None else np.asarray(v, dtype=float)
        elif f.name.endswith("_test"):
            v = _test(v)
        elif f.name == "baseline":
            v = pd.DataFrame(
                {
                    "stratum": v["stratum"],
                    "time": np.asarray(v["time"], float),
                    "cumhaz": np.asarray(v["cumhaz"], float),
                }
            )
        elif f.name in ("names", "strata_levels"):
            v = tuple(v)
        values[f.name] = v
    return SavedCox(
        params=doc["params"],
        fit=CoxFit(**values),
        time_scale=doc.get("time_scale", "since_entry"),
        versions=doc.get("versions", {}),
    )
