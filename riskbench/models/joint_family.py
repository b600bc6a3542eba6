"""The joint model as a workflow family: fits on the counting-process table, predicts landmark-stack rows.

:class:`SharedTrajectoryModel` wraps :class:`riskbench.models.joint_model.JointModel` behind the contract every
configured model answers (``fit(table)``, ``predict_risk(table, horizon)``; :mod:`riskbench.models.risk_contract`):

* ``covariates`` are the configuration's covariate list: ``marker`` (default: the first covariate) is the
  repeated marker, the others are baseline covariates of both hazards and of the marker's mean. They must not
  change within a patient (a time-varying covariate belongs in the marker, or is left out).
* ``fit(counting_process)``: the measurements and each patient's follow-up are read from the counting-process
  table (:mod:`riskbench.models.joint_inputs`), so the joint model sees the same rows and ledger as the
  time-varying Cox model. Missing marker values are simply no measurement (no imputation is needed); baseline
  covariates must be complete.
* ``predict_risk(stack, horizon)``: each row's history is the patient's measurements from the fitting table at
  or before the row's landmark. A patient the model was not fitted on (a held-out fold, an external cohort)
  has no stored history; that row's history is rebuilt from the row itself, leakage-free: the current value
  dated ``landmark - staleness`` and, when the stack has ``<marker>_change``, the first value
  (``value - change``) dated at entry. Such rows therefore use at most two measurements, so resampled
  estimates of the joint model's performance are on the cautious side. A bootstrap copy (``"<id>#<k>"``, see
  :func:`riskbench.validation.sources.draw_tables`) shares its patient's history.
* ``to_json`` / ``from_json`` (:mod:`riskbench.models.joint_io`): the fitted model without any measurement; a
  loaded model is given the measurement history of the patients it predicts by ``with_history`` (read from
  their counting-process table by ``history_from``, as ``fit`` reads it).
"""

from __future__ import annotations

import copy
import re
from collections.abc import Sequence
from pathlib import Path

import numpy as np
import pandas as pd
from sklearn.base import BaseEstimator

from riskbench.models.joint_inputs import (
    measurements_from_counting_process,
    staleness_column,
    survival_from_counting_process,
)
from riskbench.models.joint_io import read_joint_file, save_joint_model
from riskbench.models.joint_model import JointModel
from riskbench.models.risk_contract import ModelInputError, check_horizon, describe_rows, prediction_origin

__all__ = ["SharedTrajectoryModel", "patient_key"]

_COPY_SUFFIX = re.compile(r"#\d+$")


def patient_key(ids: Sequence[object] | np.ndarray | pd.Series) -> np.ndarray:
    """Patient ids with a bootstrap copy's ``#<k>`` suffix removed (a copy's records are its patient's)."""
    return np.array([_COPY_SUFFIX.sub("", str(i)) for i in ids], dtype=object)


def _keyed(measurements: pd.DataFrame) -> pd.DataFrame:
    """Measurements keyed by patient (a bootstrap copy's suffix removed), one per patient and time."""
    keyed = measurements.assign(patient_id=patient_key(measurements["patient_id"]))
    return keyed.drop_duplicates(["patient_id", "time"], ignore_index=True)


