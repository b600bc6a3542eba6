"""Schoenfeld residuals and the proportional-hazards test of Grambsch & Therneau (1994).

For an event row at time t the Schoenfeld residual is ``x - xbar(t)``, with ``xbar`` the
risk-weighted covariate mean of the risk set (for Efron ties: the average over the m Efron
terms, as in R's survival package and lifelines).  The scaled residual
``d · V · r + β`` (d events, V the model-based covariance) estimates β(t).

The test (Grambsch & Therneau 1994, Biometrika 81:515–526) regresses the scaled residuals on a
transform g(t) of event time:

- per covariate j: ``T_j = (Σ (g - ḡ) r*_j)² / (d · V_jj · Σ (g - ḡ)²)`` ~ χ²(1);
- global: ``T = d · (gc' R) V (R' gc) / Σ gc²`` ~ χ²(p), with R the unscaled residuals and gc = g - ḡ.

This is the approximation R's ``cox.zph`` used before survival 3.0 and that lifelines'
``proportional_hazard_test`` uses today; the per-covariate statistics equal lifelines' for the
``km``, ``identity`` and ``log`` transforms.  ``km`` is 1 − the (unstratified) Kaplan–Meier estimate at
each event time from the fitting rows (left-truncated product-limit for (start, stop] rows);
``rank`` is the average rank of the event times (R's convention; lifelines' ``rank`` numbers tied event
times consecutively, so it differs when times are tied).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats

from riskbench.models.cox_engine import event_risk_set_means
from riskbench.models.cox_model import CoxModel, FittingArrays
from riskbench.models.risk_contract import ModelInputError

__all__ = ["TIME_TRANSFORMS", "CoxRefit", "cox_refit", "proportional_hazards_test", "schoenfeld_residuals"]

TIME_TRANSFORMS = ("km", "rank", "identity", "log")


def _strata_codes(strata: np.ndarray | None, n: int) -> np.ndarray:
    if strata is None:
        return np.zeros(n, dtype=np.int64)
    return pd.factorize(pd.Series(strata), sort=True)[0].astype(np.int64)


def schoenfeld_residuals(model: CoxModel, table: pd.DataFrame, *, scaled: bool = False) -> pd.DataFrame:
    """Schoenfeld residuals of a fitted :class:`CoxModel` on its fitting ``table``.

    Parameters
    ----------
    model : fitted CoxModel.
    table : the counting-process rows it was fitted on.
    scaled : if True return ``d · V · r + β`` (Grambsch & Therneau's scaled residuals).

    Returns
    -------
    DataFrame with one row per event: ``row`` (position in ``table``), ``time`` (days), then one
    column per covariate (original units; log hazard ratio if ``scaled``).
    """
    if not hasattr(model, "fit_"):
        raise ModelInputError("this CoxModel is not fitted yet; call fit(table) first.")
    fit = model.fit_
    arr = model.fitting_arrays(table)
    X, event = arr.X, arr.event
    n = X.shape[0]
    start = np.zeros(n) if arr.start is None else arr.start
    weights = np.ones(n) if arr.weights is None else np.asarray(arr.weights, float)
    if int(event.sum()) != fit.n_events:
        raise ModelInputError(
            f"table has {int(event.sum())} events but the model was fitted on {fit.n_events}; "
            "pass the table the model was fitted on."
        )
    Xs = (X - fit.center) / fit.scale
    parts = event_risk_set_means(
        Xs, start, arr.stop, event, _strata_codes(arr.strata, n), weights, fit.coef * fit.scale, fit.ties
    )
    resid = (Xs[parts.row] - parts.mean) * fit.scale
    if scaled:
        resid = fit.n_events * resid @ fit.var + fit.coef
    out = pd.DataFrame(resid, columns=list(fit.names))
    out.insert(0, "time", parts.time)
    out.insert(0, "row", parts.row)
    return out.sort_values(["time", "row"], kind="stable").reset_index(drop=True)


def _km_at_event_times(
    start: np.ndarray, stop: np.ndarray, event: np.ndarray, weights: np.ndarray, at: np.ndarray
) -> np.ndarray:
    """Product-limit survival (all strata pooled; left truncation at ``start``) at times ``at``."""
    times = np.unique(stop[event > 0])
    order_stop, order_start = np.argsort(stop), np.argsort(start)
    w_stop = np.r_[np.cumsum(weights[order_stop][::-1])[::-1], 0.0]
    w_start = np.r_[np.cumsum(weights[order_start][::-1])[::-1], 0.0]
    at_risk = (
        w_stop[np.searchsorted(stop[order_stop], times, side="left")]
        - w_start[np.searchsorted(start[order_start], times, side="left")]
    )
    deaths = np.bincount(np.searchsorted(times, stop[event > 0]), weights=weights[event > 0], minlength=times.size)
    surv = np.cumprod(1.0 - deaths / at_risk)
    return surv[np.searchsorted(times, at)]


def _transform(kind: str, times: np.ndarray, arr: FittingArrays) -> np.ndarray:
    if kind == "identity":
        return times
    if kind == "log":
        if (times <= 0).any():
            raise ModelInputError("transform='log' needs event times > 0 days.")
        return np.log(times)
    if kind == "rank":
        return stats.rankdata(times)
    n = arr.X.shape[0]
    start = np.zeros(n) if arr.start is None else arr.start
    weights = np.ones(n) if arr.weights is None else np.asarray(arr.weights, float)
    return 1.0 - _km_at_event_times(start, arr.stop, arr.event, weights, times)


def proportional_hazards_test(model: CoxModel, table: pd.DataFrame, transform: str = "km") -> pd.DataFrame:
    """Grambsch–Therneau test of proportional hazards, per covariate and global.

    Parameters
    ----------
    model : fitted CoxModel (model-based variance is used).
    table : the rows it was fitted on.
    transform : time scale g(t): ``"km"`` (1 − Kaplan–Meier), ``"rank"``, ``"identity"`` (days) or ``"log"``.

    Returns
    -------
    DataFrame indexed by covariate plus ``"GLOBAL"``: ``statistic``, ``df``, ``p_value``;
    ``attrs["transform"]`` records the transform.
    """
    if transform not in TIME_TRANSFORMS:
        raise ModelInputError(f"transform={transform!r}; use one of {TIME_TRANSFORMS}.")
    resid = schoenfeld_residuals(model, table)
    fit = model.fit_
    names = list(fit.names)
    R = resid[names].to_numpy()
    g = _transform(transform, resid["time"].to_numpy(), model.fitting_arrays(table))
    gc = g - g.mean()
    ss = float(gc @ gc)
    if ss <= 0:
        raise ModelInputError("all events happen at one time: proportional hazards cannot be tested.")
    d = fit.n_events
    u = gc @ R  # (p,)
    per = d * (u @ fit.var) ** 2 / (np.diag(fit.var) * ss)
    glob = d * float(u @ fit.var @ u) / ss
    out = pd.DataFrame(
        {
            "statistic": np.r_[per, glob],
            "df": np.r_[np.ones(len(names), dtype=int), len(names)],
            "p_value": np.r_[stats.chi2.sf(per, 1), stats.chi2.sf(glob, len(names))],
        },
        index=pd.Index([*names, "GLOBAL"], name="covariate"),
    )
    out.attrs["transform"] = transform
    return out


@dataclass(frozen=True)
class CoxRefit:
    """A Cox-family model refitted as a plain :class:`CoxModel` on complete cases, for tests on its fit.

    Attributes
    ----------
    model : fitted CoxModel of the outcome (model-based variance; no cluster).
    table : the rows it was fitted on (design columns, ``time``/``stop``, ``status``).
    rows_left_out : rows of the input table with a missing covariate (not used).
    time_origin : ``"landmark"`` (time since the landmark, one stratum per landmark when the model has one
        baseline per landmark) or ``"entry"`` (counting-process rows).
    """

    model: CoxModel
    table: pd.DataFrame
    rows_left_out: int
    time_origin: str


def cox_refit(
    family: str,
    covariates: Sequence[str],
    params: Mapping[str, Any],
    table: pd.DataFrame,
    *,
    complete_on: Sequence[str] | None = None,
) -> CoxRefit:
    """Refit the outcome part of a ``landmark_cox`` or ``time_varying_cox`` model as a :class:`CoxModel`.

    A landmark super-model becomes a Cox model on its design (covariates and their landmark interactions,
    plus the landmark terms of a smooth baseline) with ``time`` since the landmark, stratified by landmark
    when it has one baseline per landmark: the same partial likelihood as the super-model's outcome model.
    A time-varying Cox model is refitted with its ties, penalty, strata and weights.

    Parameters
    ----------
    family : ``"landmark_cox"`` or ``"time_varying_cox"`` (``"cox"`` accepted).
    covariates : the model's covariates.
    params : the family's parameters from the configuration.
    table : the landmark stack (landmark_cox) or counting-process rows (time_varying_cox).
    complete_on : covariates whose missing values exclude a row (default ``covariates``); pass the union of
        two models' covariates to fit both on the same rows.

    Raises
    ------
    ModelInputError
        For another family, or when no complete row with an outcome is left.
    """
    from riskbench.models.landmark import LandmarkSupermodel

    covariates = list(covariates)
    needed = list(dict.fromkeys([*(complete_on or covariates), *covariates]))
    missing_columns = [c for c in needed if c not in table.columns]
    if missing_columns:
        raise ModelInputError(f"covariate(s) {missing_columns} are not columns of the table.")
    complete = table[needed].notna().all(axis=1).to_numpy()
    rows = table.loc[complete].reset_index(drop=True)
    if not (rows["status"] == 1).any():
        raise ModelInputError("no outcome among the rows with every covariate known.")
    if family == "landmark_cox":
        keep = {k: v for k, v in params.items() if k in ("landmark_effects", "baseline", "ties")}
        supermodel = LandmarkSupermodel(covariates, competing=False, **keep).fit(rows)
        s = rows["landmark"].to_numpy(float)
        design = supermodel.design_matrix(rows[covariates].to_numpy(float), s)
        names = list(supermodel.design_columns_)
        fit_table = pd.DataFrame(design, columns=names)
        fit_table["time"] = rows["time"].to_numpy(float)
        fit_table["status"] = rows["status"].to_numpy()
        strata = None
        if supermodel.baseline == "stratified":
            fit_table["landmark"] = s
            strata = "landmark"
        model = CoxModel(names, ties=supermodel.ties, strata=strata, cluster=None).fit(fit_table)
        return CoxRefit(model, fit_table, int((~complete).sum()), "landmark")
    if family in ("time_varying_cox", "cox"):
        keep = {k: v for k, v in params.items() if k in ("ties", "penalty", "strata", "weights")}
        model = CoxModel(covariates, cluster=None, **keep).fit(rows)
        return CoxRefit(model, rows, int((~complete).sum()), "entry")
    raise ModelInputError(f"family {family!r} is not a Cox model; the tests of a Cox fit do not apply.")
