"""Missing covariate values as a choice: a wrapper that applies a missing-data method around any model.

:class:`MissingDataModel` wraps an unfitted riskbench model (``LandmarkSupermodel``, ``CoxModel``,
``SurvivalForest``) and keeps its contract (``fit``, ``predict_risk``, ``predict_curve`` and, where the
wrapped model has one, ``summary``). It sees only the rows it is fitted on, so resampling code that calls
``fit`` per fold or bootstrap replicate fits every imputation model inside that fold or replicate only.

Methods (``[missing_data] method``, overridable per model by ``[[models]] missing_data``):

``"multiple_imputation"`` (the default)
    m imputations by chained equations (:mod:`riskbench.models.imputation`): the training rows are imputed
    with the outcome in the imputation model (event indicator and Nelson–Aalen cumulative hazard, White &
    Royston 2009), one model is fitted per completed data set, and coefficients and standard errors are
    combined by Rubin's rules (:mod:`riskbench.models.rubin`). Rows to predict are imputed m times without
    their outcome (m draws from one chained-equations fit on the training covariates: the risks are averaged,
    so the imputation model's parameter uncertainty, which only Rubin's variance needs, is not redrawn) and
    the m models' risks are averaged. Why the default: under data missing at random it
    keeps every patient and gives unbiased estimates with honest intervals, while complete cases is biased
    unless the data are missing completely at random (or missingness is unrelated to the outcome given the
    covariates) and wastes the observed values of incomplete rows, and the missing-indicator method is
    biased even under MCAR in non-randomised data (Groenwold et al. 2012, CMAJ 184:1265-1269; White, Royston
    & Wood 2011, Stat Med 30:377-399; Sterne et al. 2009, BMJ 338:b2393; all **from memory**). When no
    covariate is missing in the training rows the model is fitted once (``fitted_once_``) and nothing is
    imputed for complete rows to predict, so complete data cost nothing extra.
``"complete_cases"``
    Rows with a missing model covariate are left out of the fit; when predicting, such a row gets no
    prediction (NaN). Evaluation then uses only the rows every evaluated model predicts
    (:func:`predicted_rows`), so a complete-case model is fitted and evaluated on its complete rows, paired
    comparisons stay paired, and the dropped rows are counted per landmark (``dropped_rows_`` here, the
    ``complete_cases`` table of the report).
``"missing_indicator"``
    A missing value is set to the training median of the covariate, and each covariate with a missing value
    in the training rows gets a 0/1 column ``<covariate>_missing`` that the wrapped model uses as one more
    covariate. A covariate complete in training but missing in a row to predict is set to its median
    (counted in ``unexpected_missing_``).
"""

from __future__ import annotations

import difflib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike
from sklearn.base import BaseEstimator, clone

from riskbench.models.imputation import (
    PredictionImputer,
    check_imputable,
    imputation_seeds,
    impute_training_rows,
    outcome_predictors,
)
from riskbench.models.risk_contract import (
    MISSING_DATA_KEYS,
    ModelInputError,
    covariate_values,
    describe_rows,
    prediction_origin,
    risk_curve,
)
from riskbench.models.rubin import pool_estimates

__all__ = [
    "METHODS",
    "MissingDataModel",
    "MissingDataPlan",
    "dropped_rows_by_landmark",
    "pooled_summary",
    "predicted_rows",
    "rows_without_prediction",
]

METHODS: tuple[str, ...] = ("multiple_imputation", "complete_cases", "missing_indicator")
DEFAULT_METHOD = "multiple_imputation"


def check_method(method: Any, *, key: str = "[missing_data] method") -> str:
    """``method`` if it is one of :data:`METHODS`, else a :class:`ModelInputError` naming ``key``."""
    if method in METHODS:
        return str(method)
    near = difflib.get_close_matches(str(method), METHODS, n=1)
    hint = f"; did you mean {near[0]!r}?" if near else ""
    raise ModelInputError(f"{key} = {method!r} is not a missing-data method; use one of {list(METHODS)}{hint}")


