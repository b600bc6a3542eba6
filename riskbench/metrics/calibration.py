"""Calibration of predicted risks at a horizon.

* grouped: quantile groups of predicted risk against the observed risk (1 − Kaplan–Meier, or the
  Aalen–Johansen cumulative incidence when competing events, code 2, are present) with 95% intervals;
* smoothed: ICI, E50, E90 (Austin, Harrell & van Klaveren 2020, Stat Med): a Cox model of the outcome on a
  restricted cubic spline (3 knots) of cloglog(predicted risk) gives the observed risk for every subject;
* calibration slope: the coefficient of cloglog(predicted risk) = log cumulative hazard in a Cox model
  (1 = ideal, < 1 = predictions too extreme); observed/expected ratio at the horizon;
* D-calibration (Haider et al. 2020, JMLR): are predicted survival probabilities at the observed times uniform?
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats

from riskbench.metrics.censoring import observed_risk
from riskbench.metrics.hazard_fit import fit_hazard
from riskbench.metrics.horizon_inputs import single_horizon_inputs
from riskbench.metrics.inputs import ArrayLike, MetricInputError, check_lengths

Z95 = float(stats.norm.ppf(0.975))
_CLIP = 1e-10


@dataclass(frozen=True)
class Calibration:
    """Calibration at one horizon.

    Attributes
    ----------
    horizon
        Horizon (same unit as ``time``).
    ici, e50, e90
        Mean, median and 90th percentile of |smoothed observed − predicted| (NaN with competing events).
    slope, slope_se
        Calibration slope (Cox coefficient of cloglog(predicted risk)) and its standard error.
    oe_ratio, oe_lower, oe_upper
        Observed / expected risk at the horizon and its 95% interval (observed from Kaplan–Meier or
        Aalen–Johansen; expected = mean predicted risk).
    groups
        One row per quantile group: ``group, n, predicted, observed, observed_lower, observed_upper``.
    curve
        Smoothed curve on a grid of predicted risks: ``predicted, observed, observed_lower, observed_upper``
        (seeded bootstrap percentile band).
    subject_observed
        Smoothed observed risk for every subject (input order).
    """

    horizon: float
    ici: float
    e50: float
    e90: float
    slope: float
    slope_se: float
    oe_ratio: float
    oe_lower: float
    oe_upper: float
    groups: pd.DataFrame
    curve: pd.DataFrame
    subject_observed: np.ndarray


def cloglog(risk: np.ndarray) -> np.ndarray:
    """log(−log(1 − risk)): the log cumulative hazard implied by a risk, clipped away from 0 and 1."""
    p = np.clip(risk, _CLIP, 1 - _CLIP)
    return np.log(-np.log1p(-p))


def rcs_basis(x: np.ndarray, knots: np.ndarray) -> np.ndarray:
    """Restricted cubic spline basis (x and the non-linear terms), Harrell's normalisation by (k_last − k_1)²."""
    k = np.asarray(knots, dtype=float)
    last, second_last = k[-1], k[-2]
    scale = (last - k[0]) ** 2

    def cube(u):
        return np.maximum(u, 0.0) ** 3

    cols = [x]
    for kj in k[:-2]:
        cols.append(
            (
                cube(x - kj)
                - cube(x - second_last) * (last - kj) / (last - second_last)
                + cube(x - last) * (second_last - kj) / (last - second_last)
            )
            / scale
        )
    return np.column_stack(cols)


def _loglog_interval(obs: float, var: float) -> tuple[float, float]:
    """95% interval for an observed risk via log(−log(1 − risk)) (the usual Kaplan–Meier transform)."""
    s = 1.0 - obs
    if not (0 < s < 1) or not np.isfinite(var):
        return (obs, obs) if s == 1 else (np.nan, np.nan)
    half = Z95 * np.sqrt(var) / (s * abs(np.log(s)))
    lo_s, hi_s = s ** np.exp(half), s ** np.exp(-half)
    return 1.0 - hi_s, 1.0 - lo_s


