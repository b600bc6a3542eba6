"""Updating a prediction model on a new cohort: recalibration, per-landmark baselines, revision, and the
closed test that chooses among them.

The hierarchy of updating methods (Steyerberg, *Clinical Prediction Models*, 2nd ed. 2019, ch. 20; Janssen,
Moons, Kalkman, Grobbee & Vergouwe 2008, J Clin Epidemiol) is written here for a risk of the outcome in
(s, s + w] at a horizon w, on the complementary log-log scale of the original model's risk p,
z = log(−log(1 − p)) (for a Cox model this is log H₀(w) + linear predictor, so a slope on z is a slope on the
linear predictor). With θ the observed risk of each landmark row by the horizon, the updated risk is
1 − exp(−exp(η)) with

=====================  =================================  ===========================================
method                 η                                  parameters re-estimated
=====================  =================================  ===========================================
``original``           z                                  none
``in_the_large``       a + z                              1 (calibration-in-the-large)
``slope``              a + b·z                            2 (recalibration: intercept and slope)
``landmark_baseline``  a_s + b·z                          one intercept per landmark s, and the slope
``revision``           a_s + b·z + γ·x                    as above plus a correction γ of every
                                                          covariate's effect (model revision)
=====================  =================================  ===========================================

The observed risk follows what the model estimates (:mod:`riskbench.models.prediction_target`): a cumulative
incidence is matched against the Aalen–Johansen cumulative incidence with the competing event, a cause-specific
1 − S against 1 − Kaplan–Meier with competing events censored. Censoring before the horizon is handled by
jackknife pseudo-observations of that observed risk (Andersen & Pohar Perme 2010, Stat Methods Med Res),
regressed on the design with the cloglog link by quasi-likelihood (:func:`riskbench.metrics.fit_cloglog`), with
sandwich covariances clustered on patients (a patient's landmark rows are correlated). These are the same
regressions as the calibration intercept and slope of :func:`riskbench.metrics.calibration_at_horizon`, so an
update in the large moves the calibration intercept to 0 and the observed/expected ratio to about 1.

Revision may be shrunk towards the original model: every re-estimated parameter moves from its original value
(a_s = 0, b = 1, γ = 0) by a factor λ = max(0, (W − df)/W), W the Wald statistic of the revision against the
original (the heuristic uniform shrinkage of van Houwelingen & le Cessie 1990, Stat Med, with the Wald statistic
in place of the likelihood ratio, since the pseudo-observation fit is a quasi-likelihood); the per-landmark
intercepts are then re-estimated with the shrunk slope and corrections held fixed, so the update stays
calibrated in the large.

Closed testing (after Vergouwe, Nieboer, Oostenbrink, Debray, Murray, Kattan, Koffijberg, Moons & Steyerberg
2017, Stat Med 36:4529): first the most extended update is tested against the original; if the difference is
not significant the original model is kept. Otherwise the methods are visited from the simplest up, and a
method is chosen over the one chosen so far when it differs significantly from it. Tests are Wald tests of the
chosen model's constraints in the candidate's fit, with the clustered sandwich covariance (the quasi-likelihood
has no likelihood ratio).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats

from riskbench.metrics.calibration import cloglog, target_status
from riskbench.metrics.cloglog_regression import CloglogFit, fit_cloglog
from riskbench.metrics.pseudo_observations import pseudo_observations
from riskbench.models.prediction_target import fitted_target
from riskbench.models.risk_contract import ModelInputError, covariate_values, prediction_origin
from riskbench.validation.errors import ValidationInputError
from riskbench.validation.performance import stack_outcome

__all__ = [
    "METHODS",
    "METHOD_WORDS",
    "ClosedTest",
    "UpdateFit",
    "UpdatedModel",
    "UpdatingRows",
    "closed_test",
    "fit_update",
    "model_covariates",
    "update_model",
    "updating_rows",
]

#: Updating methods, from the fewest to the most re-estimated parameters.
METHODS: tuple[str, ...] = ("original", "in_the_large", "slope", "landmark_baseline", "revision")

#: Words for tables and the report.
METHOD_WORDS: Mapping[str, str] = {
    "original": "original model",
    "in_the_large": "recalibration in the large",
    "slope": "recalibration of intercept and slope",
    "landmark_baseline": "baseline refitted per landmark (and slope)",
    "revision": "model revision (covariate effects re-estimated)",
}

_LANDMARK_TOL = 1e-6  # days: landmarks closer than this are the same landmark


@dataclass(frozen=True)
class UpdatingRows:
    """The new cohort's landmark rows at one horizon, with the original model's predictions.

    Attributes
    ----------
    horizon
        Days after the landmark.
    target
        What the original risk estimates (``"cumulative_incidence"`` or ``"cause_specific"``).
    risk
        Original predicted risk of each row by the horizon.
    pseudo
        Jackknife pseudo-observation of the observed risk by the horizon (the target's estimand).
    landmark
        Landmark of each row (days since entry).
    patient
        Integer code of each row's patient.
    covariates
        Covariate names of ``x``.
    x
        Covariate values (``(n, p)``); NaN where a value is missing.
    """

    horizon: float
    target: str
    risk: np.ndarray
    pseudo: np.ndarray
    landmark: np.ndarray
    patient: np.ndarray
    covariates: tuple[str, ...]
    x: np.ndarray

    @property
    def landmarks(self) -> np.ndarray:
        """Distinct landmarks (days)."""
        return _distinct(self.landmark)


def _distinct(values: np.ndarray) -> np.ndarray:
    unique = np.unique(values)
    if unique.size < 2:
        return unique
    keep = np.r_[True, np.diff(unique) > _LANDMARK_TOL]
    return unique[keep]


def model_covariates(model: object) -> tuple[str, ...]:
    """The covariate columns a fitted model reads (a missing-data wrapper is looked through)."""
    for candidate in (model, getattr(model, "estimator", None), getattr(model, "model", None)):
        names = getattr(candidate, "covariates", None)
        if names is not None and not isinstance(names, str):
            return tuple(str(n) for n in names)
    return ()


def _predict(model: object, table: pd.DataFrame, horizon: float) -> np.ndarray:
    """The original model's risk by ``horizon`` (days) for each row."""
    predict: Any = getattr(model, "predict_risk", None)
    if predict is None:
        raise ValidationInputError(f"{type(model).__name__} has no predict_risk(table, horizon); pass a fitted model")
    return np.asarray(predict(table, horizon), dtype=np.float64)


def updating_rows(
    model: object,
    stack: pd.DataFrame,
    horizon: float,
    *,
    target: str | None = None,
    covariates: Sequence[str] | None = None,
) -> UpdatingRows:
    """Predict with the original model on the new cohort's landmark stack and prepare the updating regressions.

    Parameters
    ----------
    model
        A fitted model answering ``predict_risk(table, horizon)``.
    stack
        Landmark stack of the new cohort (``patient_id, landmark, time, status`` and the model's covariates).
    horizon
        Days after the landmark.
    target
        What the model's risk estimates; default read from the fitted model
        (:func:`riskbench.models.prediction_target.fitted_target`).
    covariates
        Covariates a revision re-estimates; default the model's own.

    Raises
    ------
    ValidationInputError
        If the stack lacks a column, the horizon is not positive, or no outcome occurs by the horizon.
    """
    if "patient_id" not in stack.columns or "landmark" not in stack.columns:
        raise ValidationInputError(
            "the new cohort's landmark stack lacks 'patient_id' or 'landmark'; build it "
            "with the cohort stage (Cohort.landmark_stack)."
        )
    h = float(horizon)
    if not np.isfinite(h) or h <= 0:
        raise ValidationInputError(f"horizon must be a positive number of days; got {horizon!r}")
    time, status = stack_outcome(stack)
    target = target or fitted_target(model)
    status = target_status(status, target)
    if not ((status == 1) & (time <= h)).any():
        raise ValidationInputError(
            f"the new cohort has no outcome within {h:g} days of a landmark; a model "
            "cannot be updated or validated there."
        )
    risk = _predict(model, stack, h)
    names = tuple(covariates) if covariates is not None else model_covariates(model)
    x = (
        covariate_values(stack, names, what="new cohort's landmark stack", allow_missing=True)
        if names
        else np.empty((len(stack), 0))
    )
    return UpdatingRows(
        horizon=h,
        target=target,
        risk=risk,
        pseudo=pseudo_observations(time, status, h, cause=1),
        landmark=prediction_origin(stack),
        patient=pd.factorize(stack["patient_id"])[0],
        covariates=names,
        x=x,
    )


# ----------------------------------------------------------------------------------------------- designs
def _landmark_dummies(landmark: np.ndarray, landmarks: np.ndarray) -> np.ndarray:
    index = np.abs(landmark[:, None] - landmarks[None, :]).argmin(axis=1)
    unseen = np.abs(landmarks[index] - landmark) > _LANDMARK_TOL
    if unseen.any():
        raise ModelInputError(
            f"{int(unseen.sum())} row(s) have a landmark the per-landmark update was not fitted at (fitted: "
            f"{', '.join(f'{s:g}' for s in landmarks)} days); predict at those landmarks or use a simpler update"
        )
    return (index[:, None] == np.arange(landmarks.size)[None, :]).astype(float)


def _terms(method: str, landmarks: np.ndarray, covariates: Sequence[str]) -> list[str]:
    """Names of the re-estimated parameters of a method."""
    if method == "original":
        return []
    if method == "in_the_large":
        return ["intercept"]
    if method == "slope":
        return ["intercept", "slope"]
    per_landmark = [f"intercept_at_{s:g}_days" for s in landmarks]
    if method == "landmark_baseline":
        return [*per_landmark, "slope"]
    return [*per_landmark, "slope", *(f"correction:{c}" for c in covariates)]


def _design(
    method: str, z: np.ndarray, landmark: np.ndarray, x: np.ndarray, landmarks: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Design matrix and offset of a method (offset z where the slope is fixed at 1)."""
    ones = np.ones((z.size, 1))
    if method == "original":
        return np.empty((z.size, 0)), z
    if method == "in_the_large":
        return ones, z
    if method == "slope":
        return np.column_stack([ones, z]), np.zeros(z.size)
    dummies = _landmark_dummies(landmark, landmarks)
    if method == "landmark_baseline":
        return np.column_stack([dummies, z]), np.zeros(z.size)
    if method == "revision":
        return np.column_stack([dummies, z, x]), np.zeros(z.size)
    raise ModelInputError(f"unknown updating method {method!r}; choose one of {', '.join(METHODS)}")


def _original_values(terms: Sequence[str]) -> np.ndarray:
    """The parameters' values in the original model: intercepts 0, slope 1, corrections 0."""
    return np.array([1.0 if t == "slope" else 0.0 for t in terms])


@dataclass(frozen=True)
class UpdateFit:
    """One updating method fitted at one horizon.

    Attributes
    ----------
    method
        One of :data:`METHODS`.
    horizon
        Days after the landmark.
    terms
        Names of the re-estimated parameters.
    coef, cov
        Estimates and their patient-clustered sandwich covariance (shrunk estimates for a shrunk revision).
    landmarks
        Landmarks (days) of the per-landmark intercepts (empty for the other methods).
    covariates
        Covariates whose effects a revision corrects.
    shrinkage
        λ applied to a revision (1 = none).
    converged
        Whether the regression converged.
    aliased
        Corrections a revision cannot estimate because their covariate is a linear combination of the
        per-landmark intercepts, z and the other covariates (a landmark Cox model's z is its baseline plus its
        linear predictor); they stay at 0 with no variance, as a regression reports an aliased coefficient.
    """

    method: str
    horizon: float
    terms: tuple[str, ...]
    coef: np.ndarray
    cov: np.ndarray
    landmarks: np.ndarray
    covariates: tuple[str, ...]
    shrinkage: float = 1.0
    converged: bool = True
    aliased: tuple[str, ...] = ()

    def linear_predictor(self, risk: np.ndarray, landmark: np.ndarray, x: np.ndarray) -> np.ndarray:
        """η of the updated model from the original risks, the rows' landmarks and covariates."""
        design, offset = _design(
            self.method,
            cloglog(np.asarray(risk, float)),
            np.asarray(landmark, float),
            np.asarray(x, float),
            self.landmarks,
        )
        return design @ self.coef + offset if design.shape[1] else offset

    def risk(self, risk: np.ndarray, landmark: np.ndarray, x: np.ndarray) -> np.ndarray:
        """Updated risk by the horizon."""
        return -np.expm1(-np.exp(np.clip(self.linear_predictor(risk, landmark, x), -40.0, 5.0)))

    def table(self) -> pd.DataFrame:
        """``method, horizon_days, term, estimate, se, original_value``."""
        return pd.DataFrame(
            {
                "method": self.method,
                "horizon_days": self.horizon,
                "term": list(self.terms),
                "estimate": self.coef,
                "se": np.where(
                    np.isin(list(self.terms), self.aliased), np.nan, np.sqrt(np.clip(np.diag(self.cov), 0.0, None))
                )
                if self.coef.size
                else np.empty(0),
                "original_value": _original_values(self.terms),
            }
        )


def _complete_x(rows: UpdatingRows) -> np.ndarray:
    missing = np.isnan(rows.x)
    if missing.any():
        bad = [rows.covariates[j] for j in np.flatnonzero(missing.any(axis=0))]
        raise ValidationInputError(
            f"model revision needs every covariate on every row; {bad} are missing in "
            f"{int(missing.any(axis=1).sum())} landmark row(s) of the new cohort. Use the recalibration methods, "
            "or choose how missing values are handled ([missing_data] method) before revising."
        )
    return rows.x


def fit_update(rows: UpdatingRows, method: str, *, shrink: bool = False) -> UpdateFit:
    """Fit one updating method on the new cohort's rows (see the module notes).

    Parameters
    ----------
    rows
        From :func:`updating_rows`.
    method
        One of :data:`METHODS`.
    shrink
        For ``"revision"``: shrink the re-estimated parameters towards the original model (heuristic λ).

    Returns
    -------
    UpdateFit
    """
    if method not in METHODS:
        raise ValidationInputError(f"unknown updating method {method!r}; choose one of {', '.join(METHODS)}")
    landmarks = rows.landmarks if method in ("landmark_baseline", "revision") else np.empty(0)
    names = rows.covariates if method == "revision" else ()
    x = _complete_x(rows) if method == "revision" else rows.x
    terms = tuple(_terms(method, landmarks, names))
    z = cloglog(rows.risk)
    design, offset = _design(method, z, rows.landmark, x, landmarks)
    if not terms:
        return UpdateFit(method, rows.horizon, (), np.empty(0), np.empty((0, 0)), landmarks, names)
    start = _original_values(terms)
    keep = _estimable(design, first_optional=landmarks.size + 1) if method == "revision" else np.ones(len(terms), bool)
    fit = fit_cloglog(design[:, keep], rows.pseudo, offset=offset, start=start[keep], cluster=rows.patient)
    coef, cov = start.copy(), np.zeros((len(terms), len(terms)))
    coef[keep] = fit.coef
    cov[np.ix_(keep, keep)] = fit.cov
    aliased = tuple(t for t, k in zip(terms, keep) if not k)
    result = UpdateFit(method, rows.horizon, terms, coef, cov, landmarks, names, 1.0, fit.converged, aliased)
    if method == "revision" and shrink:
        return _shrunk(rows, result, design, start)
    return result


def _estimable(design: np.ndarray, first_optional: int, tol: float = 1e-8) -> np.ndarray:
    """Columns to estimate: every column before ``first_optional``, then each later column unless it is (to
    ``tol``, relative to its length) a linear combination of the columns kept before it."""
    keep = np.ones(design.shape[1], bool)
    for j in range(first_optional, design.shape[1]):
        column = design[:, j]
        kept = design[:, :j][:, keep[:j]]
        residual = column - kept @ np.linalg.lstsq(kept, column, rcond=None)[0]
        keep[j] = np.linalg.norm(residual) > tol * max(float(np.linalg.norm(column)), 1.0)
    return keep


def _shrunk(rows: UpdatingRows, fit: UpdateFit, design: np.ndarray, start: np.ndarray) -> UpdateFit:
    """Revision shrunk towards the original by the heuristic λ; per-landmark intercepts re-estimated."""
    statistic = _wald(fit.coef, fit.cov, np.eye(fit.coef.size), start)
    df = fit.coef.size - len(fit.aliased)
    lam = max(0.0, (statistic - df) / statistic) if statistic > 0 else 0.0
    shrunk = start + lam * (fit.coef - start)
    k = fit.landmarks.size
    fixed = design[:, k:] @ shrunk[k:]
    refit: CloglogFit = fit_cloglog(design[:, :k], rows.pseudo, offset=fixed, start=shrunk[:k], cluster=rows.patient)
    coef = np.r_[refit.coef, shrunk[k:]]
    cov = fit.cov * lam**2
    cov[:k, :k] = refit.cov
    return UpdateFit(
        fit.method, fit.horizon, fit.terms, coef, cov, fit.landmarks, fit.covariates, lam, refit.converged, fit.aliased
    )


# ---------------------------------------------------------------------------------------------- testing
def _wald(coef: np.ndarray, cov: np.ndarray, contrast: np.ndarray, value: np.ndarray) -> float:
    diff = contrast @ coef - value
    middle = contrast @ cov @ contrast.T
    return float(diff @ np.linalg.pinv(middle) @ diff)


def _constraints(simpler: str, fit: UpdateFit) -> tuple[np.ndarray, np.ndarray]:
    """The simpler method's restrictions on ``fit``'s parameters, as contrast rows C and values c (Cθ = c)."""
    terms = list(fit.terms)
    rows: list[np.ndarray] = []
    values: list[float] = []

    def pick(name: str, value: float) -> None:
        row = np.zeros(len(terms))
        row[terms.index(name)] = 1.0
        rows.append(row)
        values.append(value)

    intercepts = [t for t in terms if t.startswith("intercept")]
    level = METHODS.index(simpler)
    if level == 0:  # no intercept at all
        for name in intercepts:
            pick(name, 0.0)
    elif len(intercepts) > 1 and level < METHODS.index("landmark_baseline"):  # one common intercept
        first = terms.index(intercepts[0])
        for name in intercepts[1:]:
            row = np.zeros(len(terms))
            row[terms.index(name)], row[first] = 1.0, -1.0
            rows.append(row)
            values.append(0.0)
    if "slope" in terms and level < METHODS.index("slope"):
        pick("slope", 1.0)
    if level < METHODS.index("revision"):
        for name in (t for t in terms if t.startswith("correction:")):
            pick(name, 0.0)
    return np.array(rows).reshape(len(rows), len(terms)), np.array(values)


@dataclass(frozen=True)
class ClosedTest:
    """Which update the new cohort warrants.

    Attributes
    ----------
    chosen
        The chosen method (``"original"``: no update warranted).
    alpha
        Significance level of every test.
    tests
        ``step, candidate, against, statistic, df, p_value, significant`` (Wald tests, clustered sandwich).
    """

    chosen: str
    alpha: float
    tests: pd.DataFrame


def closed_test(fits: Mapping[str, UpdateFit], *, alpha: float = 0.05) -> ClosedTest:
    """Choose among fitted updates by the closed testing procedure (see the module notes).

    Parameters
    ----------
    fits
        Method -> fit (unshrunk; ``"original"`` need not be given). Methods absent are skipped.
    alpha
        Significance level.
    """
    if not 0 < alpha < 1:
        raise ValidationInputError(f"alpha must be between 0 and 1; got {alpha!r}")
    order = [m for m in METHODS[1:] if m in fits and fits[m].coef.size]
    records = []

    def test(step: str, candidate: str, against: str) -> bool:
        fit = fits[candidate]
        contrast, value = _constraints(against, fit)
        if contrast.shape[0] == 0:
            return False
        statistic = _wald(fit.coef, fit.cov, contrast, value)
        df = int(np.linalg.matrix_rank(contrast @ fit.cov @ contrast.T)) or contrast.shape[0]
        p = float(stats.chi2.sf(statistic, df))
        records.append((step, candidate, against, statistic, df, p, p < alpha))
        return p < alpha

    chosen = "original"
    if order and test("overall", order[-1], "original"):
        for method in order:
            if test("stepwise", method, chosen):
                chosen = method
    columns = ["step", "candidate", "against", "statistic", "df", "p_value", "significant"]
    return ClosedTest(chosen, alpha, pd.DataFrame(records, columns=columns))


# ------------------------------------------------------------------------------------------ the model
class UpdatedModel:
    """An original model with an update applied: answers ``predict_risk(table, horizon)`` at the horizons the
    update was fitted at.

    Parameters
    ----------
    original
        The fitted original model.
    fits
        Horizon (days) -> :class:`UpdateFit` of one method.
    """

    def __init__(self, original: object, fits: Mapping[float, UpdateFit]) -> None:
        self.original = original
        self.fits_ = dict(fits)
        methods = {f.method for f in self.fits_.values()}
        if len(methods) != 1:
            raise ValidationInputError(f"an updated model holds one method; got {sorted(methods)}")
        self.method = methods.pop()
        self.covariates = model_covariates(original)

    def _fit_at(self, horizon: float) -> UpdateFit:
        for h, fit in self.fits_.items():
            if abs(h - float(horizon)) <= 1e-6:
                return fit
        raise ModelInputError(
            f"this update was estimated at horizon(s) {', '.join(f'{h:g}' for h in self.fits_)} days; a "
            f"recalibrated risk at {float(horizon):g} days needs the update refitted at that horizon"
        )

    def predict_risk(self, table: pd.DataFrame, horizon: float) -> np.ndarray:
        """Updated risk of the outcome in (s, s + horizon] for each row (days)."""
        fit = self._fit_at(horizon)
        risk = _predict(self.original, table, float(horizon))
        x = (
            covariate_values(table, fit.covariates, what="prediction table")
            if fit.covariates
            else np.empty((len(table), 0))
        )
        return fit.risk(risk, prediction_origin(table), x)


def update_model(
    model: object,
    stack: pd.DataFrame,
    horizons: Sequence[float],
    method: str,
    *,
    shrink: bool = False,
    target: str | None = None,
) -> UpdatedModel:
    """Fit one updating method at each horizon on the new cohort's landmark stack; return the updated model.

    Parameters
    ----------
    model
        The fitted original model.
    stack
        Landmark stack of the new cohort.
    horizons
        Horizons (days) at which the updated model will predict.
    method
        One of :data:`METHODS`.
    shrink
        Shrink a revision towards the original model.
    target
        What the model's risk estimates (default: read from the model).
    """
    fits = {
        float(h): fit_update(updating_rows(model, stack, h, target=target), method, shrink=shrink) for h in horizons
    }
    return UpdatedModel(model, fits)