@dataclass(frozen=True)
class MissingDataPlan:
    """How a model handles missing covariate values (``[missing_data]`` of the configuration).

    Attributes
    ----------
    method : {"multiple_imputation", "complete_cases", "missing_indicator"}
    imputations : int
        m, the number of imputations (multiple imputation only; at least 2).
    max_iterations : int
        Rounds of chained equations per imputation (at least 1).
    """

    method: str = DEFAULT_METHOD
    imputations: int = 10
    max_iterations: int = 10

    def __post_init__(self) -> None:
        check_method(self.method)
        for key, value, low in (("imputations", self.imputations, 2), ("max_iterations", self.max_iterations, 1)):
            if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < low:
                raise ModelInputError(f"[missing_data] {key} = {value!r}: give a whole number of at least {low}")

    @classmethod
    def coerce(cls, value: Any, *, default: MissingDataPlan | None = None) -> MissingDataPlan | None:
        """A plan from a plan, a method name (other settings from ``default``), an object with the same
        attributes (the configuration's section), or None (stays None)."""
        if value is None or isinstance(value, cls):
            return value
        base = default or cls()
        if isinstance(value, str):
            return cls(check_method(value, key="[[models]] missing_data"), base.imputations, base.max_iterations)
        return cls(
            getattr(value, "method", base.method),
            int(getattr(value, "imputations", base.imputations)),
            int(getattr(value, "max_iterations", base.max_iterations)),
        )


def predicted_rows(risks: Sequence[Mapping[Any, np.ndarray]]) -> np.ndarray:
    """Rows for which every model has a finite risk at every horizon (complete-case models give NaN).

    Parameters
    ----------
    risks : sequence of mapping
        Per model, ``{horizon: risk per row}`` (or any key to an ``(n_rows, k)`` risk matrix), all over the
        same rows.
    """
    arrays = [np.asarray(r, dtype=float) for risk in risks for r in risk.values()]
    if not arrays:
        return np.ones(0, dtype=bool)
    return np.logical_and.reduce([np.isfinite(a).reshape(len(a), -1).all(axis=1) for a in arrays])


def rows_without_prediction(model: Any, table: pd.DataFrame) -> np.ndarray:
    """Rows of ``table`` the model leaves without a risk on purpose (complete cases: a covariate is missing).

    Any other model, or any other method, predicts every row (all False).
    """
    if isinstance(model, MissingDataModel) and model.method == "complete_cases":
        values = covariate_values(table, model.covariates, what="prediction table", allow_missing=True)
        return np.isnan(values).any(axis=1)
    return np.zeros(len(table), dtype=bool)


def dropped_rows_by_landmark(table: pd.DataFrame, dropped: np.ndarray) -> pd.DataFrame:
    """``landmark, rows, rows_dropped, patients_dropped`` (landmark in days; one row when there is none)."""
    dropped = np.asarray(dropped, dtype=bool)
    landmark = (
        pd.to_numeric(table["landmark"], errors="coerce").to_numpy(dtype=float)
        if "landmark" in table.columns
        else np.full(len(table), np.nan)
    )
    patients = table["patient_id"].to_numpy() if "patient_id" in table.columns else np.arange(len(table))
    frame = pd.DataFrame({"landmark": landmark, "dropped": dropped, "patient": patients})
    rows = []
    for s, group in frame.groupby("landmark", dropna=False, sort=True):
        rows.append(
            {
                "landmark": float(s),
                "rows": len(group),
                "rows_dropped": int(group["dropped"].sum()),
                "patients_dropped": int(group.loc[group["dropped"], "patient"].nunique()),
            }
        )
    return pd.DataFrame(rows, columns=["landmark", "rows", "rows_dropped", "patients_dropped"])


def _se_column(summary: pd.DataFrame) -> str:
    """The standard-error column a model's summary uses for its intervals."""
    if "se_robust" in summary.columns:
        return "se_robust"
    if "se_used" in summary.columns and (summary["se_used"] == "robust").all() and "robust_se" in summary:
        return "robust_se"
    return "se"


