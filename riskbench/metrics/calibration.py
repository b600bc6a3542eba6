"""Calibration of predicted risks at a horizon, with competing events where the prediction has them.

The observed risk a prediction is judged against follows what it estimates (``target``):

* ``"cumulative_incidence"``: the probability of the outcome by the horizon with the competing event (code 2)
  as a competing event: the Aalen–Johansen cumulative incidence (1 − Kaplan–Meier when no competing event
  occurs);
* ``"cause_specific"``: 1 − S of a cause-specific model: competing events are censored and the observed risk
  is 1 − Kaplan–Meier of the outcome.

Measures (Austin, Putter, Giardiello & van Klaveren 2022, Diagn Progn Res 6:2, for competing risks; Austin,
Harrell & van Klaveren 2020, Stat Med, without):

* every row gets a jackknife pseudo-observation of the observed risk by the horizon
  (:mod:`riskbench.metrics.pseudo_observations`; Gerds, Andersen & Kattan 2014, Stat Med);
* smoothed curve: the pseudo-observations regressed on a restricted cubic spline (3 knots) of
  cloglog(predicted risk) with the cloglog link (:mod:`riskbench.metrics.cloglog_regression`) give the
  observed risk at every predicted risk; ICI, E50 and E90 are the mean, median and 90th percentile of
  |smoothed observed − predicted| over the rows;
* calibration slope b and intercept: cloglog(observed) = a + b·cloglog(predicted) (slope; 1 = ideal, < 1 =
  predictions too extreme) and cloglog(observed) = a + cloglog(predicted) (calibration-in-the-large on the
  log cumulative-hazard scale; 0 = ideal), with sandwich standard errors clustered on ``cluster``;
* Cox recalibration slope: a Cox model of the outcome on cloglog(predicted risk), follow-up cut at the horizon
  (competing events censored, so it is the slope on the cause-specific hazard), fitted by the project's Cox
  engine (:func:`riskbench.models.cox_engine.fit_cox`) with Efron's tie handling by default (the usual default of
  statistical software; ``ties="breslow"`` on request) and a robust variance clustered on ``cluster``
  (van Houwelingen 2000, Stat Med 19:3401–3415; Crowson, Atkinson & Therneau 2016, Stat Methods Med Res
  25:1692–1706);
* observed/expected: the observed risk by the horizon (Aalen–Johansen or Kaplan–Meier, as ``target`` says)
  over the mean predicted risk: the one O/E of the table, the figure and the comparison;
* grouped: quantile groups of predicted risk against their observed risk with 95% intervals.

The pseudo-observations assume censoring independent of the predictors (Graw, Gerds & Schumacher 2009).
D-calibration (Haider et al. 2020, JMLR) asks whether predicted survival probabilities at the observed times
are uniform.
"""

from __future__ import annotations

import os
import warnings
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats

from riskbench.metrics.censoring import observed_risk
from riskbench.metrics.cloglog_regression import CloglogFit, fit_cloglog
from riskbench.metrics.horizon_inputs import single_horizon_inputs
from riskbench.metrics.inputs import ArrayLike, MetricInputError, as_horizons, as_time, check_lengths
from riskbench.metrics.pseudo_observations import pseudo_observations
from riskbench.metrics.risk_sets import OutcomeSet
from riskbench.models.cox_engine import CoxNumericalError, MonotoneLikelihoodWarning, fit_cox

Z95 = float(stats.norm.ppf(0.975))
_CLIP = 1e-10

#: What a prediction estimates, and what it is calibrated against.
TARGETS: dict[str, str] = {
    "cumulative_incidence": "cumulative incidence with the competing event (observed: Aalen–Johansen)",
    "cause_specific": "1 − S of a cause-specific model (observed: 1 − Kaplan–Meier, competing events censored)",
}


