"""``CoxModel``: the DataFrame estimator around :func:`riskbench.models.cox_engine.fit_cox`.

Fits a cause-specific Cox model to counting-process rows (``patient_id, start, stop, status`` plus
covariates as known at ``start``) and predicts, for each row, the risk of the outcome in
``(s, s + horizon]`` with the covariates frozen at their values at ``s`` (``landmark`` column if
present, else ``start``, else 0):

    risk = 1 - exp(-(H0(s + w) - H0(s)) · exp((x - center)·β)),

with ``H0`` the baseline cumulative hazard of the row's stratum.  Treating every status other than
``event_code`` as censoring makes this the cause-specific risk (it ignores competing events).
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import stats
from sklearn.base import BaseEstimator

from riskbench.models.cox_engine import CoxFit, fit_cox
from riskbench.models.cox_io import read_cox_file, save_cox_model
from riskbench.models.risk_contract import (
    ModelInputError,
    check_covariates,
    check_horizon,
    describe_rows,
    prediction_origin,
    risk_from_cumulative_hazard,
    step_function_at,
)

__all__ = ["CoxModel"]

_DEFAULT_CLUSTER = "patient_id"


class CoxModel(BaseEstimator):
    """Cox proportional-hazards model on counting-process rows (scikit-learn conventions).

    Parameters
    ----------
    covariates : column names of the covariates (values known at ``start``).
    ties : ``"efron"`` or ``"breslow"``.
    penalty : ridge penalty λ ≥ 0 on the standardised coefficients (lifelines' ``penalizer`` scale,
        see :func:`riskbench.models.cox_engine.fit_cox`).
    strata : column whose values get separate baseline hazards, or ``None``.
    weights : column of positive case weights, or ``None``.
    cluster : column of cluster labels for the robust (sandwich) variance. The default
        ``"patient_id"`` is used when the table has it and skipped otherwise; ``None`` disables it.
    event_code : value of ``status`` that counts as the event; every other value is censoring.

    Fitted attributes
    -----------------
    fit_ : :class:`~riskbench.models.cox_engine.CoxFit`.
    coef_, se_, robust_se_ : Series indexed by covariate (``robust_se_`` None without clusters).
    baseline_cumhaz_ : DataFrame ``stratum, time, cumhaz`` (days; at covariates ``center_``).
    center_ : Series of covariate means.
    time_scale_ : ``"since_entry"`` when fitted on ``stop`` (counting-process rows; predictions start at
        ``landmark``/``start``) or ``"since_landmark"`` when fitted on a stack's ``time`` (predictions
        start at 0 on that clock, since the stack's rows already begin at their landmark).
    """

    def __init__(
        self,
        covariates: Sequence[str],
        *,
        ties: str = "efron",
        penalty: float = 0.0,
        strata: str | None = None,
        weights: str | None = None,
        cluster: str | None = _DEFAULT_CLUSTER,
        event_code: int = 1,
    ) -> None:
        self.covariates = covariates
        self.ties = ties
        self.penalty = penalty
        self.strata = strata
        self.weights = weights
        self.cluster = cluster
        self.event_code = event_code

    # ------------------------------------------------------------------ fitting

    def fit(self, table: pd.DataFrame) -> CoxModel:
        """Fit on counting-process rows: ``stop`` (or ``time``), ``status``, optional ``start`` (default 0)."""
        arrays = self.fitting_arrays(table)
        fit = fit_cox(
            arrays["X"], arrays["stop"], arrays["event"], arrays["start"],
            strata=arrays["strata"], weights=arrays["weights"], cluster=arrays["cluster"],
            ties=self.ties, penalty=self.penalty, names=list(self.covariates),
        )
        self._set_fitted(fit, "since_entry" if "stop" in table.columns else "since_landmark")
        return self

    def fitting_arrays(self, table: pd.DataFrame) -> dict[str, np.ndarray | None]:
        """The arrays :func:`fit_cox` receives for ``table``: X, stop, event, start, strata, weights, cluster."""
        if not isinstance(table, pd.DataFrame):
            raise ModelInputError(f"CoxModel needs a DataFrame, got {type(table).__name__}.")
        X = check_covariates(table, list(self.covariates), what="fitting table")
        stop_col = "stop" if "stop" in table.columns else "time" if "time" in table.columns else None
        if stop_col is None or "status" not in table.columns:
            raise ModelInputError(
                "fitting table needs 'stop' (or 'time') and 'status' columns (counting-process rows: "
                f"patient_id, start, stop, status); it has {list(table.columns)[:20]}."
            )
        cluster = None
        if self.cluster is not None and (self.cluster in table.columns or self.cluster != _DEFAULT_CLUSTER):
            cluster = self._column(table, self.cluster, "cluster")
        return {
            "X": X,
            "stop": self._numeric(table, stop_col),
            "event": (self._numeric(table, "status") == self.event_code).astype(float),
            "start": self._numeric(table, "start") if "start" in table.columns and stop_col == "stop" else None,
            "strata": self._column(table, self.strata, "strata"),
            "weights": self._column(table, self.weights, "weights"),
            "cluster": cluster,
        }

    def _set_fitted(self, fit: CoxFit, time_scale: str) -> None:
        index = pd.Index(fit.names, name="covariate")
        self.fit_ = fit
        self.coef_ = pd.Series(fit.coef, index=index, name="coef")
        self.se_ = pd.Series(fit.se, index=index, name="se")
        self.robust_se_ = None if fit.robust_se is None else pd.Series(fit.robust_se, index=index, name="robust_se")
        self.center_ = pd.Series(fit.center, index=index, name="center")
        self.baseline_cumhaz_ = fit.baseline
        self.n_events_ = fit.n_events
        self.time_scale_ = time_scale
        # strata without events keep a zero cumulative hazard
        self._curves = {level: (np.empty(0), np.empty(0)) for level in fit.strata_levels}
        for level, grp in fit.baseline.groupby("stratum", sort=False):
            self._curves[level] = (grp["time"].to_numpy(float), grp["cumhaz"].to_numpy(float))

    @staticmethod
    def _numeric(table: pd.DataFrame, column: str) -> np.ndarray:
        values = pd.to_numeric(table[column], errors="coerce").to_numpy(dtype=float)
        bad = ~np.isfinite(values)
        if bad.any():
            raise ModelInputError(
                f"column '{column}' is missing or not a number in {describe_rows(table, bad)}; the cohort "
                "stage's counting-process rows always have it -- fit on the table it writes."
            )
        return values

    @staticmethod
    def _column(table: pd.DataFrame, column: str | None, role: str) -> np.ndarray | None:
        if column is None:
            return None
        if column not in table.columns:
            raise ModelInputError(f"{role} column '{column}' is not in the table; add it or pass {role}=None.")
        return table[column].to_numpy()

    def _check_fitted(self) -> None:
        if not hasattr(self, "fit_"):
            raise ModelInputError("this CoxModel is not fitted yet; call fit(table) first.")

    # ------------------------------------------------------------------ summaries

    def summary(self, alpha: float = 0.05) -> pd.DataFrame:
        """Coefficients with hazard ratios, (1 - alpha) intervals and Wald p-values.

        Intervals and p-values use the robust standard error when clusters were given, else the
        model-based one (column ``se_used`` says which).
        """
        self._check_fitted()
        use_robust = self.robust_se_ is not None
        se = self.robust_se_ if use_robust else self.se_
        z_crit = stats.norm.ppf(1 - alpha / 2)
        z = self.coef_ / se
        pct = f"{100 * (1 - alpha):g}"
        out = pd.DataFrame(
            {
                "coef": self.coef_,
                "se": self.se_,
                "robust_se": self.robust_se_ if use_robust else np.nan,
                "z": z,
                "p_value": 2 * stats.norm.sf(np.abs(z)),
                "hazard_ratio": np.exp(self.coef_),
                f"hr_lower_{pct}": np.exp(self.coef_ - z_crit * se),
                f"hr_upper_{pct}": np.exp(self.coef_ + z_crit * se),
            }
        )
        out["se_used"] = "robust" if use_robust else "model"
        return out

    # ------------------------------------------------------------------ prediction

    def _strata_of(self, table: pd.DataFrame) -> np.ndarray:
        if self.strata is None:
            return np.zeros(len(table), dtype=object)
        values = self._column(table, self.strata, "strata")
        unknown = ~pd.Series(values).isin(list(self._curves)).to_numpy()
        if unknown.any():
            raise ModelInputError(
                f"strata column '{self.strata}' has values not seen in fitting in "
                f"{describe_rows(table, unknown)}; a stratified model can only predict for its own strata "
                "(params strata of the model)."
            )
        return values

    def predict_log_relative_hazard(self, table: pd.DataFrame) -> np.ndarray:
        """``(x - center)·β`` per row (the log hazard ratio against the baseline)."""
        self._check_fitted()
        return self.fit_.linear_predictor(check_covariates(table, list(self.coef_.index), what="prediction table"))

    def predict_cumulative_hazard(self, table: pd.DataFrame, times: Sequence[float]) -> np.ndarray:
        """Cumulative hazard over ``(s, s + t]`` for each row and each ``t`` in ``times`` (days).

        Returns
        -------
        ndarray, shape (n_rows, len(times)).
        """
        times = np.atleast_1d(np.asarray(times, dtype=float))
        if (~np.isfinite(times)).any() or (times < 0).any():
            raise ModelInputError(f"times must be finite days >= 0, got {times[:5].tolist()}.")
        lp = self.predict_log_relative_hazard(table)
        # a model fitted on a landmark stack ('time' from the landmark) predicts from its own origin 0
        origin = prediction_origin(table) if self.time_scale_ == "since_entry" else np.zeros(len(table))
        strata = self._strata_of(table)
        out = np.empty((len(table), times.size))
        for level in pd.unique(strata):
            rows = np.flatnonzero(strata == level)
            jump_times, cumhaz = self._curves[level]
            at_origin = step_function_at(jump_times, cumhaz, origin[rows])
            later = step_function_at(jump_times, cumhaz, (origin[rows, None] + times[None, :]).ravel())
            out[rows] = later.reshape(rows.size, times.size) - at_origin[:, None]
        return out * np.exp(lp)[:, None]

    def predict_curve(self, table: pd.DataFrame, times: Sequence[float]) -> np.ndarray:
        """Risk of the event in ``(s, s + t]`` for each ``t`` in ``times`` (days): shape (n_rows, len(times))."""
        return risk_from_cumulative_hazard(self.predict_cumulative_hazard(table, times))

    def predict_survival(self, table: pd.DataFrame, times: Sequence[float]) -> np.ndarray:
        """Probability of no event in ``(s, s + t]``: ``1 - predict_curve``."""
        return np.exp(-self.predict_cumulative_hazard(table, times))

    def predict_risk(self, table: pd.DataFrame, horizon: float) -> np.ndarray:
        """Probability of the event in ``(s, s + horizon]`` (horizon in days) for each row."""
        return self.predict_curve(table, [check_horizon(horizon)])[:, 0]

    # ------------------------------------------------------------------ saving

    def to_json(self, path: str | Path) -> Path:
        """Write the fitted model (coefficients, variances, baseline, scaling, spec, versions) as JSON."""
        return save_cox_model(self, path)

    @classmethod
    def from_json(cls, path: str | Path) -> CoxModel:
        """Read a model written by :meth:`to_json`."""
        saved = read_cox_file(path)
        model = cls(**saved.params)
        model._set_fitted(saved.fit, saved.time_scale)
        model.saved_versions_ = saved.versions
        return model
