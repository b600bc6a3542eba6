"""Landmark super-model: dynamic prediction of the outcome in (s, s + w] from a landmark stack.

Method (van Houwelingen 2007, Scand J Stat 34:70-85; van Houwelingen & Putter 2012, *Dynamic Prediction in
Clinical Survival Analysis*, ch. 7-8): every landmark row of the stack (``patient_id, landmark, time, status``
plus covariates as known at the landmark ``s``; ``time`` counts days from ``s`` and is administratively
censored at the horizon ``w``) is one Cox observation with entry 0 and exit ``time``. One Cox model is fitted
on the whole stack:

* ``baseline="stratified"``: a separate Breslow baseline per landmark (strata = landmark). Predictions are
  only available at the fitted landmarks.
* ``baseline="smooth"``: one pooled baseline times ``exp(θ₁·s/S + θ₂·(s/S)²)`` -- the landmark terms enter as
  covariates (``landmark_s``, ``landmark_s2``; only the linear one with two distinct landmarks, none with
  one). ``S`` is the largest fitted landmark, so the terms stay in [0, 1]. Predictions are available at
  any s in the fitted range (interpolation between landmarks is the point of the super-model).
* ``landmark_effects``: coefficients that vary smoothly with the landmark,
  β(s) = β₀ + β₁·(s/S) + β₂·(s/S)², through interaction columns ``<covariate>:s`` and ``<covariate>:s2``
  (``"none"``, ``"linear"`` or ``"quadratic"``). The default is ``"linear"``: one extra coefficient per
  covariate instead of two, which keeps the events per parameter higher; test the quadratic form against it
  with :func:`riskbench.validation.landmark_form.landmark_form_test` (a likelihood-ratio test).
* :meth:`LandmarkSupermodel.landmark_effect_bands` gives β(s) with pointwise Wald intervals from the delta
  method: Var β̂(s) = gᵀ V g with g = (1, s/S, (s/S)²) over the covariate's coefficients and V the
  cluster-robust covariance.
* Variance: the stack repeats patients, so the reported variance is the cluster-robust (sandwich) variance
  by ``patient_id`` (Lin & Wei 1989); the model-based one is kept as ``var_``.
* Competing event (status 2) with ``competing=True``: a second cause-specific model of the same form for the
  competing event; the risk of the outcome in (s, s + w] is the cumulative incidence from the two
  cause-specific Breslow hazards given the covariates, combined by the Aalen–Johansen product-integral
  (:func:`riskbench.models.risk_contract.cumulative_incidence`). Without a competing model the risk is
  ``1 - prod(1 - dΛ₁)``, the product-limit form of ``1 - exp(-Λ₁)``.

The baseline hazards are Breslow estimates at the training means of the design columns, recomputed here
from the fitted coefficients (the Efron partial likelihood is used for the coefficients when ``ties="efron"``).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike
from sklearn.base import BaseEstimator

from riskbench.models.cox_engine import CoxInputError, fit_cox
from riskbench.models.landmark_io import read_landmark_file, save_landmark_model
from riskbench.models.risk_contract import (
    ModelInputError,
    check_covariates,
    check_horizon,
    check_stack_outcome,
    cumulative_incidence_at,
    prediction_origin,
)

__all__ = ["CauseSpecificFit", "LandmarkSupermodel"]

_EFFECT_POWERS = {"none": 0, "linear": 1, "quadratic": 2}


@dataclass(frozen=True)
class CauseSpecificFit:
    """One cause-specific Cox fit on the stack.

    Attributes
    ----------
    coef : ndarray (p,)
        Log hazard ratios per design column.
    var, robust_var : ndarray (p, p)
        Model-based and cluster-robust (by patient) covariance (``robust_var`` all NaN when the fit was asked
        not to compute it, see :meth:`LandmarkSupermodel.fit`).
    means : ndarray (p,)
        Training means of the design columns (the baseline hazard refers to them).
    baseline : dict
        stratum -> (event times in days from the landmark, Breslow hazard increments at those times).
    n_events : int
    loglik, loglik_null : float
        Maximised log partial likelihood and its value at zero coefficients (NaN for a fit read from a file
        written before they were saved).
    converged : bool
        Whether Newton–Raphson met its convergence rule (True for a fit read from a file).
    """

    coef: np.ndarray
    var: np.ndarray
    robust_var: np.ndarray
    means: np.ndarray
    baseline: dict[float, tuple[np.ndarray, np.ndarray]]
    n_events: int
    loglik: float = float("nan")
    loglik_null: float = float("nan")
    converged: bool = True


def _fit_cox_arrays(
    design: np.ndarray,
    time: np.ndarray,
    event: np.ndarray,
    *,
    strata: np.ndarray,
    cluster: np.ndarray | None,
    ties: str,
    names: Sequence[str],
    initial: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, float, float, bool]:
    """Cox fit of one cause on the stack (entry 0, exit ``time``): coef, model-based and robust covariance,
    log partial likelihood at the fit and at zero, and whether it converged.

    The coefficients come from :func:`riskbench.models.cox_engine.fit_cox` (Newton–Raphson from ``initial``
    or 0, cluster-robust sandwich variance by ``cluster``; all NaN when ``cluster`` is None).
    """
    fit = fit_cox(design, time, event, strata=strata, cluster=cluster, ties=ties, names=names, initial=initial)
    p = len(fit.coef)
    return (
        np.asarray(fit.coef),
        np.asarray(fit.var),
        np.full((p, p), np.nan) if fit.robust_var is None else np.asarray(fit.robust_var),
        float(fit.loglik),
        float(fit.loglik_null),
        bool(fit.converged),
    )


def _breslow_increments(
    time: np.ndarray, event: np.ndarray, risk_score: np.ndarray, strata: np.ndarray
) -> dict[float, tuple[np.ndarray, np.ndarray]]:
    """Breslow increments d(t) / sum_{time >= t} exp(lp) per stratum (all rows enter at 0)."""
    out: dict[float, tuple[np.ndarray, np.ndarray]] = {}
    for stratum in np.unique(strata):
        mask = strata == stratum
        t, e, r = time[mask], event[mask], risk_score[mask]
        unique, inverse = np.unique(t, return_inverse=True)
        deaths = np.bincount(inverse, weights=e, minlength=len(unique))
        at_risk = np.cumsum(np.bincount(inverse, weights=r, minlength=len(unique))[::-1])[::-1]
        keep = deaths > 0
        out[float(stratum)] = (unique[keep], deaths[keep] / at_risk[keep])
    return out


#: Starting coefficients of one cause: its design columns and their values (see ``LandmarkSupermodel.fit``).
StartingValues = tuple[Sequence[str], np.ndarray]


class LandmarkSupermodel(BaseEstimator):
    """Cox landmark super-model on a landmark stack, with an optional competing event.

    Parameters
    ----------
    covariates : sequence of str
        Covariate columns of the stack (values known at the landmark).
    landmark_effects : {"none", "linear", "quadratic"}
        How each coefficient varies with the landmark s: constant, β₀ + β₁·s/S, or β₀ + β₁·s/S + β₂·(s/S)².
    baseline : {"smooth", "stratified"}
        Pooled baseline with landmark terms s/S and (s/S)² as covariates, or one baseline per landmark.
    competing : bool
        Fit a cause-specific model for status 2 and predict the cumulative incidence of status 1. If the
        stack has no status-2 rows the outcome model alone is used.
    ties : {"efron", "breslow"}
        Tie handling in the partial likelihood.

    Attributes (after fit)
    ----------------------
    design_columns_ : list of str
    landmarks_ : ndarray, distinct fitted landmarks (days)
    landmark_scale_ : float, S (days)
    max_time_ : float, longest follow-up from a landmark in the stack (days); horizons are capped by it
    outcome_ : CauseSpecificFit
    competing_ : CauseSpecificFit or None
    coef_, var_, robust_var_ : the outcome model's coefficients and covariances
    """

    def __init__(
        self,
        covariates: Sequence[str],
        *,
        landmark_effects: str = "linear",
        baseline: str = "smooth",
        competing: bool = True,
        ties: str = "efron",
    ) -> None:
        self.covariates = covariates
        self.landmark_effects = landmark_effects
        self.baseline = baseline
        self.competing = competing
        self.ties = ties

    # ------------------------------------------------------------------ design
    def n_coefficients(self, n_landmarks: int) -> int:
        """Coefficients per cause-specific model for a stack with ``n_landmarks`` distinct landmarks."""
        power = min(_EFFECT_POWERS.get(self.landmark_effects, 0), max(n_landmarks - 1, 0))
        baseline_terms = 0 if self.baseline == "stratified" else min(2, max(n_landmarks - 1, 0))
        return len(list(self.covariates)) * (1 + power) + baseline_terms

    def _check_params(self, n_landmarks: int) -> int:
        if self.landmark_effects not in _EFFECT_POWERS:
            raise ModelInputError(
                f"landmark_effects must be one of {sorted(_EFFECT_POWERS)}, got {self.landmark_effects!r}"
            )
        if self.baseline not in ("smooth", "stratified"):
            raise ModelInputError(f"baseline must be 'smooth' or 'stratified', got {self.baseline!r}")
        if self.ties not in ("efron", "breslow"):
            raise ModelInputError(f"ties must be 'efron' or 'breslow', got {self.ties!r}")
        power = _EFFECT_POWERS[self.landmark_effects]
        if power >= n_landmarks:
            raise ModelInputError(
                f"landmark_effects={self.landmark_effects!r} needs at least {power + 1} distinct landmarks, "
                f"the stack has {n_landmarks}; use fewer landmark effects or more landmarks"
            )
        if not list(self.covariates):
            raise ModelInputError("covariates is empty; name at least one covariate column")
        return power

    def design_matrix(self, covariate_matrix: np.ndarray, landmarks: np.ndarray) -> np.ndarray:
        """The fitted model's design for rows with covariates ``covariate_matrix`` known at ``landmarks`` (days):
        the covariates, their landmark interactions and the landmark terms (columns ``design_columns_``)."""
        return self._design(np.asarray(covariate_matrix, dtype=float), np.asarray(landmarks, dtype=float))

    def _design(self, covariate_matrix: np.ndarray, s: np.ndarray) -> np.ndarray:
        scaled = s / self.landmark_scale_
        blocks = [covariate_matrix]
        for k in range(1, self._effect_power_ + 1):
            blocks.append(covariate_matrix * scaled[:, None] ** k)
        for k in range(1, self._baseline_power_ + 1):
            blocks.append((scaled**k)[:, None])
        return np.hstack(blocks)

    # --------------------------------------------------------------------- fit
    def fit(
        self, stack: pd.DataFrame, *, start: Mapping[str, StartingValues] | None = None, robust: bool = True
    ) -> LandmarkSupermodel:
        """Fit on a landmark stack (``patient_id, landmark, time, status`` + covariates); returns self.

        Parameters
        ----------
        stack : pandas.DataFrame
        start : mapping, optional
            Where Newton–Raphson starts for each cause (``"outcome"``, ``"competing event"``): the
            :meth:`starting_values` of a fit of the same model, e.g. on the whole cohort when this fit is a
            refit on a bootstrap resample. The partial likelihood is concave, so the optimum is the same (to the
            convergence tolerance) and is reached in fewer iterations. A cause whose design columns differ
            (another covariate set) starts from 0.
        robust : bool, default True
            Compute the patient-clustered covariance ``robust_var_``. A resampling refit needs only the point
            estimates and the baseline: False skips the sandwich and leaves ``robust_var_`` all NaN.
        """
        time, status = check_stack_outcome(stack, required=("patient_id", "landmark"))
        covariates = list(self.covariates)
        x = check_covariates(stack, covariates, what="landmark stack")
        s = prediction_origin(stack)
        self.landmarks_ = np.unique(s)
        n_landmarks = len(self.landmarks_)
        self._effect_power_ = self._check_params(n_landmarks)
        self._baseline_power_ = 0 if self.baseline == "stratified" else min(2, n_landmarks - 1)
        self.landmark_scale_ = float(self.landmarks_.max()) if self.landmarks_.max() > 0 else 1.0
        self.design_columns_ = (
            covariates
            + [f"{c}:s{'' if k == 1 else k}" for k in range(1, self._effect_power_ + 1) for c in covariates]
            + ["landmark_s", "landmark_s2"][: self._baseline_power_]
        )
        self.max_time_ = float(time.max())
        design = self._design(x, s)
        strata = s if self.baseline == "stratified" else np.zeros(len(s))
        cluster: np.ndarray | None = None
        if robust:
            cluster = stack["patient_id"].to_numpy()
            codes = pd.factorize(cluster)[0]  # once for both causes: factorizing text ids is slow
            if (codes >= 0).all():  # a missing id stays as it is, for the Cox engine to name
                cluster = codes
        starts = dict(start or {})

        def cause(code: int, label: str) -> CauseSpecificFit:
            initial = self._initial(starts.get(label))
            return self._fit_cause(design, time, (status == code).astype(float), strata, cluster, label, initial)

        self.outcome_ = cause(1, "outcome")
        has_competing = bool(self.competing) and bool((status == 2).any())
        self.competing_ = cause(2, "competing event") if has_competing else None
        self.coef_ = self.outcome_.coef
        self.var_ = self.outcome_.var
        self.robust_var_ = self.outcome_.robust_var
        return self

    def starting_values(self) -> dict[str, StartingValues]:
        """The fitted coefficients per cause with their design columns, for ``fit(start=...)`` of a refit.

        A cause whose fit did not converge (e.g. a coefficient running off to infinity) offers no start: its
        refits start from 0, as they would without a start."""
        self._check_fitted()
        fits = {"outcome": self.outcome_, "competing event": self.competing_}
        return {
            label: (tuple(self.design_columns_), fit.coef.copy())
            for label, fit in fits.items()
            if fit is not None and fit.converged and np.isfinite(fit.coef).all()
        }

    def _initial(self, values: StartingValues | None) -> np.ndarray | None:
        if values is None or tuple(values[0]) != tuple(self.design_columns_):
            return None
        return np.asarray(values[1], dtype=float)

    def _fit_cause(
        self,
        design: np.ndarray,
        time: np.ndarray,
        event: np.ndarray,
        strata: np.ndarray,
        cluster: np.ndarray | None,
        label: str,
        initial: np.ndarray | None = None,
    ) -> CauseSpecificFit:
        if event.sum() == 0:
            raise ModelInputError(f"the landmark stack has no {label} (status) rows; nothing to fit")
        try:
            coef, var, robust_var, loglik, loglik_null, converged = _fit_cox_arrays(
                design,
                time,
                event,
                strata=strata,
                cluster=cluster,
                ties=self.ties,
                names=self.design_columns_,
                initial=initial,
            )
        except CoxInputError as exc:
            # say which cause-specific model failed; callers restate it with the model's name
            exc.cause = label
            exc.args = (f"{label} model: {exc.args[0] if exc.args else exc}",)
            raise
        means = design.mean(axis=0)
        risk_score = np.exp((design - means) @ coef)
        return CauseSpecificFit(
            coef=coef,
            var=var,
            robust_var=robust_var,
            means=means,
            baseline=_breslow_increments(time, event, risk_score, strata),
            n_events=int(event.sum()),
            loglik=loglik,
            loglik_null=loglik_null,
            converged=converged,
        )

    # ----------------------------------------------------------------- predict
    def _check_fitted(self) -> None:
        if not hasattr(self, "outcome_"):
            raise ModelInputError("this LandmarkSupermodel is not fitted yet; call fit(stack) first")

    def _strata_for(self, s: np.ndarray) -> np.ndarray:
        if self.baseline == "smooth":
            low, high = self.landmarks_.min(), self.landmarks_.max()
            outside = (s < low - 1e-9) | (s > high + 1e-9)
            if outside.any():
                raise ModelInputError(
                    f"{int(outside.sum())} rows have a landmark outside the fitted range [{low:g}, {high:g}] "
                    "days; the smooth landmark terms would be extrapolated -- refit with landmarks covering them"
                )
            return np.zeros(len(s))
        nearest = self.landmarks_[np.abs(s[:, None] - self.landmarks_[None, :]).argmin(axis=1)]
        unmatched = ~np.isclose(nearest, s)
        if unmatched.any():
            raise ModelInputError(
                f"baseline='stratified' predicts only at the fitted landmarks {self.landmarks_.tolist()} days; "
                f"{int(unmatched.sum())} rows have other landmarks -- use baseline='smooth' to predict "
                "between landmarks"
            )
        return nearest

    def predict_curve(self, stack: pd.DataFrame, times: ArrayLike) -> np.ndarray:
        """Risk of the outcome in (s, s + t] for each row and each t in ``times`` (days from the landmark).

        Returns
        -------
        ndarray, shape (n_rows, len(times)); cumulative incidence when a competing model was fitted.
        """
        self._check_fitted()
        times = np.atleast_1d(np.asarray(times, dtype=float))
        for t in times:
            check_horizon(t, self.max_time_)
        x = check_covariates(stack, list(self.covariates), what="prediction table")
        s = prediction_origin(stack)
        design = self._design(x, s)
        strata = self._strata_for(s)
        out = np.empty((len(stack), len(times)))
        for stratum in np.unique(strata):
            rows = np.flatnonzero(strata == stratum)
            out[rows] = self._curve_in_stratum(design[rows], float(stratum), times)
        return out

    def _curve_in_stratum(self, design: np.ndarray, stratum: float, times: np.ndarray) -> np.ndarray:
        fits = [self.outcome_] + ([self.competing_] if self.competing_ is not None else [])
        empty = (np.empty(0), np.empty(0))
        bases = [fit.baseline.get(stratum, empty) for fit in fits]
        grid = np.unique(np.concatenate([b[0] for b in bases]))
        grid = grid[grid <= times.max()]
        # increments of each cause on the common grid (zero where that cause has no event)
        jumps = []
        for base in bases:
            on_grid = np.zeros(len(grid))
            keep = base[0] <= times.max()
            on_grid[np.searchsorted(grid, base[0][keep])] = base[1][keep]
            jumps.append(on_grid)
        scores = [np.exp((design - fit.means) @ fit.coef) for fit in fits]
        competing = len(fits) > 1
        return cumulative_incidence_at(
            scores[0],
            jumps[0],
            scores[1] if competing else None,
            jumps[1] if competing else None,
            grid,
            times,
        )

    def predict_risk(self, stack: pd.DataFrame, horizon: float) -> np.ndarray:
        """Risk of the outcome in (s, s + horizon] for each row (s = ``landmark``; horizon in days)."""
        return self.predict_curve(stack, [horizon])[:, 0]

    # ------------------------------------------------------------------ saving
    def to_json(self, path: str | Path) -> Path:
        """Write the fitted model (design, both cause-specific fits, baselines, spec, versions) as JSON."""
        return save_landmark_model(self, path)

    @classmethod
    def from_json(cls, path: str | Path) -> LandmarkSupermodel:
        """Read a model written by :meth:`to_json`."""
        saved = read_landmark_file(path)
        model = cls(**saved.params)
        model.landmarks_, model.landmark_scale_, model.max_time_ = saved.landmarks, saved.landmark_scale, saved.max_time
        model._effect_power_, model._baseline_power_ = saved.effect_power, saved.baseline_power
        model.design_columns_ = saved.design_columns
        model.outcome_ = CauseSpecificFit(**saved.outcome)
        model.competing_ = None if saved.competing is None else CauseSpecificFit(**saved.competing)
        model.coef_, model.var_, model.robust_var_ = model.outcome_.coef, model.outcome_.var, model.outcome_.robust_var
        model.saved_versions_ = saved.versions
        return model

    # ----------------------------------------------------------------- report
    def summary(self) -> pd.DataFrame:
        """Coefficients per cause with cluster-robust SE, hazard ratio, 95% interval and Wald p-value."""
        from scipy.stats import norm

        self._check_fitted()
        frames = []
        for cause, fit in (("outcome", self.outcome_), ("competing", self.competing_)):
            if fit is None:
                continue
            se = np.sqrt(np.diag(fit.robust_var))
            frames.append(
                pd.DataFrame(
                    {
                        "cause": cause,
                        "term": self.design_columns_,
                        "coef": fit.coef,
                        "se_robust": se,
                        "se_model": np.sqrt(np.diag(fit.var)),
                        "hazard_ratio": np.exp(fit.coef),
                        "hr_lower_95": np.exp(fit.coef - 1.959963984540054 * se),
                        "hr_upper_95": np.exp(fit.coef + 1.959963984540054 * se),
                        "p_value": 2 * norm.sf(np.abs(fit.coef / se)),
                    }
                )
            )
        return pd.concat(frames, ignore_index=True)

    def landmark_coefficients(self, landmarks: ArrayLike, cause: str = "outcome") -> pd.DataFrame:
        """β(s) of each covariate at the given landmarks (days): one row per landmark, one column per covariate."""
        self._check_fitted()
        fit = self.outcome_ if cause == "outcome" else self.competing_
        if fit is None:
            raise ModelInputError(f"no fitted model for cause {cause!r}; use 'outcome' or 'competing'")
        s = np.atleast_1d(np.asarray(landmarks, dtype=float)) / self.landmark_scale_
        p = len(self.covariates)
        values = sum(np.outer(s**k, fit.coef[k * p : (k + 1) * p]) for k in range(self._effect_power_ + 1))
        frame = pd.DataFrame(values, columns=list(self.covariates))
        frame.insert(0, "landmark", np.atleast_1d(np.asarray(landmarks, dtype=float)))
        return frame

    def landmark_effect_bands(self, landmarks: ArrayLike, level: float = 0.95, cause: str = "outcome") -> pd.DataFrame:
        """β(s) of each covariate with a pointwise interval, by the delta method on the robust covariance.

        Parameters
        ----------
        landmarks : array-like
            Landmarks s (days since entry) at which to evaluate β(s).
        level : float
            Coverage of the pointwise Wald interval (0.95: β̂(s) ± 1.96 SE).
        cause : {"outcome", "competing"}

        Returns
        -------
        DataFrame
            ``covariate, landmark_days, coef, se, lower, upper``: β̂(s) = Σₖ β̂ₖ (s/S)ᵏ (log hazard ratio per
            unit of the covariate), SE = sqrt(gᵀ V g) with g = ((s/S)⁰, …, (s/S)ᵏ) over the covariate's
            coefficients and V their cluster-robust covariance.
        """
        from scipy.stats import norm

        self._check_fitted()
        if not 0 < level < 1:
            raise ModelInputError(f"level must be between 0 and 1, got {level!r}")
        fit = self.outcome_ if cause == "outcome" else self.competing_
        if fit is None:
            raise ModelInputError(f"no fitted model for cause {cause!r}; use 'outcome' or 'competing'")
        days = np.atleast_1d(np.asarray(landmarks, dtype=float))
        powers = (days / self.landmark_scale_)[:, None] ** np.arange(self._effect_power_ + 1)[None, :]
        p = len(self.covariates)
        z = float(norm.ppf(0.5 + level / 2))
        frames = []
        for j, name in enumerate(self.covariates):
            index = [j + k * p for k in range(self._effect_power_ + 1)]
            coef = powers @ fit.coef[index]
            cov = fit.robust_var[np.ix_(index, index)]
            se = np.sqrt(np.maximum(np.einsum("ik,kl,il->i", powers, cov, powers), 0.0))
            frames.append(
                pd.DataFrame(
                    {
                        "covariate": name,
                        "landmark_days": days,
                        "coef": coef,
                        "se": se,
                        "lower": coef - z * se,
                        "upper": coef + z * se,
                    }
                )
            )
        return pd.concat(frames, ignore_index=True)
