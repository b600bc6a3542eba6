"""Minimum sample size for a time-to-event prediction model: the criteria of Riley et al. (2020).

Riley RD, Ensor J, Snell KIE, Harrell FE Jr, Martin GP, Reitsma JB, Moons KGM, Collins G, van Smeden M.
Calculating the sample size required for developing a clinical prediction model. BMJ 2020;368:m441.

For a model with ``p`` candidate predictor parameters, an anticipated Cox–Snell R² (``R²cs``), an outcome
rate ``λ`` (events per person-year), a mean follow-up ``f`` (years) and a horizon ``t`` (years):

(i)   small overfitting (expected uniform shrinkage ``S`` ≥ 0.9):
      ``n = p / ((S − 1) · ln(1 − R²cs / S))``;
(ii)  small absolute difference (δ = 0.05) between the apparent and the optimism-adjusted Nagelkerke R²:
      ``S = R²cs / (R²cs + δ · max R²cs)`` in the formula of (i), with
      ``max R²cs = 1 − exp(2 · lnL_null / n)`` and, for an exponential null model,
      ``lnL_null / n = E/n · ln(E/n) − E/n`` where ``E/n = λ · f`` (events per participant);
(iii) a precise estimate of the overall risk by ``t``: the 95% interval of ``1 − exp(−λ t)`` from the
      rate's Poisson interval ``λ ± 1.96 √(λ / (n f))`` lies within ``margin`` (0.05) of the estimate.

The required number of participants is the largest of the three; the events it implies are
``n · λ · f`` and the events per candidate parameter ``n · λ · f / p``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from riskbench.metrics.inputs import MetricInputError

__all__ = ["SampleSizeCriterion", "max_cox_snell_r2", "riley_survival_criteria", "risk_margin"]

#: Anticipated R²cs when nothing better is known: 15% of its maximum (a conservative choice suggested by
#: Riley et al.; from memory).
DEFAULT_R2_FRACTION = 0.15


@dataclass(frozen=True)
class SampleSizeCriterion:
    """One criterion's requirement.

    Attributes
    ----------
    criterion : str
        ``"i"``, ``"ii"`` or ``"iii"``.
    description : str
        What the criterion protects against, in words.
    participants : int
        Minimum number of participants (rounded up).
    events : float
        Events expected among them (``participants · rate · mean follow-up``).
    events_per_parameter : float
        ``events / parameters``.
    shrinkage : float
        The shrinkage factor used (criteria i and ii; NaN for iii).
    """

    criterion: str
    description: str
    participants: int
    events: float
    events_per_parameter: float
    shrinkage: float


def _check(name: str, value: float, low: float = 0.0, high: float = math.inf) -> float:
    value = float(value)
    if not (math.isfinite(value) and low < value < high):
        raise MetricInputError(f"{name} must be a number in ({low:g}, {high:g}); got {value!r}.")
    return value


def max_cox_snell_r2(rate_per_year: float, mean_follow_up_years: float) -> float:
    """Largest Cox–Snell R² an exponential survival model can reach (Riley et al. 2020, criterion ii).

    Parameters
    ----------
    rate_per_year : float
        Outcome events per person-year.
    mean_follow_up_years : float
        Mean follow-up per participant, years.
    """
    e = _check("rate_per_year", rate_per_year) * _check("mean_follow_up_years", mean_follow_up_years)
    loglik_null_per_person = e * math.log(e) - e
    return 1.0 - math.exp(2.0 * loglik_null_per_person)


def _shrinkage_n(parameters: int, r2: float, shrinkage: float) -> float:
    return parameters / ((shrinkage - 1.0) * math.log(1.0 - r2 / shrinkage))


def risk_margin(n: float, rate_per_year: float, mean_follow_up_years: float, horizon_years: float) -> float:
    """Largest distance between ``1 − exp(−λ t)`` and the ends of its 95% interval with ``n`` participants.

    The rate's interval is ``λ ± 1.96 √(λ / (n f))`` (person-time ``n f``); the lower end is cut at 0.
    """
    person_years = n * mean_follow_up_years
    half = 1.96 * math.sqrt(rate_per_year / person_years)
    risk = 1.0 - math.exp(-rate_per_year * horizon_years)
    upper = 1.0 - math.exp(-(rate_per_year + half) * horizon_years)
    lower = 1.0 - math.exp(-max(rate_per_year - half, 0.0) * horizon_years)
    return max(upper - risk, risk - lower)


def _risk_n(rate: float, follow_up: float, horizon: float, margin: float) -> int:
    """Smallest n whose :func:`risk_margin` is at most ``margin`` (the margin falls as n grows)."""
    low, high = 1, 2
    while risk_margin(high, rate, follow_up, horizon) > margin:
        low, high = high, high * 2
    while high - low > 1:
        mid = (low + high) // 2
        if risk_margin(mid, rate, follow_up, horizon) > margin:
            low = mid
        else:
            high = mid
    return high if risk_margin(low, rate, follow_up, horizon) > margin else low


def riley_survival_criteria(
    parameters: int,
    r2_cox_snell: float | None,
    rate_per_year: float,
    mean_follow_up_years: float,
    horizon_years: float,
    *,
    shrinkage: float = 0.9,
    delta: float = 0.05,
    margin: float = 0.05,
) -> list[SampleSizeCriterion]:
    """Riley et al. (2020) minimum sample size criteria (i)–(iii) for a time-to-event outcome.

    Parameters
    ----------
    parameters : int
        Candidate predictor parameters (coefficients of the outcome model, before any selection).
    r2_cox_snell : float or None
        Anticipated Cox–Snell R²; None uses 15% of its maximum (:data:`DEFAULT_R2_FRACTION`).
    rate_per_year : float
        Outcome events per person-year.
    mean_follow_up_years : float
        Mean follow-up per participant, years.
    horizon_years : float
        Time point of the risk estimate in criterion (iii), years.
    shrinkage, delta, margin : float
        Targets: expected shrinkage (0.9), optimism in Nagelkerke R² (0.05), margin of error of the
        overall risk (0.05).

    Returns
    -------
    list of SampleSizeCriterion
        Criteria i, ii, iii in that order.
    """
    if int(parameters) != parameters or parameters < 1:
        raise MetricInputError(f"parameters must be a positive integer; got {parameters!r}.")
    rate = _check("rate_per_year", rate_per_year)
    follow_up = _check("mean_follow_up_years", mean_follow_up_years)
    horizon = _check("horizon_years", horizon_years)
    r2_max = max_cox_snell_r2(rate, follow_up)
    r2 = DEFAULT_R2_FRACTION * r2_max if r2_cox_snell is None else _check("r2_cox_snell", r2_cox_snell, 0, r2_max)
    _check("shrinkage", shrinkage, 0, 1)
    s_nagelkerke = r2 / (r2 + _check("delta", delta, 0, 1) * r2_max)
    needed = [
        (
            "i",
            f"expected shrinkage of the coefficients at least {shrinkage:g}",
            math.ceil(_shrinkage_n(parameters, r2, shrinkage)),
            shrinkage,
        ),
        (
            "ii",
            f"apparent and adjusted Nagelkerke R² differ by at most {delta:g}",
            math.ceil(_shrinkage_n(parameters, r2, s_nagelkerke)),
            s_nagelkerke,
        ),
        (
            "iii",
            f"overall risk by {horizon:g} years estimated within ±{margin:g}",
            _risk_n(rate, follow_up, horizon, _check("margin", margin, 0, 1)),
            math.nan,
        ),
    ]
    out = []
    for name, text, n, s in needed:
        events = n * rate * follow_up
        out.append(SampleSizeCriterion(name, text, int(n), events, events / parameters, s))
    return out
