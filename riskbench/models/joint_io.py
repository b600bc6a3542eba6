"""The JSON file of a fitted joint model (:class:`~riskbench.models.joint_family.SharedTrajectoryModel`).

Format ``riskbench.joint_model``, version 1. Besides the envelope of :mod:`riskbench.models.model_file` (the
family's constructor parameters, the package versions) the file holds:

``joint``
    ``params``: the constructor parameters of the inner :class:`~riskbench.models.joint_model.JointModel`
    (marker, covariates of each submodel, association, quadrature points, Monte Carlo draws, grid steps and
    seed); ``structure``: what turns the parameter vector into a prediction (time unit years; the marker's
    time basis and its knots; the hazard knots, 0 first; the marker terms and covariates of each cause; the
    centring values of every covariate; the Gauss–Legendre points); ``parameters``: every entry of the
    parameter vector θ by name, in order, on the scale of the fit (log residual SD, Cholesky factor of the
    random-effects covariance, log baseline hazards per year); ``covariance``: the inverse observed
    information of θ; ``fit``: log-likelihoods, convergence, counts of patients, measurements and events, the
    longest follow-up (days); ``readable``: the same model on the natural scale for a person (residual SD,
    random-effects covariance, baseline hazard rate per year of each piece with its interval in days) --
    written for reading, not read back.
``family``
    ``competing``: whether a competing-event hazard was fitted.
``content_sha256``
    SHA-256 of all of the above (keys sorted), so an edited number is refused even outside a bundle.

No measurement history is stored: a loaded model predicts from the measurements it is given
(:meth:`~riskbench.models.joint_family.SharedTrajectoryModel.with_history`). Floats are written with ``repr``
precision, so a round trip reproduces predictions exactly.

This module knows the file and the joint model's fitted state, not the family class:
``SharedTrajectoryModel.to_json`` / ``from_json`` call it, so the dependency runs one way.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from riskbench.models.joint_data import History
from riskbench.models.joint_design import TimeBasis
from riskbench.models.joint_likelihood import ParameterLayout
from riskbench.models.joint_model import JointModel
from riskbench.models.joint_structure import JointStructure
from riskbench.models.model_file import package_versions, read_model_file
from riskbench.models.risk_contract import ModelInputError
from riskbench.time_units import DAYS_PER_YEAR

__all__ = ["FORMAT", "FORMAT_VERSION", "JointFileError", "SavedJoint", "read_joint_file", "save_joint_model"]

FORMAT = "riskbench.joint_model"
FORMAT_VERSION = 1
_FIX = "save the model again from its run (or take the file from a trusted copy)"


class JointFileError(ModelInputError):
    """A joint-model file is damaged, edited or inconsistent (the message names the file and the field)."""


def _listed(value: Any) -> Any:
    """JSON-ready copy of a constructor parameter (tuples become lists)."""
    if isinstance(value, (list, tuple)):
        return [_listed(v) for v in value]
    return value


def _content_digest(doc: dict[str, Any]) -> str:
    """SHA-256 of the file's content: every key but the digest itself and the package versions."""
    content = {k: v for k, v in doc.items() if k not in ("content_sha256", "versions")}
    text = json.dumps(content, sort_keys=True, allow_nan=True, separators=(",", ":"))
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def _readable(structure: JointStructure, theta: np.ndarray) -> dict[str, Any]:
    """The natural-scale view of θ written for a reader (never read back)."""
    layout = structure.layout
    _, sigma, chol = layout.marker_parts(theta)
    upper = [*structure.knots[1:].tolist(), None]
    hazards = {}
    for c, cause in enumerate(("outcome", "competing")[: len(structure.cause_terms)]):
        sl_h, _, _ = layout.cause_slices(c)
        hazards[cause] = [
            {
                "from_days": float(lo * DAYS_PER_YEAR),
                "to_days": None if hi is None else float(hi * DAYS_PER_YEAR),
                "rate_per_year": float(np.exp(log_rate)),
            }
            for lo, hi, log_rate in zip(structure.knots.tolist(), upper, theta[sl_h])
        ]
    return {
        "residual_sd": float(sigma),
        "random_effects_covariance": (chol @ chol.T).tolist(),
        "baseline_hazard": hazards,
    }