@dataclass(frozen=True)
class Calibration:
    """Calibration at one horizon.

    Attributes
    ----------
    horizon
        Horizon (same unit as ``time``).
    target
        ``"cumulative_incidence"`` or ``"cause_specific"`` (see :data:`TARGETS`).
    ici, e50, e90
        Mean, median and 90th percentile of |smoothed observed − predicted| over the rows (probabilities).
    slope, slope_se
        Calibration slope (coefficient of cloglog(predicted risk)) and its standard error.
    intercept, intercept_se
        Calibration-in-the-large on the cloglog scale (0 = ideal) and its standard error.
    cox_slope, cox_slope_se
        Cox recalibration slope (log hazard ratio per unit of cloglog(predicted risk), follow-up cut at the
        horizon; 1 = ideal) and its standard error (robust when clustered). NaN when the fit breaks down.
    ties
        Tie handling of the Cox recalibration: ``"efron"`` or ``"breslow"``.
    oe_ratio, oe_lower, oe_upper
        Observed / expected risk at the horizon and its 95% interval.
    observed, expected
        Observed risk by the horizon (Aalen–Johansen or 1 − Kaplan–Meier) and mean predicted risk.
    groups
        One row per quantile group: ``group, n, predicted, observed, observed_lower, observed_upper``.
    curve
        Smoothed curve on a grid of predicted risks (1st to 99th percentile): ``predicted, observed,
        observed_lower, observed_upper`` (band: bootstrap of the smoother over clusters; NaN without).
    subject_observed
        Smoothed observed risk for every row (input order).
    """

    horizon: float
    target: str
    ici: float
    e50: float
    e90: float
    slope: float
    slope_se: float
    intercept: float
    intercept_se: float
    cox_slope: float
    cox_slope_se: float
    ties: str
    oe_ratio: float
    oe_lower: float
    oe_upper: float
    observed: float
    expected: float
    groups: pd.DataFrame
    curve: pd.DataFrame
    subject_observed: np.ndarray

    @property
    def target_text(self) -> str:
        """What the predictions estimate and what they were calibrated against, in words."""
        return TARGETS[self.target]


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


def target_status(status: np.ndarray, target: str) -> np.ndarray:
    """Status codes as the calibration of ``target`` reads them (competing events censored for
    ``"cause_specific"``)."""
    if target not in TARGETS:
        raise MetricInputError(f"`target` must be one of {sorted(TARGETS)}; got {target!r}")
    return np.where(status == 2, 0, status) if target == "cause_specific" else status


def observed_expected(
    time: np.ndarray,
    status: np.ndarray,
    risk: np.ndarray,
    horizon: float,
    *,
    target: str = "cumulative_incidence",
    cluster: ArrayLike | None = None,
    outcomes: OutcomeSet | None = None,
) -> tuple[float, float, float]:
    """Observed/expected ratio at ``horizon`` and its 95% interval: the observed risk (Aalen–Johansen, or
    1 − Kaplan–Meier for ``target="cause_specific"``) over the mean predicted risk.

    The interval treats the mean prediction as fixed and takes the variance of the observed risk on the log
    scale: the delta-method (Greenwood-type) variance, or with ``cluster`` (the patient of each landmark row)
    the cluster-robust variance of the mean of the jackknife pseudo-observations,
    G/(G − 1) · Σ_clusters (Σ_rows (θ_i − θ̄))² / n², since a patient's rows are not independent. This is the
    one O/E of the calibration table, its figure and the model comparison.

    ``outcomes``: ``time`` and ``status`` as an evaluation set (:class:`riskbench.metrics.risk_sets.OutcomeSet`),
    whose observed risk curve of each target is then estimated once for every model and horizon.
    """
    status = target_status(np.asarray(status), target)
    if outcomes is None:
        observed, var_observed = observed_risk(time, status, horizon)
    else:
        observed, var_observed = outcomes.observed_risk(target, status).at(horizon)
    if cluster is not None:
        centred = pseudo_observations(time, status, horizon) - observed
        _, code = np.unique(np.asarray(cluster), return_inverse=True)
        per_cluster = np.bincount(code, weights=centred)
        g = per_cluster.size
        var_observed = float(np.sum(per_cluster**2)) / centred.size**2 * (g / (g - 1) if g > 1 else np.nan)
    expected = float(np.mean(risk))
    oe = observed / expected if expected > 0 else np.nan
    se_log = np.sqrt(var_observed) / observed if observed > 0 else np.nan
    return float(oe), float(oe * np.exp(-Z95 * se_log)), float(oe * np.exp(Z95 * se_log))


#: Tie handling of the Cox recalibration (the first is the default).
TIES = ("efron", "breslow")


