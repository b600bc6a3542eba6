"""Shared-random-effects joint model of one repeated marker and the outcome, with dynamic predictions.

The model (Henderson, Diggle & Dobson 2000, Biostatistics 1:465-480; Rizopoulos 2012, *Joint Models for
Longitudinal and Time-to-Event Data*, ch. 4; equations in :mod:`riskbench.models.joint_likelihood`):

* a linear mixed submodel of the marker with fixed effects of time (a line, or a natural cubic spline with
  ``time_knots`` interior knots) and baseline covariates, and a random intercept and slope;
* a proportional-hazards submodel of the outcome with baseline covariates and the current true marker value
  (``association="value"``), its slope (``"slope"``), both (``"value_slope"``) or neither (``"none"``), and a
  piecewise-constant baseline hazard with ``baseline_pieces`` pieces (knots at quantiles of the event times);
* with ``competing=True`` a cause-specific hazard of the competing event (status 2) of the same form, with its
  own covariates and, with ``competing_association=True``, the current marker value.

It is fitted by maximum likelihood (:mod:`riskbench.models.joint_fitting`): pseudo-adaptive Gauss–Hermite
quadrature over the random effects, Gauss–Legendre quadrature of the cumulative hazards, L-BFGS-B with the
exact gradient, standard errors from the observed information. Time is in years inside the model; every
time given to or returned by the public methods is in days since entry.

Prediction contract (:mod:`riskbench.models.risk_contract`): ``predict_risk(table, horizon)`` answers, for
each row (``patient_id``, ``landmark`` in days, the baseline covariates), the probability of the outcome in
``(landmark, landmark + horizon]`` given survival to the landmark and the patient's measurements taken at or
before the landmark -- the measurement history given to :meth:`JointModel.fit` or :meth:`JointModel.set_history`,
keyed by ``patient_id`` (see :mod:`riskbench.models.joint_prediction`). A measurement after a row's landmark
never changes its prediction, and neither do the other rows or horizons predicted in the same call.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd
from sklearn.base import BaseEstimator

from riskbench.models.joint_data import (
    History,
    build_arrays,
    check_survival,
    covariate_block,
    marker_history,
)
from riskbench.models.joint_design import TimeBasis
from riskbench.models.joint_fitting import (
    fit_joint,
    fit_marker,
    fit_two_stage,
    marker_only_posterior,
    newton_polish,
    observed_information,
)
from riskbench.models.joint_likelihood import JointArrays, ParameterLayout, joint_loglik
from riskbench.models.joint_prediction import (
    PredictionRows,
    marker_band,
    posterior_draws,
    risk_given_draws,
    rows_history,
)
from riskbench.models.joint_structure import JointStructure
from riskbench.models.risk_contract import ModelInputError, check_horizon, prediction_origin
from riskbench.models.row_streams import row_keys, row_normals
from riskbench.time_units import DAYS_PER_YEAR

__all__ = ["ASSOCIATIONS", "JointModel"]

#: Marker terms of the outcome hazard for each ``association`` value.
ASSOCIATIONS: dict[str, tuple[str, ...]] = {
    "value": ("value",),
    "slope": ("slope",),
    "value_slope": ("value", "slope"),
    "none": (),
}
_CELLS_PER_CHUNK = 3_000_000


class JointModel(BaseEstimator):
    """Joint model of a repeated marker and the outcome (with a competing event), fitted by maximum likelihood.

    Parameters
    ----------
    marker : str
        Column of the measurement table holding the marker value.
    measurement_time : str
        Column of the measurement table with the measurement time, days since entry.
    marker_covariates, event_covariates : sequence of str
        Baseline covariates of the marker's mean and of the outcome hazard (columns of the survival table
        and of prediction rows).
    competing_covariates : sequence of str or None
        Baseline covariates of the competing hazard (None: the outcome's).
    association : {"value", "slope", "value_slope", "none"}
        How the outcome hazard depends on the current true marker value and its slope.
    competing : bool
        Model the competing event (status 2) and predict the cumulative incidence of the outcome; otherwise
        status 2 is treated as censoring. Data without a competing event fit the outcome model alone.
    competing_association : bool
        The competing hazard depends on the current marker value too.
    time_knots : int
        Interior knots of a natural cubic spline of time in the marker's mean (0: a straight line).
    baseline_pieces : int
        Pieces of the piecewise-constant baseline hazards (knots at quantiles of the event times).
    hermite_points : int
        Gauss–Hermite nodes per random effect (the rule has ``hermite_points²`` nodes).
    legendre_points : int
        Gauss–Legendre nodes per baseline piece for the cumulative hazards.
    adaptive_rounds : int
        Times the quadrature is placed on the current posterior of the random effects and the likelihood
        maximised again.
    max_iter : int
        Iterations of each optimisation.
    prediction_draws : int
        Monte Carlo draws of the random effects per prediction row.
    grid_steps : int
        Steps per year of the product-integral's time grid (steps also end at the baseline knots; see
        :mod:`riskbench.models.joint_window`).
    random_state : int
        Seed of the Monte Carlo predictions; each row draws from its own stream, seeded by this and the row's
        data: landmark, covariates and measurement history (:mod:`riskbench.models.row_streams`).

    Attributes (after fit)
    ----------------------
    theta_ : ndarray, the estimates (internal scale; see :meth:`summary`)
    covariance_ : ndarray, inverse observed information
    loglik_ : float
    structure_ : JointStructure
    two_stage_theta_ : ndarray, the two-stage estimate (mixed model, then hazards given the fitted trajectories)
    marker_loglik_ : float, log-likelihood of the mixed model alone at its own maximum
    converged_ : bool
    fit_seconds_ : dict of str to float, time of each step
    max_time_ : float, longest follow-up in the fitting data (days)
    """

    def __init__(
        self,
        marker: str = "value",
        *,
        measurement_time: str = "time",
        marker_covariates: Sequence[str] = (),
        event_covariates: Sequence[str] = (),
        competing_covariates: Sequence[str] | None = None,
        association: str = "value",
        competing: bool = True,
        competing_association: bool = True,
        time_knots: int = 0,
        baseline_pieces: int = 6,
        hermite_points: int = 5,
        legendre_points: int = 7,
        adaptive_rounds: int = 2,
        max_iter: int = 1000,
        prediction_draws: int = 100,
        grid_steps: int = 6,
        random_state: int = 0,
    ) -> None:
        self.marker = marker
        self.measurement_time = measurement_time
        self.marker_covariates = marker_covariates
        self.event_covariates = event_covariates
        self.competing_covariates = competing_covariates
        self.association = association
        self.competing = competing
        self.competing_association = competing_association
        self.time_knots = time_knots
        self.baseline_pieces = baseline_pieces
        self.hermite_points = hermite_points
        self.legendre_points = legendre_points
        self.adaptive_rounds = adaptive_rounds
        self.max_iter = max_iter
        self.prediction_draws = prediction_draws
        self.grid_steps = grid_steps
        self.random_state = random_state

    # ------------------------------------------------------------------ fitting
    def _check_params(self) -> None:
        if self.association not in ASSOCIATIONS:
            raise ModelInputError(f"association must be one of {sorted(ASSOCIATIONS)}, got {self.association!r}")
        for name, low in (
            ("baseline_pieces", 1),
            ("hermite_points", 1),
            ("legendre_points", 1),
            ("adaptive_rounds", 1),
            ("max_iter", 1),
            ("prediction_draws", 1),
            ("grid_steps", 1),
            ("time_knots", 0),
        ):
            value = getattr(self, name)
            if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < low:
                raise ModelInputError(f"{name} must be an integer >= {low}, got {value!r}")

    def _cause_setup(self, competing: bool) -> tuple[tuple[tuple[str, ...], ...], tuple[tuple[str, ...], ...]]:
        event = tuple(self.event_covariates)
        terms: list[tuple[str, ...]] = [ASSOCIATIONS[self.association]]
        covariates = [event]
        if competing:
            terms.append(("value",) if self.competing_association else ())
            covariates.append(event if self.competing_covariates is None else tuple(self.competing_covariates))
        return tuple(terms), tuple(covariates)

    def fit(self, measurements: pd.DataFrame, survival: pd.DataFrame) -> JointModel:
        """Fit the joint model.

        Parameters
        ----------
        measurements : DataFrame
            One row per measurement: ``patient_id``, ``measurement_time`` (days since entry), ``marker``.
            Measurements after a patient's event or censoring are refused.
        survival : DataFrame
            One row per patient: ``patient_id``, ``time`` (days to the event or censoring), ``status``
            (0 censored, 1 outcome, 2 competing event), and the covariates.

        Returns
        -------
        self
        """
        import time as clock

        self._check_params()
        timings: dict[str, float] = {}
        started = clock.perf_counter()
        ids, end, status = check_survival(survival)
        if not self.competing:
            status = np.where(status == 2, 0, status)
        # without a competing event in the data there is nothing to fit for it: the outcome model alone
        cause_terms, cause_covariates = self._cause_setup(bool(self.competing and (status == 2).any()))
        marker_x = covariate_block(survival, list(self.marker_covariates), "survival table")
        cause_x = [covariate_block(survival, list(c), "survival table") for c in cause_covariates]
        marker_means = marker_x.mean(axis=0)
        cause_means = tuple(x.mean(axis=0) for x in cause_x)
        history = marker_history(
            measurements, ids, time_column=self.measurement_time, marker=self.marker, end_years=end
        )
        if (status == 1).sum() == 0:
            raise ModelInputError("survival table has no outcome (status 1); the joint model needs events to fit")
        if len(history.time) == 0:
            raise ModelInputError("measurement table has no rows; the joint model needs marker measurements")
        basis = TimeBasis.from_times(history.time, int(self.time_knots))
        event_times = end[status > 0]
        knots = np.unique(
            np.concatenate([[0.0], np.quantile(event_times, np.arange(1, self.baseline_pieces) / self.baseline_pieces)])
        )
        knots = knots[(knots == 0) | (knots < event_times.max())]
        layout = ParameterLayout(
            1 + basis.n_columns + marker_x.shape[1],
            len(knots),
            tuple((x.shape[1], len(t)) for x, t in zip(cause_x, cause_terms)),
        )
        centred = [x - m for x, m in zip(cause_x, cause_means)]
        arrays = build_arrays(
            history, end, status, marker_x - marker_means, centred, cause_terms, basis, knots, int(self.legendre_points)
        )
        self.structure_ = JointStructure(
            layout,
            basis,
            knots,
            cause_terms,
            tuple(self.marker_covariates),
            cause_covariates,
            marker_means,
            cause_means,
            int(self.legendre_points),
        )
        timings["prepare"] = clock.perf_counter() - started

        started = clock.perf_counter()
        marker_fit = fit_marker(arrays, layout, int(self.max_iter))
        self.marker_loglik_ = marker_fit.loglik
        centre, covariance = marker_only_posterior(arrays, layout, marker_fit.theta)
        timings["mixed_model"] = clock.perf_counter() - started
        started = clock.perf_counter()
        two_stage = fit_two_stage(arrays, layout, marker_fit.theta, centre, knots, int(self.max_iter))
        self.two_stage_theta_ = two_stage.theta
        timings["two_stage_hazards"] = clock.perf_counter() - started

        started = clock.perf_counter()
        result, points, log_weight = fit_joint(
            arrays,
            layout,
            two_stage.theta,
            centre,
            covariance,
            hermite_points=int(self.hermite_points),
            adaptive_rounds=int(self.adaptive_rounds),
            max_iter=int(self.max_iter),
        )
        timings["joint"] = clock.perf_counter() - started

        started = clock.perf_counter()
        self._finish(arrays, layout, result.theta, points, log_weight)
        self.converged_ = bool(result.converged or np.max(np.abs(self.gradient_)) < 1e-3)
        self.optimiser_message_ = result.message
        timings["information"] = clock.perf_counter() - started
        self.fit_seconds_ = timings
        self.max_time_ = float(end.max() * DAYS_PER_YEAR)
        self.n_patients_ = len(ids)
        self.n_measurements_ = len(history.time)
        self.n_events_ = (int((status == 1).sum()), int((status == 2).sum()))
        self._store_history(ids, history)
        return self

    def _finish(
        self,
        arrays: JointArrays,
        layout: ParameterLayout,
        theta: np.ndarray,
        points: np.ndarray,
        log_weight: np.ndarray,
    ) -> None:
        """Observed information, Newton polish, covariance."""

        def objective(th: np.ndarray) -> tuple[float, np.ndarray]:
            ll, grad, _ = joint_loglik(th, arrays, layout, points, log_weight)
            return ll, grad

        def gradient(th: np.ndarray) -> np.ndarray:
            return objective(th)[1]

        # one information matrix serves the polishing steps and the covariance: the steps are tiny
        # (the optimiser stops with a gradient near 0), so the matrix barely changes over them
        information = observed_information(gradient, theta)
        theta, loglik = newton_polish(objective, theta, information)
        self.theta_ = theta
        self.loglik_ = loglik
        self.gradient_ = gradient(theta)
        self.information_ = information
        try:
            self.covariance_ = np.linalg.inv(information)
        except np.linalg.LinAlgError:
            self.covariance_ = np.linalg.pinv(information)

    def _store_history(self, ids: np.ndarray, history: History) -> None:
        order = np.lexsort((history.time, history.patient))
        self.history_ids_ = np.asarray(ids)
        self.history_ = History(history.patient[order], history.time[order], history.value[order])

    def set_history(self, measurements: pd.DataFrame) -> JointModel:
        """Replace the measurement history used by predictions (e.g. measurements of new patients).

        ``measurements`` has the columns of :meth:`fit`'s measurement table; only measurements at or before
        a prediction row's landmark are used for that row.
        """
        self._check_fitted()
        ids = pd.unique(measurements["patient_id"]) if "patient_id" in measurements.columns else np.array([])
        history = marker_history(measurements, np.asarray(ids), time_column=self.measurement_time, marker=self.marker)
        self._store_history(np.asarray(ids), history)
        return self

    def _check_fitted(self) -> None:
        if not hasattr(self, "theta_"):
            raise ModelInputError("this JointModel is not fitted yet; call fit(measurements, survival) first")

    # ------------------------------------------------------------------ prediction
    def _rows(
        self, table: pd.DataFrame, measurements: pd.DataFrame | None = None
    ) -> tuple[PredictionRows, list[bytes]]:
        """The prediction rows and each row's identity (the key of its random stream): its landmark, covariates
        and measurement history, all that its prediction depends on."""
        structure = self.structure_
        landmark = prediction_origin(table) / DAYS_PER_YEAR
        if "patient_id" not in table.columns:
            raise ModelInputError(
                "prediction table lacks 'patient_id'; the joint model finds each row's measurement history by it"
            )
        ids, stored = self.history_ids_, self.history_
        if measurements is not None:
            ids = np.asarray(pd.unique(measurements["patient_id"]))
            found = marker_history(measurements, ids, time_column=self.measurement_time, marker=self.marker)
            order = np.lexsort((found.time, found.patient))
            stored = History(found.patient[order], found.time[order], found.value[order])
        row_patient = pd.Index(ids).get_indexer(table["patient_id"].to_numpy())
        history = rows_history(stored, row_patient, landmark)
        marker_x = covariate_block(table, list(structure.marker_covariates), "prediction table")
        cause_x = tuple(
            covariate_block(table, list(c), "prediction table") - m
            for c, m in zip(structure.cause_covariates, structure.cause_means)
        )
        rows = PredictionRows(landmark, history, marker_x - structure.marker_means, cause_x)
        columns = np.column_stack([landmark, rows.marker_x, *cause_x])
        return rows, row_keys(columns, history.patient, np.column_stack([history.time, history.value]))

    def _chunks(self, n_rows: int, width: int) -> list[slice]:
        size = max(1, _CELLS_PER_CHUNK // max(1, int(self.prediction_draws) * width))
        return [slice(i, min(i + size, n_rows)) for i in range(0, n_rows, size)]

    def predict_curve(
        self, table: pd.DataFrame, times: Sequence[float] | np.ndarray, *, measurements: pd.DataFrame | None = None
    ) -> np.ndarray:
        """Risk of the outcome in ``(s, s + t]`` for each row and each ``t`` in ``times`` (days).

        ``measurements`` (columns as in :meth:`fit`) replaces the stored history for this call.

        Returns
        -------
        ndarray (n_rows, len(times)), non-decreasing in ``t``, in [0, 1], 0 at ``t = 0``.
        """
        self._check_fitted()
        horizons = np.asarray(times, dtype=float) / DAYS_PER_YEAR
        if np.any(~np.isfinite(horizons)) or np.any(horizons < 0):
            raise ModelInputError(f"times must be non-negative numbers of days, got {list(times)[:5]}")
        rows, keys = self._rows(table, measurements)
        out = np.zeros((len(rows), len(horizons)))
        top = float(horizons.max()) if len(horizons) else 0.0
        knots = len(self.structure_.knots)
        width = int(np.ceil(top * self.grid_steps)) + 2 * knots + len(horizons) + knots * self.legendre_points
        for part in self._chunks(len(rows), width):
            sub = rows.subset(part)
            z = row_normals(self.random_state, keys[part], (int(self.prediction_draws), 2))
            draws, weights = posterior_draws(self.structure_, self.theta_, sub, z)
            out[part] = risk_given_draws(
                self.structure_, self.theta_, sub, draws, weights, horizons, int(self.grid_steps)
            )
        return np.clip(out, 0.0, 1.0)

    def predict_risk(
        self, table: pd.DataFrame, horizon: float, *, measurements: pd.DataFrame | None = None
    ) -> np.ndarray:
        """Probability of the outcome in ``(s, s + horizon]`` (days) for each row (see the module docstring)."""
        self._check_fitted()
        return self.predict_curve(table, [check_horizon(horizon)], measurements=measurements)[:, 0]

    def dynamic_prediction(
        self,
        table: pd.DataFrame,
        horizons: Sequence[float],
        *,
        parameter_draws: int = 200,
        draws_per_parameter: int = 50,
        seed: int | None = None,
    ) -> pd.DataFrame:
        """Rizopoulos' (2011) Monte Carlo dynamic prediction with parameter uncertainty, for a few rows.

        For each of ``parameter_draws`` draws ``θ⁽ᵐ⁾ ~ N(θ̂, covariance_)`` the risk is averaged over
        ``draws_per_parameter`` posterior draws of ``b``; the table gives, per row and horizon (days), the mean
        and median of those risks and their 2.5% and 97.5% quantiles. The parameter draws come from the seed
        alone and each row's draws of ``b`` from its own stream, so a row's numbers do not depend on the others.
        """
        self._check_fitted()
        seed = self.random_state if seed is None else seed
        rng = np.random.default_rng(seed)
        rows, keys = self._rows(table)
        horizons_years = np.asarray(horizons, dtype=float) / DAYS_PER_YEAR
        chol = np.linalg.cholesky(_nearest_positive(self.covariance_))
        risks = np.empty((parameter_draws, len(rows), len(horizons_years)))
        for m in range(parameter_draws):
            theta = self.theta_ + chol @ rng.standard_normal(len(self.theta_))
            z = row_normals(seed, keys, (draws_per_parameter, 2), stream=m + 1)
            draws, weights = posterior_draws(self.structure_, theta, rows, z)
            risks[m] = risk_given_draws(
                self.structure_, theta, rows, draws, weights, horizons_years, int(self.grid_steps)
            )
        records = []
        for i in range(len(rows)):
            for h, horizon in enumerate(horizons):
                values = risks[:, i, h]
                records.append(
                    {
                        "row": i,
                        "landmark_days": rows.landmark[i] * DAYS_PER_YEAR,
                        "horizon_days": float(horizon),
                        "risk_mean": float(values.mean()),
                        "risk_median": float(np.median(values)),
                        "risk_lower_95": float(np.quantile(values, 0.025)),
                        "risk_upper_95": float(np.quantile(values, 0.975)),
                    }
                )
        return pd.DataFrame.from_records(records)

    def marker_trajectory(
        self, table: pd.DataFrame, times: Sequence[float] | np.ndarray, level: float = 0.95
    ) -> pd.DataFrame:
        """Predicted true marker value (posterior mean and pointwise band) at ``times`` (days since entry).

        Each row uses its measurements up to its landmark and its survival to the landmark.
        """
        self._check_fitted()
        rows, keys = self._rows(table)
        z = row_normals(self.random_state, keys, (int(self.prediction_draws), 2))
        draws, weights = posterior_draws(self.structure_, self.theta_, rows, z)
        grid = np.asarray(times, dtype=float) / DAYS_PER_YEAR
        mean, lower, upper = marker_band(self.structure_, self.theta_, rows, draws, weights, grid, level)
        n, t = mean.shape
        return pd.DataFrame(
            {
                "row": np.repeat(np.arange(n), t),
                "time_days": np.tile(grid * DAYS_PER_YEAR, n),
                "marker_mean": mean.ravel(),
                "marker_lower": lower.ravel(),
                "marker_upper": upper.ravel(),
            }
        )

    # ------------------------------------------------------------------ reporting
    def summary(self, level: float = 0.95) -> pd.DataFrame:
        """Estimates with standard errors (observed information) and Wald intervals.

        Rows: every parameter (time in years; baseline hazards per year; the marker intercept and the
        baseline hazards at the training means of the covariates), then the derived variance components
        (residual SD, random-intercept and slope SDs, their correlation; delta method).
        """
        from scipy.stats import norm

        self._check_fitted()
        z = float(norm.ppf(0.5 + level / 2))
        names = self.structure_.parameter_names()
        se = np.sqrt(np.clip(np.diag(self.covariance_), 0.0, None))
        rows = [{"parameter": n, "estimate": e, "std_error": s} for n, e, s in zip(names, self.theta_, se)]
        for name, value, grad in self._variance_components():
            rows.append(
                {
                    "parameter": name,
                    "estimate": value,
                    "std_error": float(np.sqrt(max(grad @ self.covariance_ @ grad, 0.0))),
                }
            )
        out = pd.DataFrame.from_records(rows)
        out["ci_lower"] = out["estimate"] - z * out["std_error"]
        out["ci_upper"] = out["estimate"] + z * out["std_error"]
        return out

    def _variance_components(self) -> list[tuple[str, float, np.ndarray]]:
        """(name, value, gradient in θ) of σ, SD(b₀), SD(b₁) and corr(b₀, b₁) (numerical gradient)."""
        p = self.structure_.layout.n_fixed

        def components(theta: np.ndarray) -> np.ndarray:
            l11, l21, l22 = np.exp(theta[p + 1]), theta[p + 2], np.exp(theta[p + 3])
            sd0, sd1 = l11, np.hypot(l21, l22)
            return np.array([np.exp(theta[p]), sd0, sd1, l21 / sd1])

        value = components(self.theta_)
        jac = np.zeros((4, len(self.theta_)))
        for j in range(p, p + 4):
            e = np.zeros(len(self.theta_))
            e[j] = 1e-6
            jac[:, j] = (components(self.theta_ + e) - components(self.theta_ - e)) / 2e-6
        labels = (
            "marker: residual SD",
            "marker: random-intercept SD",
            "marker: random-slope SD per year",
            "marker: random intercept-slope correlation",
        )
        return [(label, float(v), jac[k]) for k, (label, v) in enumerate(zip(labels, value))]

    def coefficient(self, name: str) -> tuple[float, float]:
        """Estimate and standard error of the parameter whose summary name is ``name``."""
        table = self.summary()
        match = table[table["parameter"] == name]
        if match.empty:
            raise ModelInputError(f"no parameter {name!r}; parameters: {list(table['parameter'])}")
        return float(match["estimate"].iloc[0]), float(match["std_error"].iloc[0])


def _nearest_positive(matrix: np.ndarray) -> np.ndarray:
    """Symmetric positive-definite matrix nearest to ``matrix`` (eigenvalues floored)."""
    sym = 0.5 * (matrix + matrix.T)
    values, vectors = np.linalg.eigh(sym)
    floor = max(1e-12, 1e-10 * float(np.abs(values).max()))
    return (vectors * np.maximum(values, floor)) @ vectors.T