def save_joint_model(model: Any, path: str | Path) -> Path:
    """Write a fitted ``SharedTrajectoryModel`` to ``path`` (JSON, no patient data); returns the path."""
    joint = getattr(model, "model_", None)
    if not isinstance(joint, JointModel) or not hasattr(joint, "theta_"):
        raise ModelInputError("only a fitted SharedTrajectoryModel can be saved; call fit(counting_process) first.")
    s = joint.structure_
    layout = s.layout
    params = model.get_params()
    params["covariates"] = list(params["covariates"])
    doc: dict[str, Any] = {
        "format": FORMAT,
        "format_version": FORMAT_VERSION,
        "params": _listed(params),
        "joint": {
            "params": {k: _listed(v) for k, v in joint.get_params().items()},
            "structure": {
                "time_unit": "years",
                "n_fixed": int(layout.n_fixed),
                "n_pieces": int(layout.n_pieces),
                "cause_sizes": [[int(q), int(a)] for q, a in layout.cause_sizes],
                "time_basis_knots_years": list(s.basis.knots),
                "hazard_knots_years": s.knots.tolist(),
                "cause_terms": [list(t) for t in s.cause_terms],
                "marker_covariates": list(s.marker_covariates),
                "cause_covariates": [list(c) for c in s.cause_covariates],
                "marker_means": s.marker_means.tolist(),
                "cause_means": [m.tolist() for m in s.cause_means],
                "legendre_points": int(s.legendre_points),
            },
            "parameters": [
                {"name": n, "estimate": float(v)} for n, v in zip(s.parameter_names(), joint.theta_.tolist())
            ],
            "covariance": joint.covariance_.tolist(),
            "fit": {
                "loglik": float(joint.loglik_),
                "marker_loglik": float(joint.marker_loglik_),
                "two_stage_theta": joint.two_stage_theta_.tolist(),
                "gradient": joint.gradient_.tolist(),
                "converged": bool(joint.converged_),
                "optimiser_message": str(joint.optimiser_message_),
                "n_patients": int(joint.n_patients_),
                "n_measurements": int(joint.n_measurements_),
                "n_events": [int(e) for e in joint.n_events_],
                "max_time_days": float(joint.max_time_),
            },
            "readable": _readable(s, joint.theta_),
        },
        "family": {"competing": model.competing_},
    }
    doc["content_sha256"] = _content_digest(doc)
    doc["versions"] = package_versions()
    path = Path(path)
    path.write_text(json.dumps(doc, indent=1, allow_nan=True))
    return path


@dataclass(frozen=True)
class SavedJoint:
    """What a joint-model file holds, rebuilt.

    Attributes
    ----------
    params : dict
        Constructor parameters of the family (``SharedTrajectoryModel``).
    model : JointModel
        The fitted joint model with an empty measurement history.
    competing : True or None
        A competing-event hazard was fitted.
    versions : dict
        Package versions that wrote the file.
    """

    params: dict[str, Any]
    model: JointModel
    competing: bool | None
    versions: dict[str, str]


def _structure(doc: dict[str, Any]) -> JointStructure:
    layout = ParameterLayout(
        int(doc["n_fixed"]), int(doc["n_pieces"]), tuple((int(q), int(a)) for q, a in doc["cause_sizes"])
    )
    return JointStructure(
        layout,
        TimeBasis(tuple(float(k) for k in doc["time_basis_knots_years"])),
        np.asarray(doc["hazard_knots_years"], dtype=float),
        tuple(tuple(str(t) for t in terms) for terms in doc["cause_terms"]),
        tuple(str(c) for c in doc["marker_covariates"]),
        tuple(tuple(str(c) for c in cs) for cs in doc["cause_covariates"]),
        np.asarray(doc["marker_means"], dtype=float).reshape(-1),
        tuple(np.asarray(m, dtype=float).reshape(-1) for m in doc["cause_means"]),
        int(doc["legendre_points"]),
    )


