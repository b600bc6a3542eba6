"""All performance measures of one fitted model on one evaluation set, as one long table.

The evaluation set is a landmark stack: each row is a patient at a landmark s with ``time`` (days from s,
administratively censored at the stack's horizon) and ``status`` (0/1/2). The outcome is status 1, and the
predictions are cumulative incidences, so a competing event (2) before the horizon is a known non-outcome:

- Harrell's C keeps such a patient comparable with every outcome (Wolbers et al. 2009, Epidemiology), and
  Uno's C compares it, with inverse-probability weights, with every later outcome (Wolbers et al. 2014,
  Biostatistics);
- the cumulative/dynamic AUC counts them among the controls, weighted by 1/G(T) (Blanche, Dartigues &
  Jacqmin-Gadda 2013, Stat Med, definition 2 of the controls);
- the Brier score scores them as 0 with the same weight, against the Aalen–Johansen null model;
- the observed/expected ratio and net benefit use the Aalen–Johansen cumulative incidence.

The calibration slope, ICI and observed/expected ratio of :func:`riskbench.metrics.calibration_at_horizon`
judge a prediction against its own estimand (``target``): a cumulative incidence against Aalen–Johansen
pseudo-observations, a cause-specific 1 − S (forest, time-varying Cox, landmark model without a competing
model) against 1 − Kaplan–Meier with competing events censored; so their ideal values (1, 0, 1) hold.
Rows of one patient at several landmarks are pooled, as in van Houwelingen & Putter (2012, ch. 7).

Result columns: ``metric, horizon_days, threshold, value`` (``threshold`` only for net benefit, else NaN).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd

from riskbench.metrics.auc import auc_values
from riskbench.metrics.brier import brier_values
from riskbench.metrics.calibration import observed_expected
from riskbench.metrics.calibration_measures import SlopeAndICI, slope_and_ici
from riskbench.metrics.concordance import TIED_TOL, concordance_at_horizon
from riskbench.metrics.inputs import MetricInputError
from riskbench.metrics.risk_sets import OutcomeSet, dense_rank
from riskbench.models.prediction_target import fitted_target
from riskbench.validation.errors import ValidationInputError

#: Which direction of each measure is better (for reading differences).
METRIC_DIRECTION: dict[str, str] = {
    "harrell_c": "higher",
    "uno_c": "higher",
    "auc": "higher",
    "brier": "lower",
    "scaled_brier": "higher",
    "calibration_slope": "each model's value closer to 1 (the difference has no better side)",
    "ici": "lower",
    "oe_ratio": "each model's value closer to 1 (the difference has no better side)",
    "net_benefit": "higher",
}

RESULT_COLUMNS = ["metric", "horizon_days", "threshold", "value"]


def stack_outcome(stack: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """``time`` (days from the landmark) and ``status`` (0 censored, 1 outcome, 2 competing) of a landmark stack."""
    for column in ("time", "status"):
        if column not in stack.columns:
            raise ValidationInputError(f"the evaluation stack lacks column '{column}' (landmark-stack contract).")
    time = pd.to_numeric(stack["time"], errors="coerce").to_numpy(dtype=float)
    if not np.isfinite(time).all():
        rows = np.flatnonzero(~np.isfinite(time))[:5].tolist()
        raise ValidationInputError(f"the evaluation stack's 'time' has missing values in rows {rows}.")
    status = pd.to_numeric(stack["status"], errors="coerce").to_numpy()
    if not np.isin(status, (0, 1, 2)).all():
        raise ValidationInputError("the evaluation stack's 'status' must be 0, 1 or 2 (landmark-stack contract).")
    return time, status.astype(int)


def predict_horizons(model: Any, stack: pd.DataFrame, horizons: Sequence[float]) -> dict[float, np.ndarray]:
    """Predicted risk of the outcome by each horizon (days) for every stack row.

    One ``predict_curve`` call covers all horizons when the model has it (the cumulative-incidence
    product-integral is the costly part and is shared by every horizon).
    """
    from riskbench.models import risk_curve

    hs = [float(h) for h in horizons]
    curve = risk_curve(model, stack, hs)
    return {h: np.asarray(curve[:, j], dtype=float) for j, h in enumerate(hs)}


def predict_distinct_rows(
    model: Any,
    stacks: Sequence[pd.DataFrame],
    horizons: Sequence[float],
    key_columns: Sequence[str],
) -> list[dict[float, np.ndarray]]:
    """Predictions for several stacks, computing each distinct row (on ``key_columns``) only once.

    A bootstrap sample repeats rows of the original cohort, so its rows and the original rows share
    predictions; predicting the distinct rows of all stacks together halves the prediction work of an
    optimism replicate. Valid because a model's risk for a row depends only on that row's
    ``key_columns`` (see :func:`riskbench.validation.model_specs.prediction_columns`).
    """
    keys = list(key_columns)
    joined = pd.concat(list(stacks), ignore_index=True)
    # 64-bit row hashes: a collision among even a million rows has probability about 3e-8.
    hashes = pd.util.hash_pandas_object(joined[keys], index=False).to_numpy()
    _, first_position, row_code = np.unique(hashes, return_index=True, return_inverse=True)
    risks = predict_horizons(model, joined.iloc[first_position].reset_index(drop=True), horizons)
    out, start = [], 0
    for stack in stacks:
        idx = row_code[start : start + len(stack)]
        out.append({h: r[idx] for h, r in risks.items()})
        start += len(stack)
    return out


def evaluation_time(horizon: float, time: np.ndarray) -> float:
    """The time at which "outcome by the horizon" is scored.

    The stack censors everyone still event-free at the horizon w exactly at w, so at t = w no patient is
    observed beyond t and time-dependent AUC / Brier have no controls; scoring just inside the follow-up
    (w minus a millionth of a day) keeps those patients as controls, as McLernon et al. (2023) do at 5 years.
    """
    top = float(np.max(time)) if len(time) else horizon
    return horizon - 1e-6 if horizon >= top else horizon


def evaluate_risks(
    time: np.ndarray,
    status: np.ndarray,
    risks: Mapping[float, np.ndarray],
    *,
    thresholds: Sequence[float] = (),
    target: str = "cumulative_incidence",
    outcomes: OutcomeSet | None = None,
) -> pd.DataFrame:
    """Every measure at every horizon for one set of predicted risks.

    Parameters
    ----------
    time : numpy.ndarray
        Days from the landmark to event or censoring.
    status : numpy.ndarray
        0 censored, 1 outcome, 2 competing event (see the module notes for how each measure treats 2).
    risks : mapping float -> numpy.ndarray
        Horizon (days) -> predicted risk by that horizon per row.
    thresholds : sequence of float
        Risk thresholds for net benefit (empty: net benefit skipped).
    target : {"cumulative_incidence", "cause_specific"}
        What the risks estimate (:func:`riskbench.models.prediction_target.prediction_target`): the
        calibration slope, ICI and observed/expected ratio compare them with that estimand.
    outcomes : OutcomeSet, optional
        ``time`` and ``status`` as one evaluation set (:mod:`riskbench.metrics.risk_sets`), shared by every
        model measured on these rows; built here when not given.

    Returns
    -------
    pandas.DataFrame
        Columns ``metric, horizon_days, threshold, value``: Harrell's C (outcome and risk truncated at the
        horizon), Uno's C (tau = horizon), cumulative/dynamic AUC, Brier and scaled Brier, calibration
        slope, observed/expected ratio and ICI, and net benefit at each threshold (module notes say how
        competing events enter each).
    """
    from riskbench import metrics

    rows: list[tuple[str, float, float, float]] = []
    outcomes = outcomes if outcomes is not None else OutcomeSet.from_arrays(time, status)
    for horizon, risk in risks.items():
        h = float(horizon)
        t_eval = evaluation_time(h, time)
        core = horizon_measures(time, status, risk, h, target=target, outcomes=outcomes)
        # No confidence band (the resampling gives intervals) and no direction check: a poor model in
        # an unlucky replicate is a result to report, not an input error. A model whose risks take too few
        # distinct values for the smoother has no smoothed calibration (NaN; the other measures stand).
        smooth = _smoothed_calibration(time, status, risk, t_eval, target, outcomes)
        rows += [(name, h, np.nan, value) for name, value in core.items() if name != "oe_ratio"]
        rows += [
            ("calibration_slope", h, np.nan, float(smooth.slope)),
            ("oe_ratio", h, np.nan, core["oe_ratio"]),
            ("ici", h, np.nan, float(smooth.ici)),
        ]
        if len(thresholds):
            nb = metrics.net_benefit(time, status, risk, t_eval, list(thresholds), check_direction=False)
            rows += [("net_benefit", h, float(th), float(v)) for th, v in zip(nb["threshold"], nb["model"])]
    return pd.DataFrame(rows, columns=RESULT_COLUMNS)


#: The measures of :func:`horizon_measures`, in its order.
HORIZON_MEASURES: tuple[str, ...] = ("harrell_c", "uno_c", "auc", "brier", "scaled_brier", "oe_ratio")


def horizon_measures(
    time: np.ndarray,
    status: np.ndarray,
    risk: np.ndarray,
    horizon: float,
    *,
    target: str = "cumulative_incidence",
    outcomes: OutcomeSet | None = None,
    rank: np.ndarray | None = None,
) -> dict[str, float]:
    """Concordance (Harrell, Uno), cumulative/dynamic AUC, Brier score, scaled Brier (IPA) and
    calibration-in-the-large at one horizon (days), each treating a competing event as the module notes say.

    The calibration-in-the-large is the observed/expected ratio of
    :func:`riskbench.metrics.calibration.observed_expected` (the one O/E of the report): the observed risk of
    the model's own estimand ``target`` (Aalen–Johansen cumulative incidence; 1 − Kaplan–Meier with competing
    events censored for ``"cause_specific"``) over the mean predicted risk. Raises
    :class:`riskbench.metrics.inputs.MetricInputError` when a measure is undefined (no outcome before the
    horizon, no control after it). ``outcomes``: ``time`` and ``status`` as a
    :class:`riskbench.metrics.risk_sets.OutcomeSet`, to share its sort, censoring curve and observed risk
    curves between models and horizons measured on the same rows. ``rank``:
    ``dense_rank(risk, riskbench.metrics.concordance.TIED_TOL)`` when at hand (the concordance and the AUC
    rank the same score).
    """
    t_eval = evaluation_time(float(horizon), time)
    # Harrell's C with outcome and follow-up truncated at the horizon (either after it is censored there) and
    # Uno's C share one pass over the pairs and the evaluation set's sort and censoring curve.
    outcomes = outcomes if outcomes is not None else OutcomeSet.from_arrays(time, status)
    if rank is None:
        rank = dense_rank(np.asarray(risk, dtype=float), TIED_TOL)
    c = concordance_at_horizon(outcomes, risk, t_eval, rank=rank)
    # the set's own (validated) arrays, so that the AUC and the Brier score need not check them again
    t, s = outcomes.time, outcomes.status
    auc = auc_values(t, s, risk, [t_eval], outcomes=outcomes, ranks=rank)
    brier = brier_values(t, s, risk, [t_eval], check_direction=False, outcomes=outcomes)
    return {
        "harrell_c": c.harrell,
        "uno_c": c.uno,
        "auc": float(auc.auc[0]),
        "brier": float(brier.brier[0]),
        "scaled_brier": float(brier.scaled_brier[0]),
        "oe_ratio": observed_expected(time, status, risk, t_eval, target=target, outcomes=outcomes)[0],
    }


def _smoothed_calibration(
    time: np.ndarray, status: np.ndarray, risk: np.ndarray, t_eval: float, target: str, outcomes: OutcomeSet
) -> SlopeAndICI:
    """Slope and ICI of :func:`riskbench.metrics.calibration_at_horizon` (computed alone, the pseudo-observations
    shared through ``outcomes``), or NaN when the risks cannot be smoothed."""
    try:
        return slope_and_ici(time, status, risk, t_eval, target=target, outcomes=outcomes)
    except MetricInputError as exc:
        if "distinct values" not in str(exc):
            raise
        return SlopeAndICI(np.nan, np.nan)


def evaluate_model(
    model: Any,
    stack: pd.DataFrame,
    horizons: Sequence[float],
    *,
    thresholds: Sequence[float] = (),
) -> pd.DataFrame:
    """Every measure of one fitted model on one evaluation stack (see :func:`evaluate_risks`); rows a
    complete-case model leaves without a risk are left out."""
    from riskbench.models.missing_data import predicted_rows

    time, status = stack_outcome(stack)
    risks = predict_horizons(model, stack, horizons)
    keep = predicted_rows([risks])
    risks = {h: r[keep] for h, r in risks.items()}
    return evaluate_risks(time[keep], status[keep], risks, thresholds=thresholds, target=fitted_target(model))


def check_horizons(horizons: Sequence[float], stack: pd.DataFrame) -> tuple[float, ...]:
    """Validated horizons (days): positive, and not beyond the stack's follow-up from the landmark."""
    hs = tuple(float(h) for h in np.atleast_1d(np.asarray(horizons, dtype=float)))
    if not hs or any(not np.isfinite(h) or h <= 0 for h in hs):
        raise ValidationInputError(f"horizons must be positive numbers of days; got {horizons!r}.")
    longest = float(pd.to_numeric(stack["time"]).max())
    beyond = [h for h in hs if h > longest + 1e-9]
    if beyond:
        raise ValidationInputError(
            f"horizons {beyond} days lie beyond the landmark stack's follow-up ({longest:g} days); "
            "build the stack with a longer horizon or evaluate at shorter horizons."
        )
    return hs