def pooled_summary(summaries: Sequence[pd.DataFrame]) -> pd.DataFrame:
    """One summary from the summaries of the m fitted models, by Rubin's rules.

    Every standard-error column (``se``, ``robust_se``, ``se_model``, ``se_robust``) is pooled as
    ``sqrt(T)`` from its own within variance; hazard ratios, intervals (``hr_lower_<level>``,
    ``hr_upper_<level>``), ``z`` and p-values are recomputed from the pooled coefficient and the standard
    error the model uses for intervals, with Rubin's t reference distribution; ``fraction_missing_info``
    (Rubin's γ) and ``imputation_df`` (ν) are added. Columns are those of the wrapped model's summary.
    """
    first = summaries[0]
    coef = np.stack([s["coef"].to_numpy(dtype=float) for s in summaries])
    used = _se_column(first)
    out = first.copy()
    pooled_used = None
    for column in ("se", "robust_se", "se_model", "se_robust"):
        if column not in first.columns or first[column].isna().all():
            continue
        variances = np.stack([s[column].to_numpy(dtype=float) ** 2 for s in summaries])
        pooled = pool_estimates(coef, variances)
        out[column] = pooled.se
        if column == used:
            pooled_used = pooled
    if pooled_used is None:
        raise ModelInputError("the wrapped model's summary has no standard errors to pool")
    out["coef"] = pooled_used.estimate
    if "hazard_ratio" in out.columns:
        out["hazard_ratio"] = np.exp(pooled_used.estimate)
    for column in first.columns:
        if column.startswith("hr_lower_") or column.startswith("hr_upper_"):
            level = float(column.rsplit("_", 1)[1]) / 100
            low, high = pooled_used.interval(level)
            out[column] = np.exp(low if column.startswith("hr_lower_") else high)
    if "z" in out.columns:
        out["z"] = pooled_used.estimate / pooled_used.se
    if "p_value" in out.columns:
        out["p_value"] = pooled_used.p_value()
    out["fraction_missing_info"] = pooled_used.fraction_missing_info
    out["imputation_df"] = pooled_used.df
    return out