def _grouped(t, status, risk, horizon, n_groups) -> pd.DataFrame:
    edges = np.quantile(risk, np.linspace(0, 1, n_groups + 1))
    group = np.clip(np.searchsorted(edges[1:-1], risk, side="right"), 0, n_groups - 1)
    rows = []
    for g in np.unique(group):
        idx = group == g
        obs, var = observed_risk(t[idx], status[idx], horizon)
        lo, hi = _loglog_interval(obs, var)
        rows.append((int(g) + 1, int(idx.sum()), float(risk[idx].mean()), obs, lo, hi))
    return pd.DataFrame(rows, columns=["group", "n", "predicted", "observed", "observed_lower", "observed_upper"])


def _smoothed_fit(t, status, z, knots):
    return fit_hazard(rcs_basis(z, knots), t, status)


def calibration_at_horizon(
    time: ArrayLike,
    event: ArrayLike,
    risk: ArrayLike,
    horizon: float,
    *,
    n_groups: int = 10,
    n_boot: int = 100,
    seed: int = 0,
    check_direction: bool = True,
) -> Calibration:
    """Grouped and smoothed calibration, slope and O/E ratio of predicted risks at one horizon.

    Parameters
    ----------
    time
        Follow-up (days from entry or landmark).
    event
        0 censored, 1 outcome, 2 competing event.
    risk
        Predicted probability of the outcome by ``horizon`` (not a survival probability).
    horizon
        Days; within [min(time), max(time)).
    n_groups
        Number of quantile groups of predicted risk.
    n_boot
        Bootstrap replicates for the band around the smoothed curve (seeded; 0 = no band).
    seed
        Seed for the bootstrap.
    check_direction
        Refuse a ``risk`` that is clearly anti-concordant (a survival probability passed by mistake).

    Notes
    -----
    Subjects are followed to their own time; the Cox calibration models use the follow-up up to the
    horizon (later follow-up administratively censored at the horizon). With competing events the
    smoothed measures and the slope are NaN: a Cox model of the cause-specific hazard does not estimate
    the cumulative incidence; the grouped table and O/E use Aalen–Johansen.
    """
    t, status, r, h = single_horizon_inputs(
        time, event, risk, horizon, metric="calibration", check_direction=check_direction
    )
    if n_groups < 1 or n_groups > t.size:
        raise MetricInputError(f"`n_groups` must be between 1 and the number of subjects ({t.size}); got {n_groups}")

    groups = _grouped(t, status, r, h, n_groups)
    obs_all, var_all = observed_risk(t, status, h)
    expected = float(r.mean())
    oe = obs_all / expected if expected > 0 else np.nan
    se_log = np.sqrt(var_all) / obs_all if obs_all > 0 else np.nan
    oe_lo, oe_hi = oe * np.exp(-Z95 * se_log), oe * np.exp(Z95 * se_log)

    nan_curve = pd.DataFrame(columns=["predicted", "observed", "observed_lower", "observed_upper"], dtype=float)
    if (status == 2).any():
        return Calibration(h, np.nan, np.nan, np.nan, np.nan, np.nan, oe, oe_lo, oe_hi, groups, nan_curve,
                           np.full(t.size, np.nan))

    # follow-up beyond the horizon carries no information about risk by the horizon
    t_h = np.minimum(t, h)
    s_h = np.where(t > h, 0, status)
    z = cloglog(r)
    slope_fit = fit_hazard(z[:, None], t_h, s_h)
    knots = np.quantile(z, [0.1, 0.5, 0.9])
    if np.unique(knots).size < 3:
        raise MetricInputError(
            "`risk` takes too few distinct values for a 3-knot spline (10th, 50th, 90th percentiles coincide); "
            "use the grouped calibration table"
        )
    fit = _smoothed_fit(t_h, s_h, z, knots)
    subject_obs = fit.risk_at(rcs_basis(z, knots), h)
    diff = np.abs(subject_obs - r)

    grid_risk = np.quantile(r, np.linspace(0.01, 0.99, 60))
    grid_basis = rcs_basis(cloglog(grid_risk), knots)
    curve = pd.DataFrame({"predicted": grid_risk, "observed": fit.risk_at(grid_basis, h)})
    if n_boot > 0:
        rng = np.random.default_rng(seed)
        draws = []
        for _ in range(n_boot):
            i = rng.integers(0, t.size, t.size)
            if not (s_h[i] == 1).any():
                continue
            try:
                draws.append(_smoothed_fit(t_h[i], s_h[i], z[i], knots).risk_at(grid_basis, h))
            except MetricInputError:
                continue
        band = np.quantile(np.array(draws), [0.025, 0.975], axis=0) if draws else np.full((2, grid_risk.size), np.nan)
        curve["observed_lower"], curve["observed_upper"] = band[0], band[1]
    else:
        curve["observed_lower"] = curve["observed_upper"] = np.nan
    return Calibration(
        horizon=h,
        ici=float(diff.mean()),
        e50=float(np.median(diff)),
        e90=float(np.quantile(diff, 0.9)),
        slope=float(slope_fit.coef[0]),
        slope_se=float(np.sqrt(slope_fit.var[0, 0])),
        oe_ratio=float(oe),
        oe_lower=float(oe_lo),
        oe_upper=float(oe_hi),
        groups=groups,
        curve=curve,
        subject_observed=subject_obs,
    )