class SharedTrajectoryModel(BaseEstimator):
    """Joint model of one repeated marker and the outcome, for the workflow (see the module docstring).

    Parameters
    ----------
    covariates : sequence of str
        The marker column and the baseline covariates.
    marker : str or None
        The marker column (None: the first covariate).
    association, competing, competing_association, time_knots, baseline_pieces, hermite_points,
    prediction_draws, random_state
        As in :class:`riskbench.models.joint_model.JointModel`.

    Attributes (after fit)
    ----------------------
    model_ : JointModel
    competing_ : True or None (a competing-event hazard was fitted: the risk is a cumulative incidence)
    """

    def __init__(
        self,
        covariates: Sequence[str],
        *,
        marker: str | None = None,
        association: str = "value",
        competing: bool = True,
        competing_association: bool = True,
        time_knots: int = 0,
        baseline_pieces: int = 6,
        hermite_points: int = 5,
        prediction_draws: int = 100,
        random_state: int = 0,
    ) -> None:
        self.covariates = covariates
        self.marker = marker
        self.association = association
        self.competing = competing
        self.competing_association = competing_association
        self.time_knots = time_knots
        self.baseline_pieces = baseline_pieces
        self.hermite_points = hermite_points
        self.prediction_draws = prediction_draws
        self.random_state = random_state

    def _roles(self) -> tuple[str, list[str]]:
        covariates = [self.covariates] if isinstance(self.covariates, str) else list(self.covariates)
        if not covariates:
            raise ModelInputError("covariates is empty; name the marker column first, then baseline covariates")
        marker = self.marker or covariates[0]
        if marker not in covariates:
            raise ModelInputError(f"marker {marker!r} is not one of the covariates {covariates}; list it there")
        return marker, [c for c in covariates if c != marker]

    def fit(self, table: pd.DataFrame) -> SharedTrajectoryModel:
        """Fit on a counting-process table (``patient_id, start, stop, status``, covariates, staleness)."""
        marker, baseline = self._roles()
        for column in baseline:
            if column in table.columns:
                spread = table.groupby("patient_id", sort=False)[column].nunique(dropna=True)
                varying = table["patient_id"].isin(spread.index[spread > 1]).to_numpy()
                if varying.any():
                    raise ModelInputError(
                        f"covariate '{column}' changes within patients ({describe_rows(table, varying)}); the joint "
                        "model's other covariates must be baseline values -- make a time-varying variable the "
                        "marker ([[models]] params marker) or leave it out"
                    )
        measurements = measurements_from_counting_process(table, marker)
        survival = survival_from_counting_process(table, baseline)
        self.model_ = JointModel(
            marker,
            marker_covariates=baseline,
            event_covariates=baseline,
            association=self.association,
            competing=self.competing,
            competing_association=self.competing_association,
            time_knots=self.time_knots,
            baseline_pieces=self.baseline_pieces,
            hermite_points=self.hermite_points,
            prediction_draws=self.prediction_draws,
            random_state=self.random_state,
        ).fit(measurements, survival)
        self.competing_ = True if self.competing and int((survival["status"] == 2).sum()) > 0 else None
        self.history_ = _keyed(measurements)
        self.max_time_ = self.model_.max_time_
        return self

    def history_from(self, table: pd.DataFrame) -> pd.DataFrame:
        """The marker's measurements (``patient_id, time`` in days since entry, marker) of a counting-process
        table, read as :meth:`fit` reads them."""
        marker = self.model_.marker if hasattr(self, "model_") else self._roles()[0]
        return _keyed(measurements_from_counting_process(table, marker))

    def with_history(self, measurements: pd.DataFrame) -> SharedTrajectoryModel:
        """A copy of this fitted model whose predictions read each patient's history from ``measurements``.

        ``measurements`` has the columns of :meth:`history_from` (e.g. the counting-process table of new
        patients built with the model's cohort rules, through :meth:`history_from`); a row uses only the
        measurements of its patient taken at or before its landmark. This model is left unchanged.
        """
        if not hasattr(self, "model_"):
            raise ModelInputError("this model is not fitted yet; call fit(counting_process) first")
        marker = self.model_.marker
        absent = [c for c in ("patient_id", "time", marker) if c not in measurements.columns]
        if absent:
            raise ModelInputError(
                f"measurement history lacks column(s) {absent}; give patient_id, time (days since entry) and "
                f"{marker!r}, e.g. history_from(counting_process)"
            )
        out = copy.copy(self)
        out.history_ = _keyed(measurements[["patient_id", "time", marker]])
        return out

    def to_json(self, path: str | Path) -> Path:
        """Write the fitted model to ``path`` (:mod:`riskbench.models.joint_io`; no measurement history)."""
        return save_joint_model(self, path)

    @classmethod
    def from_json(cls, path: str | Path) -> SharedTrajectoryModel:
        """Read a model written by :meth:`to_json`; it predicts from the history given by :meth:`with_history`
        (without one, each row's history is rebuilt from the row, as for a patient it was not fitted on)."""
        saved = read_joint_file(path)
        model = cls(**saved.params)
        model.model_ = saved.model
        model.competing_ = saved.competing
        model.max_time_ = saved.model.max_time_
        model.history_ = pd.DataFrame(
            {
                "patient_id": pd.Series(dtype=object),
                "time": pd.Series(dtype=float),
                saved.model.marker: pd.Series(dtype=float),
            }
        )
        model.saved_versions_ = saved.versions
        return model

    def _history_for(self, table: pd.DataFrame) -> pd.DataFrame:
        """Stored measurements, plus measurements rebuilt from the rows of patients without a stored history."""
        marker = self.model_.marker
        keys = patient_key(table["patient_id"])
        unknown = ~np.isin(keys, self.history_["patient_id"].to_numpy())
        if not unknown.any():
            return self.history_
        rows = table.loc[unknown]
        s = prediction_origin(rows)
        value = pd.to_numeric(rows[marker], errors="coerce").to_numpy(dtype=float) if marker in rows else np.nan
        stale_name = staleness_column(marker)
        age = (
            pd.to_numeric(rows[stale_name], errors="coerce").to_numpy(dtype=float)
            if stale_name in rows
            else np.zeros(len(rows))
        )
        parts = [pd.DataFrame({"patient_id": keys[unknown], "time": np.clip(s - age, 0.0, None), marker: value})]
        change_name = f"{marker}_change"
        if change_name in rows:
            change = pd.to_numeric(rows[change_name], errors="coerce").to_numpy(dtype=float)
            parts.append(pd.DataFrame({"patient_id": keys[unknown], "time": 0.0, marker: value - change}))
        rebuilt = pd.concat(parts, ignore_index=True)
        rebuilt = rebuilt[np.isfinite(rebuilt[marker].to_numpy(dtype=float))]
        rebuilt = rebuilt.drop_duplicates(["patient_id", "time"], ignore_index=True)
        return pd.concat([self.history_, rebuilt], ignore_index=True)

    def predict_curve(self, table: pd.DataFrame, times: Sequence[float] | np.ndarray) -> np.ndarray:
        """Risk of the outcome in ``(s, s + t]`` for each row and each ``t`` (days) in ``times``."""
        if not hasattr(self, "model_"):
            raise ModelInputError("this model is not fitted yet; call fit(counting_process) first")
        if "patient_id" not in table.columns:
            raise ModelInputError("prediction table lacks 'patient_id'; the joint model finds each row's history by it")
        history = self._history_for(table)
        rows = table.assign(patient_id=patient_key(table["patient_id"]))
        return self.model_.predict_curve(rows, times, measurements=history)

    def predict_risk(self, table: pd.DataFrame, horizon: float) -> np.ndarray:
        """Probability of the outcome in ``(s, s + horizon]`` (days) for each row."""
        return self.predict_curve(table, [check_horizon(horizon)])[:, 0]

    def summary(self) -> pd.DataFrame:
        """Hazard terms of each cause in the layout of the other families' summaries.

        Columns ``cause, term, coef, se, hazard_ratio, hr_lower_95, hr_upper_95, p_value``; the term of the
        association with the current true marker value is the marker column itself (its hazard ratio is per
        unit of the true value), that of the slope ``<marker>_slope_per_year_true``. The marker submodel and
        the baseline hazards are in :meth:`joint_summary`.
        """
        from scipy.stats import norm

        structure = self.model_.structure_
        theta, cov = self.model_.theta_, self.model_.covariance_
        rows = []
        for c, (cause, terms) in enumerate(zip(("outcome", "competing"), structure.cause_terms)):
            _, sl_g, sl_a = structure.layout.cause_slices(c)
            names = [
                *structure.cause_covariates[c],
                *[self.model_.marker if t == "value" else f"{self.model_.marker}_slope_per_year_true" for t in terms],
            ]
            index = [*range(sl_g.start, sl_g.stop), *range(sl_a.start, sl_a.stop)]
            for name, k in zip(names, index):
                rows.append({"cause": cause, "term": name, "coef": theta[k], "se": np.sqrt(max(cov[k, k], 0.0))})
        out = pd.DataFrame.from_records(rows, columns=["cause", "term", "coef", "se"])
        z = norm.ppf(0.975)
        out["hazard_ratio"] = np.exp(out["coef"])
        out["hr_lower_95"] = np.exp(out["coef"] - z * out["se"])
        out["hr_upper_95"] = np.exp(out["coef"] + z * out["se"])
        out["p_value"] = 2 * norm.sf(np.abs(out["coef"] / out["se"]))
        return out

    def joint_summary(self) -> pd.DataFrame:
        """Every estimate of the joint model (see :meth:`riskbench.models.joint_model.JointModel.summary`)."""
        return self.model_.summary()