class MissingDataModel(BaseEstimator):
    """A riskbench model with a missing-data method around it (module notes).

    Parameters
    ----------
    estimator : unfitted riskbench model
        Has ``covariates``, ``fit`` and ``predict_risk``/``predict_curve``; cloned for every fit.
    method : {"multiple_imputation", "complete_cases", "missing_indicator"}
    imputations : int
        m (multiple imputation).
    max_iterations : int
        Rounds of chained equations.
    random_state : int
        Seed from which the m imputation seeds derive (:func:`riskbench.models.imputation.imputation_seeds`).

    Attributes (after fit)
    ----------------------
    models_ : list of fitted models (m for multiple imputation, else one)
    fitted_once_ : bool, True when one model was fitted (nothing was missing, or not multiple imputation)
    training_missing_ : dict covariate -> number of training rows with it missing
    dropped_rows_ : DataFrame ``landmark, rows, rows_dropped, patients_dropped`` (complete cases)
    indicator_columns_ : list of ``<covariate>_missing`` columns (missing indicator)
    medians_ : dict covariate -> training median (missing indicator)
    note_ : str, one sentence on what was done
    """

    def __init__(
        self,
        estimator: Any,
        *,
        method: str = DEFAULT_METHOD,
        imputations: int = 10,
        max_iterations: int = 10,
        random_state: int = 0,
    ) -> None:
        self.estimator = estimator
        self.method = method
        self.imputations = imputations
        self.max_iterations = max_iterations
        self.random_state = random_state

    # ------------------------------------------------------------------ helpers
    @property
    def covariates(self) -> list[str]:
        """The wrapped model's covariates (the columns this wrapper reads and fills)."""
        return list(self.estimator.covariates)

    def _check_fitted(self) -> None:
        if not hasattr(self, "models_"):
            raise ModelInputError("this MissingDataModel is not fitted yet; call fit(table) first")

    @staticmethod
    def _with_values(table: pd.DataFrame, names: Sequence[str], values: np.ndarray) -> pd.DataFrame:
        out = table.copy()
        for j, name in enumerate(names):
            out[name] = values[:, j]
        return out

    # --------------------------------------------------------------------- fit
    def fit(self, table: pd.DataFrame, **fit_params: Any) -> MissingDataModel:
        """Fit on a landmark stack or counting-process rows with missing covariate values; returns self.

        ``fit_params`` go to every fit of the wrapped estimator (e.g. a landmark super-model's ``start`` and
        ``robust``)."""
        plan = MissingDataPlan(self.method, int(self.imputations), int(self.max_iterations))
        names = self.covariates
        x = covariate_values(table, names, what="fitting table", allow_missing=True)
        missing = np.isnan(x)
        self.training_missing_ = {n: int(missing[:, j].sum()) for j, n in enumerate(names) if missing[:, j].any()}
        self.fitted_once_ = True
        self.indicator_columns_: list[str] = []
        self.medians_: dict[str, float] = {}
        self.dropped_rows_ = dropped_rows_by_landmark(table, np.zeros(len(table), dtype=bool))
        if plan.method == "missing_indicator":
            check_imputable(x, names, what="training rows")
            self.medians_ = {n: float(np.nanmedian(x[:, j])) for j, n in enumerate(names)}
        if not missing.any():
            self.models_ = [clone(self.estimator).fit(table, **fit_params)]
            self.note_ = "no covariate of the model is missing in the training rows: fitted once"
        elif plan.method == "complete_cases":
            self._fit_complete_cases(table, missing, fit_params)
        elif plan.method == "missing_indicator":
            self._fit_indicator(table, x, missing, fit_params)
        else:
            self._fit_imputed(table, x, plan, fit_params)
        if plan.method == "multiple_imputation":
            self._origin_train_ = prediction_origin(table)
            self._x_train_ = x
            self._prediction_imputer_: PredictionImputer | None = None  # fitted when first needed
        return self

    def _fit_complete_cases(self, table: pd.DataFrame, missing: np.ndarray, fit_params: dict[str, Any]) -> None:
        dropped = np.asarray(missing.any(axis=1), dtype=bool)
        if dropped.all():
            raise ModelInputError(
                f"complete cases: every training row misses a covariate of the model "
                f"({describe_rows(table, dropped)}); choose 'multiple_imputation' with {MISSING_DATA_KEYS} "
                "or remove the covariates that are most often missing"
            )
        self.dropped_rows_ = dropped_rows_by_landmark(table, dropped)
        self.models_ = [clone(self.estimator).fit(table.loc[~dropped], **fit_params)]
        self.note_ = f"complete cases: {describe_rows(table, dropped)} left out of the fit"

    def _fit_indicator(
        self, table: pd.DataFrame, x: np.ndarray, missing: np.ndarray, fit_params: dict[str, Any]
    ) -> None:
        names = self.covariates
        self.indicator_columns_ = [f"{n}_missing" for j, n in enumerate(names) if missing[:, j].any()]
        clash = [c for c in self.indicator_columns_ if c in table.columns]
        if clash:
            raise ModelInputError(
                f"missing indicator: the table already has column(s) {clash}; rename them or choose another "
                f"method with {MISSING_DATA_KEYS}"
            )
        estimator = clone(self.estimator).set_params(covariates=[*names, *self.indicator_columns_])
        self.models_ = [estimator.fit(self._indicator_table(table, x), **fit_params)]
        self.note_ = f"missing indicator: {len(self.indicator_columns_)} indicator column(s) added"

    def _indicator_table(self, table: pd.DataFrame, x: np.ndarray) -> pd.DataFrame:
        names = self.covariates
        missing = np.isnan(x)
        filled = np.where(missing, np.array([self.medians_[n] for n in names])[None, :], x)
        out = self._with_values(table, names, filled)
        for j, name in enumerate(names):
            if f"{name}_missing" in self.indicator_columns_:
                out[f"{name}_missing"] = missing[:, j].astype(float)
        return out

    def _fit_imputed(
        self, table: pd.DataFrame, x: np.ndarray, plan: MissingDataPlan, fit_params: dict[str, Any]
    ) -> None:
        names = self.covariates
        check_imputable(x, names, what="training rows")
        outcome, _ = outcome_predictors(table)
        origin = prediction_origin(table)
        self.models_ = []
        for seed in imputation_seeds(self.random_state, plan.imputations):
            completed = impute_training_rows(x, origin, outcome, seed=seed, max_iterations=plan.max_iterations)
            self.models_.append(clone(self.estimator).fit(self._with_values(table, names, completed), **fit_params))
        self.fitted_once_ = False
        self.note_ = (
            f"multiple imputation: {plan.imputations} imputations of "
            f"{sum(self.training_missing_.values())} missing training values"
        )

    def starting_values(self) -> Any:
        """The wrapped fit's starting values for a refit (of the first fit when there are several imputations),
        or None when the wrapped estimator has none."""
        first = self.models_[0]
        return first.starting_values() if hasattr(first, "starting_values") else None

    # ----------------------------------------------------------------- predict
    def _prediction_imputer(self, seed: int) -> PredictionImputer:
        if self._prediction_imputer_ is None:
            self._prediction_imputer_ = PredictionImputer(seed, int(self.max_iterations)).fit(
                self._x_train_, self._origin_train_
            )
        return self._prediction_imputer_

    def predict_curve(self, table: pd.DataFrame, times: ArrayLike) -> np.ndarray:
        """Risk of the outcome in (s, s + t] for each row and each t in ``times`` (days).

        Complete cases: NaN for a row with a missing covariate. Multiple imputation: the mean over the m
        imputations of the rows to predict (and the m fitted models) of each model's risk.
        """
        self._check_fitted()
        times = np.atleast_1d(np.asarray(times, dtype=float))
        names = self.covariates
        x = covariate_values(table, names, what="prediction table", allow_missing=True)
        missing = np.isnan(x)
        if self.method == "complete_cases":
            out = np.full((len(table), len(times)), np.nan)
            keep = ~missing.any(axis=1)
            if keep.any():
                out[keep] = risk_curve(self.models_[0], table.loc[keep], times)
            return out
        if self.method == "missing_indicator":
            self.unexpected_missing_ = {
                n: int(missing[:, j].sum())
                for j, n in enumerate(names)
                if missing[:, j].any() and f"{n}_missing" not in self.indicator_columns_
            }
            return risk_curve(self.models_[0], self._indicator_table(table, x), times)
        if not missing.any():
            curves = [risk_curve(model, table, times) for model in self.models_]
            return np.mean(curves, axis=0)
        origin = prediction_origin(table)
        seeds = imputation_seeds(self.random_state, int(self.imputations))
        curves = []
        for k, seed in enumerate(seeds):
            completed = self._prediction_imputer(seeds[0]).transform(x, origin, draw_seed=seed)
            model = self.models_[0 if self.fitted_once_ else k]
            curves.append(risk_curve(model, self._with_values(table, names, completed), times))
        return np.mean(curves, axis=0)

    def predict_risk(self, table: pd.DataFrame, horizon: float) -> np.ndarray:
        """Risk of the outcome in (s, s + horizon] for each row (horizon in days; see :meth:`predict_curve`)."""
        return self.predict_curve(table, [horizon])[:, 0]

    # ----------------------------------------------------------------- report
    @property
    def summary(self):
        """The wrapped model's ``summary`` (pooled by Rubin's rules over the m imputations; absent when the
        wrapped model has none, so ``hasattr(model, "summary")`` answers as for the wrapped model)."""
        if not callable(getattr(self.estimator, "summary", None)):
            raise AttributeError(f"{type(self.estimator).__name__} has no summary")
        return self._summary

    def _summary(self, *args: Any, **kwargs: Any) -> pd.DataFrame:
        self._check_fitted()
        frames = [model.summary(*args, **kwargs) for model in self.models_]
        if len(frames) == 1:
            out = frames[0].copy()
            out["fraction_missing_info"] = 0.0
            return out
        return pooled_summary(frames)
