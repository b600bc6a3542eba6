"""``CoxModel``: the DataFrame estimator around :func:`riskbench.models.cox_engine.fit_cox`.

Fits a cause-specific Cox model to counting-process rows (``patient_id, start, stop, status`` plus
covariates as known at ``start``) and predicts, for each row, the risk of the outcome in
``(s, s + horizon]`` with the covariates frozen at their values at ``s`` (``landmark`` column if
present, else ``start``, else 0):

    risk = 1 - exp(-(H0(s + w) - H0(s)) · exp((x - center)·β)),

with ``H0`` the baseline cumulative hazard of the row's stratum.  Treating every status other than
``event_code`` as censoring makes this the cause-specific risk (it ignores competing events).

The columns are chosen by name (``stop_column``, ``start_column``, ``status_column``, ``cluster``), so a
published dataset can be fitted as it comes. Standard errors are model-based unless ``variance="robust"`` asks
for the cluster-robust sandwich by ``cluster``; :meth:`CoxModel.fit_summary` says which one it shows.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import stats
from sklearn.base import BaseEstimator

from riskbench.models.cox_engine import CoxFit, fit_cox
from riskbench.models.cox_io import read_cox_file, save_cox_model
from riskbench.models.cox_summary import VARIANCES, CoxSummary, stratified_concordance
from riskbench.models.risk_contract import (
    ModelInputError,
    check_covariates,
    check_horizon,
    describe_rows,
    prediction_origin,
    risk_from_cumulative_hazard,
    step_function_at,
)

__all__ = ["CoxModel", "FittingArrays"]

_DEFAULT_CLUSTER = "patient_id"


@dataclass(frozen=True)
class FittingArrays:
    """The arrays :func:`fit_cox` receives for a table (``start``, ``strata``, ``weights``, ``cluster`` may be absent).

    ``stop``/``start`` in days, ``event`` 1.0 for the event and 0.0 otherwise, ``cluster`` the id column's values.
    """

    X: np.ndarray
    stop: np.ndarray
    event: np.ndarray
    start: np.ndarray | None
    strata: np.ndarray | None
    weights: np.ndarray | None
    cluster: np.ndarray | None


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
    cluster : the id column (patient of each row): the clusters of the robust variance and the patient count
        of :meth:`fit_summary`. Default ``"patient_id"``; a table without it has no patient count.
    variance : ``"model"`` (default: the inverse information, as common statistical software reports without
        a cluster term) or ``"robust"`` (the cluster-robust sandwich of Lin & Wei 1989 by ``cluster``, which the
        table must then have). The coefficient table and the Wald test use the chosen one.
    event_code : value of the status column that counts as the event; every other value is censoring.
    stop_column : column of interval ends (days). ``None`` (default) takes ``"stop"`` when the table has it,
        else ``"time"``. A stop column named ``"time"`` is a landmark stack's time since the landmark: the start
        column is then ignored and predictions start at 0 on that clock.
    start_column : column of interval starts (days; rows are ``(start, stop]``), used when the table has it;
        without it every row starts at 0. ``None`` never reads one.
    status_column : column of status codes (default ``"status"``).

    Fitted attributes
    -----------------
    fit_ : :class:`~riskbench.models.cox_engine.CoxFit`.
    coef_, se_, robust_se_ : Series indexed by covariate (``robust_se_`` None without clusters).
    baseline_cumhaz_ : DataFrame ``stratum, time, cumhaz`` (days; at covariates ``center_``).
    center_ : Series of covariate means.
    time_scale_ : ``"since_entry"`` when fitted on ``stop`` (counting-process rows; predictions start at
        ``landmark``, else at the start column) or ``"since_landmark"`` when fitted on a stack's ``time`` (predictions
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
        variance: str = "model",
        event_code: int = 1,
        stop_column: str | None = None,
        start_column: str | None = "start",
        status_column: str = "status",
    ) -> None:
        self.covariates = covariates
        self.ties = ties
        self.penalty = penalty
        self.strata = strata
        self.weights = weights
        self.cluster = cluster
        self.variance = variance
        self.event_code = event_code
        self.stop_column = stop_column
        self.start_column = start_column
        self.status_column = status_column

    # ------------------------------------------------------------------ fitting

    def fit(self, table: pd.DataFrame) -> CoxModel:
        """Fit on rows with a stop column (``stop``/``time``), a status column and optionally a start column."""
        arrays = self.fitting_arrays(table)
        fit = fit_cox(
            arrays.X,
            arrays.stop,
            arrays.event,
            arrays.start,
            strata=arrays.strata,
            weights=arrays.weights,
            cluster=arrays.cluster if self.variance == "robust" else None,
            ties=self.ties,
            penalty=self.penalty,
            names=list(self.covariates),
        )
        self._set_fitted(fit, "since_landmark" if self._stop_column(table) == "time" else "since_entry")
        return self

    def _stop_column(self, table: pd.DataFrame) -> str:
        if self.stop_column is not None:
            return self.stop_column
        return "stop" if "stop" in table.columns else "time"

    def fitting_arrays(self, table: pd.DataFrame) -> FittingArrays:
        """The arrays :func:`fit_cox` receives for ``table``: X, stop, event, start, strata, weights, cluster."""
        if not isinstance(table, pd.DataFrame):
            raise ModelInputError(f"CoxModel needs a DataFrame, got {type(table).__name__}.")
        if self.variance not in VARIANCES:
            raise ModelInputError(f"variance={self.variance!r}; use one of {sorted(VARIANCES)}.")
        X = check_covariates(table, list(self.covariates), what="fitting table")
        stop_col = self._stop_column(table)
        missing = [c for c in (stop_col, self.status_column) if c not in table.columns]
        if missing:
            raise ModelInputError(
                f"fitting table has no column(s) {missing}: name the interval end with stop_column= and the status "
                f"codes with status_column= (the cohort stage writes 'start', 'stop', 'status'); it has "
                f"{list(table.columns)[:20]}."
            )
        if self.variance == "robust" and (self.cluster is None or self.cluster not in table.columns):
            raise ModelInputError(
                f"variance='robust' clusters by the id column cluster={self.cluster!r}, which the table does not "
                "have; name the patient id column with cluster= or use variance='model'."
            )
        use_start = self.start_column is not None and self.start_column in table.columns and stop_col != "time"
        return FittingArrays(
            X=X,
            stop=self._numeric(table, stop_col),
            event=(self._numeric(table, self.status_column) == self.event_code).astype(float),
            start=self._numeric(table, self.start_column) if use_start and self.start_column else None,
            strata=self._column(table, self.strata, "strata"),
            weights=self._column(table, self.weights, "weights"),
            cluster=table[self.cluster].to_numpy() if self.cluster in table.columns else None,
        )

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

        Intervals and p-values use the standard errors chosen by ``variance`` (model-based by default;
        column ``se_used`` says which). :meth:`fit_summary` adds sizes, likelihoods, global tests and
        concordance.
        """
        self._check_fitted()
        use_robust = self.variance == "robust" and self.robust_se_ is not None
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

    def fit_summary(self, table: pd.DataFrame, alpha: float = 0.05) -> CoxSummary:
        """Sizes, −2 log L, the global likelihood-ratio, score and Wald tests, Harrell's C and the coefficients.

        Parameters
        ----------
        table : the rows the model was fitted on (for the patient count and the concordance).
        alpha : 1 − confidence level of the hazard-ratio intervals.
        """
        self._check_fitted()
        fit = self.fit_
        arrays = self.fitting_arrays(table)
        event = arrays.event
        if int(event.sum()) != fit.n_events or len(table) != fit.n_rows:
            raise ModelInputError(
                f"table has {len(table)} rows and {int(event.sum())} events but the model was fitted on "
                f"{fit.n_rows} rows and {fit.n_events} events; pass the table the model was fitted on."
            )
        start = np.zeros_like(arrays.stop) if arrays.start is None else arrays.start
        cluster = arrays.cluster
        lp = fit.linear_predictor(arrays.X)
        c_index, c_se = stratified_concordance(start, arrays.stop, event.astype(int), lp, arrays.strata, cluster)
        robust = self.variance == "robust" and fit.robust_wald_test is not None
        return CoxSummary(
            coefficients=self.summary(alpha),
            n_rows=fit.n_rows,
            n_patients=None if cluster is None else int(pd.Series(cluster).nunique()),
            n_events=fit.n_events,
            minus2_loglik_null=-2.0 * fit.loglik_null,
            minus2_loglik=-2.0 * fit.loglik,
            likelihood_ratio=fit.lr_test,
            score=fit.score_test,
            wald=fit.robust_wald_test if robust and fit.robust_wald_test is not None else fit.wald_test,
            concordance=float(c_index),
            concordance_se=float(c_se),
            variance="robust" if robust else "model",
            ties=fit.ties,
            penalty=fit.penalty,
            alpha=float(alpha),
        )

    # ------------------------------------------------------------------ prediction

    def _strata_of(self, table: pd.DataFrame) -> np.ndarray:
        if self.strata is None:
            return np.zeros(len(table), dtype=object)
        values = self._column(table, self.strata, "strata")
        assert values is not None  # strata is set here, and _column raises for a missing column
        unknown = ~pd.Series(values).isin(list(self._curves)).to_numpy()
        if unknown.any():
            raise ModelInputError(
                f"strata column '{self.strata}' has values not seen in fitting in "
                f"{describe_rows(table, unknown)}; a stratified model can only predict for its own strata "
                "(params strata of the model)."
            )
        return values

    def _origin(self, table: pd.DataFrame) -> np.ndarray:
        """Days since entry from which each row is predicted: ``landmark``, else the start column, else 0."""
        if "landmark" not in table.columns and self.start_column is not None and self.start_column in table.columns:
            return self._numeric(table, self.start_column)
        return prediction_origin(table)

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
        days = np.atleast_1d(np.asarray(times, dtype=float))
        if (~np.isfinite(days)).any() or (days < 0).any():
            raise ModelInputError(f"times must be finite days >= 0, got {days[:5].tolist()}.")
        lp = self.predict_log_relative_hazard(table)
        # a model fitted on a landmark stack ('time' from the landmark) predicts from its own origin 0
        origin = self._origin(table) if self.time_scale_ == "since_entry" else np.zeros(len(table))
        strata = self._strata_of(table)
        out = np.empty((len(table), days.size))
        for level in pd.unique(strata):
            rows = np.flatnonzero(strata == level)
            jump_times, cumhaz = self._curves[level]
            at_origin = step_function_at(jump_times, cumhaz, origin[rows])
            later = step_function_at(jump_times, cumhaz, (origin[rows, None] + days[None, :]).ravel())
            out[rows] = later.reshape(rows.size, days.size) - at_origin[:, None]
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