def cox_recalibration(
    time: np.ndarray,
    status: np.ndarray,
    z: np.ndarray,
    horizon: float,
    *,
    ties: str = "efron",
    cluster: np.ndarray | None = None,
) -> tuple[float, float]:
    """Slope and standard error of a Cox model of the outcome (status 1) on ``z`` with follow-up cut at ``horizon``.

    Fitted by :func:`riskbench.models.cox_engine.fit_cox`; the standard error is cluster-robust when ``cluster``
    is given. A fit that breaks down numerically (outcomes perfectly separated by ``z``) gives NaN with a warning.
    """
    if ties not in TIES:
        raise MetricInputError(
            f"`ties` must be one of {list(TIES)} (the Cox recalibration's tie handling); got {ties!r}"
        )
    event = ((status == 1) & (time <= horizon)).astype(float)
    # everyone enters just before the earliest time, so rows with time 0 keep their place in the risk sets
    entry = np.full(time.size, float(time.min()) - 1.0)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            fit = fit_cox(
                z[:, None], np.minimum(time, horizon), event, entry, cluster=cluster, ties=ties, names=["cloglog_risk"]
            )
        except CoxNumericalError as exc:
            caught.append(
                warnings.WarningMessage(MonotoneLikelihoodWarning(str(exc)), MonotoneLikelihoodWarning, __file__, 0)
            )
    running_off = [w for w in caught if issubclass(w.category, MonotoneLikelihoodWarning)]
    if running_off:  # the ill-conditioning warnings that come with it say the same thing
        warnings.warn(
            f"the Cox recalibration slope is not estimable (the predicted risks separate the outcomes: "
            f"{running_off[0].message}); it is reported as NaN",
            RuntimeWarning,
            stacklevel=3,
        )
        return float("nan"), float("nan")
    for w in caught:
        warnings.warn(w.message, w.category, stacklevel=3)
    se = fit.se if fit.robust_se is None else fit.robust_se
    return float(fit.coef[0]), float(se[0])


def _smoother_design(z: np.ndarray, knots: np.ndarray) -> np.ndarray:
    return np.column_stack([np.ones(z.size), rcs_basis(z, knots)])


def _smoother_start(knots: np.ndarray) -> np.ndarray:
    """Coefficients of the identity (observed = predicted): intercept 0, linear term 1, spline terms 0."""
    return np.r_[0.0, 1.0, np.zeros(knots.size - 2)]


def _band(pseudo, design, grid_design, cluster, start, n_boot, seed) -> np.ndarray:
    """Pointwise 95% percentile band of the smoothed curve: the smoother refitted on bootstrap samples of
    clusters (patients when given, else rows), the pseudo-observations held fixed.

    The resamples are drawn in order from one stream and each refit depends on its draw only, so the refits can
    run on several threads (the compiled scoring pass releases the interpreter lock) with the band unchanged to
    the last bit; draws are made a few at a time to keep memory bounded."""
    nan_band = np.full((2, grid_design.shape[0]), np.nan)
    if n_boot <= 0:
        return nan_band
    labels = np.arange(pseudo.size) if cluster is None else np.asarray(cluster)
    _, code = np.unique(labels, return_inverse=True)
    n_clusters = int(code.max()) + 1
    rng = np.random.default_rng(seed)
    design = np.ascontiguousarray(design, dtype=np.float64)

    def refit(drawn: np.ndarray) -> np.ndarray:
        # a bootstrap sample of clusters as weights: how often each row's cluster was drawn
        fit = fit_cloglog(design, pseudo, start=start, weights=drawn[code].astype(float), covariance=False)
        return fit.mean(grid_design)

    def draw() -> np.ndarray:
        return np.bincount(rng.integers(0, n_clusters, n_clusters), minlength=n_clusters)

    workers = max(1, min(band_threads(), n_boot))
    if workers == 1:
        draws = [refit(draw()) for _ in range(n_boot)]
    else:
        draws = []
        with ThreadPoolExecutor(max_workers=workers) as pool:
            for first in range(0, n_boot, 2 * workers):
                batch = [draw() for _ in range(min(2 * workers, n_boot - first))]
                draws += list(pool.map(refit, batch))
    return np.quantile(np.array(draws), [0.025, 0.975], axis=0) if draws else nan_band


def band_threads() -> int:
    """Threads for the calibration band's refits: the cores this process may use, at most 8."""
    try:
        cores = len(os.sched_getaffinity(0))
    except AttributeError:  # pragma: no cover - platforms without affinity masks
        cores = os.cpu_count() or 1
    return max(1, min(cores, 8))