def _check_structure(path: Path, s: JointStructure, theta: np.ndarray, names: list[str], cov: np.ndarray) -> None:
    """Every part of the structure agrees with the others and with θ (an edited file fails here)."""
    layout = s.layout
    problems = []
    if layout.n_fixed != 1 + s.basis.n_columns + len(s.marker_covariates):
        problems.append("n_fixed does not match the time basis and the marker covariates")
    if len(s.marker_means) != len(s.marker_covariates):
        problems.append("marker_means and marker_covariates differ in length")
    if not 1 <= len(s.cause_terms) <= 2 or not len(s.cause_terms) == len(s.cause_covariates) == len(s.cause_means):
        problems.append("cause_terms, cause_covariates and cause_means must describe the same one or two causes")
    for (q, a), terms, covariates, means in zip(layout.cause_sizes, s.cause_terms, s.cause_covariates, s.cause_means):
        if q != len(covariates) or q != len(means) or a != len(terms) or not set(terms) <= {"value", "slope"}:
            problems.append(f"cause_sizes {[q, a]} do not match covariates {list(covariates)} and terms {list(terms)}")
    knots = s.knots
    if len(knots) != layout.n_pieces or knots[0] != 0.0 or np.any(np.diff(knots) <= 0):
        problems.append("hazard_knots_years must start at 0, increase, and give one knot per baseline piece")
    if s.basis.knots and (len(s.basis.knots) < 3 or np.any(np.diff(s.basis.knots) <= 0)):
        problems.append("time_basis_knots_years must be empty or at least 3 increasing knots")
    if len(theta) != layout.size:
        problems.append(f"{len(theta)} parameters where the structure needs {layout.size}")
    elif names != s.parameter_names():
        problems.append("the parameter names do not match the structure")
    if not np.all(np.isfinite(theta)):
        problems.append("a parameter estimate is not a finite number")
    if cov.shape != (len(theta), len(theta)):
        problems.append(f"covariance has shape {cov.shape}, not {(len(theta), len(theta))}")
    if problems:
        raise JointFileError(f"{path}: the joint model is inconsistent ({'; '.join(problems)}); {_FIX}.")


def read_joint_file(path: str | Path) -> SavedJoint:
    """Read a file written by :func:`save_joint_model` and rebuild its fitted joint model.

    Raises
    ------
    ModelInputError
        If the file cannot be read, is not a riskbench joint model or has a newer format version.
    JointFileError
        If its content does not match its recorded SHA-256, a field is missing or malformed, or its parts
        disagree (a damaged or edited file).
    """
    path = Path(path)
    doc = read_model_file(path, FORMAT, FORMAT_VERSION, "joint model")
    recorded = str(doc.get("content_sha256", ""))
    if recorded != _content_digest(doc):
        raise JointFileError(
            f"{path}: the content does not match its recorded SHA-256 ({recorded or 'none recorded'}); the file "
            f"was edited or damaged after saving, refusing to load it; {_FIX}."
        )
    try:
        joint = doc["joint"]
        structure = _structure(joint["structure"])
        names = [str(p["name"]) for p in joint["parameters"]]
        theta = np.asarray([float(p["estimate"]) for p in joint["parameters"]], dtype=float)
        cov = np.asarray(joint["covariance"], dtype=float)
        fit = joint["fit"]
        model = JointModel(**joint["params"])
        model.loglik_, model.marker_loglik_ = float(fit["loglik"]), float(fit["marker_loglik"])
        model.two_stage_theta_ = np.asarray(fit["two_stage_theta"], dtype=float)
        model.gradient_ = np.asarray(fit["gradient"], dtype=float)
        model.converged_, model.optimiser_message_ = bool(fit["converged"]), str(fit["optimiser_message"])
        model.n_patients_, model.n_measurements_ = int(fit["n_patients"]), int(fit["n_measurements"])
        outcome_events, competing_events = (int(e) for e in fit["n_events"])
        model.n_events_ = (outcome_events, competing_events)
        model.max_time_ = float(fit["max_time_days"])
        params = dict(doc["params"])
        competing = doc["family"]["competing"]
    except (KeyError, TypeError, ValueError, IndexError) as exc:
        raise JointFileError(f"{path}: a field of the joint model is missing or malformed ({exc!r}); {_FIX}.") from None
    _check_structure(path, structure, theta, names, cov)
    model.structure_ = structure
    model.theta_, model.covariance_ = theta, cov
    model.fit_seconds_ = {}
    # no patient data in the file: predictions read the measurements they are given
    model.history_ids_ = np.array([], dtype=object)
    model.history_ = History(np.array([], dtype=int), np.array([], dtype=float), np.array([], dtype=float))
    return SavedJoint(params, model, None if competing is None else bool(competing), dict(doc.get("versions", {})))
