"""How much of an update's fit to the new cohort is optimism: the bootstrap estimate for calibration measures.

An update estimated on the new cohort and scored on the same cohort looks better than it will on the next
patients (by construction its calibration-in-the-large is perfect there). Following the bootstrap optimism
estimate (Efron & Tibshirani 1993, ch. 17; Harrell, Lee & Mark 1996, Stat Med; Steyerberg 2019, ch. 17), each
replicate draws patients with replacement (all their landmark rows together), re-estimates the update on the
draw, and scores it on the draw (apparent) and on the whole cohort (test); the mean of apparent − test over the
replicates is the optimism, and apparent − optimism the optimism-corrected value.

Measures: the observed/expected ratio (observed risk by the horizon from the target's estimator over the mean
updated risk) and the calibration slope (cloglog regression of pseudo-observations on cloglog of the updated
risk), the two that updating sets out to fix. Discrimination is unchanged by the recalibrations (they are
monotone in the original risk) and is reported with its interval in the performance table.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import replace

import numpy as np
import pandas as pd

from riskbench.metrics.calibration import cloglog
from riskbench.metrics.censoring import observed_risk
from riskbench.metrics.cloglog_regression import fit_cloglog
from riskbench.metrics.inputs import MetricInputError
from riskbench.metrics.pseudo_observations import pseudo_observations
from riskbench.models.risk_contract import ModelInputError
from riskbench.validation.errors import ValidationInputError
from riskbench.validation.landmark_performance import patient_resample
from riskbench.validation.updating import UpdateFit, UpdatingRows, fit_update

__all__ = ["UPDATE_MEASURES", "calibration_measures", "update_optimism"]

#: The measures whose optimism is estimated.
UPDATE_MEASURES: tuple[str, ...] = ("oe_ratio", "calibration_slope")


def calibration_measures(
    time: np.ndarray, status: np.ndarray, pseudo: np.ndarray, risk: np.ndarray, horizon: float
) -> dict[str, float]:
    """Observed/expected ratio and calibration slope of ``risk`` at ``horizon`` (days).

    ``status`` is already coded for the model's estimand (competing events censored for a cause-specific
    prediction); ``pseudo`` are the pseudo-observations of the same observed risk.
    """
    observed = observed_risk(time, status, horizon)[0]
    expected = float(np.mean(risk))
    z = cloglog(risk)
    try:
        slope = float(
            fit_cloglog(
                np.column_stack([np.ones(z.size), z]), pseudo, start=np.array([0.0, 1.0]), covariance=False
            ).coef[1]
        )
    except MetricInputError:
        slope = np.nan
    return {"oe_ratio": observed / expected if expected > 0 else np.nan, "calibration_slope": slope}


def _subset(rows: UpdatingRows, index: np.ndarray, pseudo: np.ndarray) -> UpdatingRows:
    return replace(
        rows,
        risk=rows.risk[index],
        pseudo=pseudo,
        landmark=rows.landmark[index],
        patient=rows.patient[index],
        x=rows.x[index],
    )


def update_optimism(
    rows: UpdatingRows,
    time: np.ndarray,
    status: np.ndarray,
    fits: Mapping[str, UpdateFit],
    *,
    n_boot: int,
    seed: int,
    shrink_revision: bool = False,
) -> pd.DataFrame:
    """Bootstrap optimism of each fitted update's calibration at the rows' horizon.

    Parameters
    ----------
    rows
        The new cohort's rows (:func:`riskbench.validation.updating.updating_rows`).
    time, status
        Days from the landmark and status of the same rows, status coded for the model's estimand.
    fits
        Method -> the update fitted on all rows (its apparent values are the reference).
    n_boot, seed
        Replicates (patients resampled with all their rows) and their seed.
    shrink_revision
        Re-estimate a revision with shrinkage, as it was fitted.

    Returns
    -------
    DataFrame
        ``method, horizon_days, metric, apparent, optimism, corrected, resamples`` (``resamples``: replicates in
        which the update could be re-estimated and scored).
    """
    if n_boot < 0:
        raise ValidationInputError(f"the number of bootstrap resamples must be 0 or more; got {n_boot}.")
    h = rows.horizon
    apparent = {
        m: calibration_measures(time, status, rows.pseudo, fit.risk(rows.risk, rows.landmark, rows.x), h)
        for m, fit in fits.items()
    }
    gaps: dict[str, list[dict[str, float]]] = {m: [] for m in fits}
    for seq in np.random.SeedSequence(seed).spawn(n_boot):
        index = patient_resample(rows.patient, np.random.default_rng(seq))
        t_b, s_b = time[index], status[index]
        if not ((s_b == 1) & (t_b <= h)).any():
            continue
        pseudo_b = pseudo_observations(t_b, s_b, h, cause=1)
        drawn = _subset(rows, index, pseudo_b)
        for method in fits:
            try:
                refit = fit_update(drawn, method, shrink=shrink_revision and method == "revision")
                on_draw = calibration_measures(t_b, s_b, pseudo_b, refit.risk(drawn.risk, drawn.landmark, drawn.x), h)
                on_all = calibration_measures(
                    time, status, rows.pseudo, refit.risk(rows.risk, rows.landmark, rows.x), h
                )
            except (ValidationInputError, ModelInputError, MetricInputError, np.linalg.LinAlgError):
                continue
            gaps[method].append({k: on_draw[k] - on_all[k] for k in UPDATE_MEASURES})
    records = []
    for method, per_metric in apparent.items():
        for metric in UPDATE_MEASURES:
            values = np.array([g[metric] for g in gaps[method]], dtype=float)
            values = values[np.isfinite(values)]
            optimism = float(values.mean()) if values.size else np.nan
            records.append(
                (method, h, metric, per_metric[metric], optimism, per_metric[metric] - optimism, int(values.size))
            )
    return pd.DataFrame(
        records, columns=["method", "horizon_days", "metric", "apparent", "optimism", "corrected", "resamples"]
    )


def optimism_for(
    rows_by_horizon: Mapping[float, tuple[UpdatingRows, np.ndarray, np.ndarray]],
    fits: Mapping[float, Mapping[str, UpdateFit]],
    *,
    n_boot: int,
    seed: int,
    shrink_revision: bool = False,
    methods: Sequence[str] | None = None,
) -> pd.DataFrame:
    """:func:`update_optimism` at every horizon (``rows_by_horizon``: horizon -> (rows, time, status))."""
    frames = []
    for h, (rows, time, status) in rows_by_horizon.items():
        chosen = {m: f for m, f in fits[h].items() if methods is None or m in methods}
        if chosen:
            frames.append(
                update_optimism(rows, time, status, chosen, n_boot=n_boot, seed=seed, shrink_revision=shrink_revision)
            )
    return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame()
