"""Save and load a fitted :class:`~riskbench.models.cox_model.CoxModel` as JSON.

The file holds everything prediction needs and everything a reader needs to judge the model:
constructor parameters (covariate spec), coefficients, model-based and robust covariance, the
centring and scaling used inside the fit, the baseline cumulative hazard per stratum (days), the
likelihood tests, and the package versions that produced it.  Floats are written with ``repr``
precision, so a round trip reproduces predictions exactly.
"""

from __future__ import annotations

from dataclasses import fields
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from riskbench.models.cox_engine import CoxFit, LikelihoodTest
from riskbench.models.model_file import read_model_file, write_model_file
from riskbench.models.risk_contract import ModelInputError

__all__ = ["FORMAT", "load_cox_model", "save_cox_model"]

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
    body = {"time_scale": model.time_scale_,
            "fit": {f.name: _plain(getattr(model.fit_, f.name)) for f in fields(CoxFit)}}
    return write_model_file(path, FORMAT, FORMAT_VERSION, model, body)


def _test(d: dict[str, Any] | None) -> LikelihoodTest | None:
    return None if d is None else LikelihoodTest(float(d["statistic"]), int(d["df"]), float(d["p_value"]))


def load_cox_model(path: str | Path) -> Any:
    """Read a ``CoxModel`` written by :func:`save_cox_model`.

    Raises
    ------
    ModelInputError
        If the file is not a riskbench Cox model or has a newer format version.
    """
    from riskbench.models.cox_model import CoxModel

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
            v = pd.DataFrame({"stratum": v["stratum"], "time": np.asarray(v["time"], float),
                              "cumhaz": np.asarray(v["cumhaz"], float)})
        elif f.name in ("names", "strata_levels"):
            v = tuple(v)
        values[f.name] = v
    model = CoxModel(**doc["params"])
    model._set_fitted(CoxFit(**values), doc.get("time_scale", "since_entry"))
    model.saved_versions_ = doc.get("versions", {})
    return model