@dataclass(frozen=True)
class DCalibration:
    """D-calibration test: ``statistic`` (chi-square), ``p_value``, ``df``, and ``bins`` with columns
    ``lower, upper, observed, expected`` (observed counts may be fractional: censored subjects are spread)."""

    statistic: float
    p_value: float
    df: int
    bins: pd.DataFrame


def d_calibration(event: ArrayLike, survival_at_observed_time: ArrayLike, *, n_bins: int = 10) -> DCalibration:
    """D-calibration (Haider et al. 2020): predicted survival at each subject's observed time should be
    uniform on [0, 1] for a calibrated survival model.

    Parameters
    ----------
    event
        1 outcome, 0 censored (2, a competing event, counts as censored).
    survival_at_observed_time
        The model's predicted survival probability S(T_i | x_i) at the subject's own observed time — a
        survival probability, unlike ``risk`` elsewhere.
    n_bins
        Equal-width bins of [0, 1].

    Notes
    -----
    An outcome adds 1 to the bin holding its S. A subject censored with survival s has S(T) uniform on
    [0, s): the bin holding s receives (s − lower)/s and every bin wholly below s receives width/s.
    """
    s = np.asarray(survival_at_observed_time, dtype=float)
    ev = np.asarray(event)
    check_lengths(event=ev, survival_at_observed_time=s)
    if not np.isfinite(s).all() or (s < 0).any() or (s > 1).any():
        raise MetricInputError("`survival_at_observed_time` must be survival probabilities in [0, 1] with no gaps")
    edges = np.linspace(0.0, 1.0, n_bins + 1)
    lower = edges[:-1]
    width = 1.0 / n_bins
    b = np.minimum((s * n_bins).astype(int), n_bins - 1)
    counts = np.bincount(b[ev == 1], minlength=n_bins).astype(float)
    cs, cb = s[ev != 1], b[ev != 1]
    zero = cs <= 0
    counts[0] += zero.sum()
    cs, cb = cs[~zero], cb[~zero]
    np.add.at(counts, cb, (cs - lower[cb]) / cs)
    # bins wholly below: for subject with bin cb, bins 0..cb-1 each get width/s
    below_share = np.zeros(n_bins + 1)
    np.add.at(below_share, cb, width / cs)
    counts += np.cumsum(below_share[::-1])[::-1][1:]
    expected = np.full(n_bins, s.size / n_bins)
    stat = float(np.sum((counts - expected) ** 2 / expected))
    df = n_bins - 1
    bins = pd.DataFrame({"lower": lower, "upper": edges[1:], "observed": counts, "expected": expected})
    return DCalibration(stat, float(stats.chi2.sf(stat, df)), df, bins)