def calibration_at_horizon(
    time: ArrayLike,
    event: ArrayLike,
    risk: ArrayLike,
    horizon: float,
    *,
    target: str = "cumulative_incidence",
    cluster: ArrayLike | None = None,
    n_groups: int = 10,
    n_boot: int = 100,
    seed: int = 0,
    check_direction: bool = True,
    ties: str = "efron",
) -> Calibration:
    """Smoothed and grouped calibration, slope, intercept and O/E of predicted risks at one horizon.

    Parameters
    ----------
    time
        Follow-up (days from entry or landmark).
    event
        0 censored, 1 outcome, 2 competing event.
    risk
        Predicted probability of the outcome by ``horizon`` (not a survival probability).
    horizon
        Days; within [min(time), max(time)): at or after the last follow-up time nobody is left under
        observation, so the horizon is refused as by the time-dependent AUC and the Brier score (for data
        administratively censored at the horizon, evaluate just inside it).
    target
        What ``risk`` estimates: ``"cumulative_incidence"`` (competing events kept as competing) or
        ``"cause_specific"`` (1 − S of a cause-specific model: competing events censored).
    cluster
        Labels of rows that belong together (the patient of each landmark row): standard errors and the
        band resample and sum over them. None treats rows as independent.
    n_groups
        Number of quantile groups of predicted risk.
    n_boot
        Bootstrap replicates for the band around the smoothed curve (seeded; 0 = no band).
    seed
        Seed for the bootstrap.
    check_direction
        Refuse a ``risk`` that is clearly anti-concordant (a survival probability passed by mistake).
    ties
        Tie handling of the Cox recalibration slope: ``"efron"`` (default, as common statistical software) or
        ``"breslow"``.

    Notes
    -----
    Follow-up after the horizon does not enter: the pseudo-observations are of the observed risk by the
    horizon. See the module notes for the methods and their sources.
    """
    as_horizons(horizon, as_time(time), name="horizon")  # the rule of the AUC and the Brier score
    t, status, r, h = single_horizon_inputs(
        time, event, risk, horizon, metric="calibration", check_direction=check_direction
    )
    status = target_status(status, target)
    if n_groups < 1 or n_groups > t.size:
        raise MetricInputError(f"`n_groups` must be between 1 and the number of subjects ({t.size}); got {n_groups}")
    groups_of_rows = None
    if cluster is not None:
        groups_of_rows = np.asarray(cluster)
        check_lengths(time=t, cluster=groups_of_rows)

    groups = _grouped(t, status, r, h, n_groups)
    oe, oe_lo, oe_hi = observed_expected(t, status, r, h, cluster=groups_of_rows)
    observed, expected = observed_risk(t, status, h)[0], float(r.mean())

    z = cloglog(r)
    knots = np.quantile(z, [0.1, 0.5, 0.9])
    if np.unique(knots).size < 3:
        raise MetricInputError(
            "`risk` takes too few distinct values for a 3-knot spline (10th, 50th, 90th percentiles coincide); "
            "use the grouped calibration table"
        )
    pseudo = pseudo_observations(t, status, h, cause=1)
    ones = np.ones((t.size, 1))
    slope_fit = fit_cloglog(np.column_stack([ones, z]), pseudo, start=np.array([0.0, 1.0]), cluster=groups_of_rows)
    intercept_fit = fit_cloglog(ones, pseudo, offset=z, cluster=groups_of_rows)
    cox_slope, cox_slope_se = cox_recalibration(t, status, z, h, ties=ties, cluster=groups_of_rows)
    design = _smoother_design(z, knots)
    start = _smoother_start(knots)
    smooth: CloglogFit = fit_cloglog(design, pseudo, start=start, cluster=groups_of_rows)
    subject_obs = smooth.mean(design)
    diff = np.abs(subject_obs - r)

    grid_risk = np.quantile(r, np.linspace(0.01, 0.99, 60))
    grid_design = _smoother_design(cloglog(grid_risk), knots)
    # each resample starts from the whole-data smoother, near its own root (reached to the fit's tolerance)
    band = _band(pseudo, design, grid_design, groups_of_rows, smooth.coef, n_boot, seed)
    curve = pd.DataFrame(
        {
            "predicted": grid_risk,
            "observed": smooth.mean(grid_design),
            "observed_lower": band[0],
            "observed_upper": band[1],
        }
    )
    return Calibration(
        horizon=h,
        target=target,
        ici=float(diff.mean()),
        e50=float(np.median(diff)),
        e90=float(np.quantile(diff, 0.9)),
        slope=float(slope_fit.coef[1]),
        slope_se=float(np.sqrt(slope_fit.cov[1, 1])),
        intercept=float(intercept_fit.coef[0]),
        intercept_se=float(np.sqrt(intercept_fit.cov[0, 0])),
        cox_slope=cox_slope,
        cox_slope_se=cox_slope_se,
        ties=ties,
        oe_ratio=float(oe),
        oe_lower=float(oe_lo),
        oe_upper=float(oe_hi),
        observed=float(observed),
        expected=expected,
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
