"""Kaplan–Meier survival and Aalen–Johansen cumulative incidence with standard errors, pointwise confidence
bands, quantiles with confidence limits and the number at risk, overall or by group.

The curves themselves come from :mod:`riskbench.metrics.censoring` (Kaplan–Meier with Greenwood's variance;
Aalen–Johansen with the delta-method variance of Marubini & Valsecchi 1995, *Analysing Survival Data from Clinical
Trials and Observational Studies*, Wiley). This module adds what a reader asks of them:

* **Pointwise confidence band** of the curve C (S for Kaplan–Meier, F for Aalen–Johansen) from its standard error
  on a transformed scale (Kalbfleisch & Prentice 2002, *The Statistical Analysis of Failure Time Data*, 2nd ed.,
  Wiley):

  - ``"log-log"`` (default): log(−log C) ± z·SE/(C·|log C|), i.e. C^exp(±z·SE/(C·|log C|)); the default of SAS
    PROC LIFETEST, Stata's ``sts`` and lifelines (R's ``survfit`` defaults to ``"log"``; these defaults are
    from memory of each package's documentation);
  - ``"log"``: log C ± z·SE/C (upper limit capped at 1);
  - ``"plain"``: C ± z·SE, cut to [0, 1].

  Where C is 0 or 1, or its SE is 0, the band is the point itself.
* **Quantiles** t_p, the first time the event probability reaches p (Kaplan–Meier: S(t) ≤ 1 − p; Aalen–Johansen:
  F(t) ≥ p; to within 1e-10, so that rounding in the product-limit does not move a quantile), with the
  confidence interval of Brookmeyer & Crowley (1982, Biometrics 38:29–41) read off the
  pointwise band: the first times at which the band's two limits reach the same level (the reading of R's
  ``survfit`` and of lifelines' ``median_survival_times`` applied to the band). A time never reached is NaN
  ("not reached").
* **Number at risk** at a time t: the subjects with follow-up ≥ t (still under observation just before t).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats

from riskbench.metrics.censoring import aalen_johansen, kaplan_meier
from riskbench.metrics.inputs import ArrayLike, MetricInputError, as_status, as_time, check_lengths

__all__ = ["CI_SCALES", "CurveEstimate", "aalen_johansen_estimate", "kaplan_meier_estimate"]

#: Scales of the pointwise confidence band (the first is the default).
CI_SCALES: dict[str, str] = {
    "log-log": "log(-log C) scale (default, as SAS PROC LIFETEST, Stata and lifelines)",
    "log": "log C scale (R's survfit default)",
    "plain": "C ± z·SE, cut to [0, 1]",
}

_ALL = "all"

#: A curve within this of a quantile's level has reached it (a product of ratios such as 0.8·0.75·(5/6) lands a
#: rounding error away from 0.5; R's ``quantile.survfit`` uses a tolerance for the same reason).
_LEVEL_TOL = 1e-10


def confidence_band(value: np.ndarray, se: np.ndarray, scale: str, level: float) -> tuple[np.ndarray, np.ndarray]:
    """Pointwise ``(lower, upper)`` limits of a probability curve ``value`` with standard error ``se``."""
    if scale not in CI_SCALES:
        raise MetricInputError(f"`ci_scale` must be one of {list(CI_SCALES)}; got {scale!r}")
    if not 0 < level < 1:
        raise MetricInputError(f"`level` must be a confidence level between 0 and 1 (e.g. 0.95); got {level!r}")
    z = float(stats.norm.ppf(0.5 + level / 2))
    v = np.asarray(value, dtype=float)
    s = np.asarray(se, dtype=float)
    inside = (v > 0) & (v < 1) & (s > 0) & np.isfinite(s)
    lower, upper = v.copy(), v.copy()
    vi, si = v[inside], s[inside]
    if scale == "plain":
        lower[inside], upper[inside] = np.clip(vi - z * si, 0, 1), np.clip(vi + z * si, 0, 1)
    elif scale == "log":
        lower[inside], upper[inside] = vi * np.exp(-z * si / vi), np.minimum(vi * np.exp(z * si / vi), 1.0)
    else:
        c = z * si / (vi * np.abs(np.log(vi)))
        lower[inside], upper[inside] = vi ** np.exp(c), vi ** np.exp(-c)
    return lower, upper


@dataclass(frozen=True)
class CurveEstimate:
    """Kaplan–Meier or Aalen–Johansen curves, one per group.

    Attributes
    ----------
    kind : ``"survival"`` (Kaplan–Meier S) or ``"cumulative_incidence"`` (Aalen–Johansen F of ``cause``).
    table : one row per group and distinct follow-up time: ``group, time, at_risk, events, censored, estimate, se,
        lower, upper`` (cumulative incidence adds ``other_events``, the competing events, beside ``events`` of the
        cause).
    ci_scale : scale of the pointwise band (:data:`CI_SCALES`).
    level : confidence level of the band and of the quantile limits.
    cause : the event code of the cumulative incidence (None for survival).
    groups : group labels in the order of ``table``.
    """

    kind: str
    table: pd.DataFrame
    ci_scale: str
    level: float
    cause: int | None
    groups: tuple[object, ...]

    def _rows(self, group: object) -> pd.DataFrame:
        return self.table[self.table["group"] == group]

    def at(self, times: ArrayLike) -> pd.DataFrame:
        """The curve at ``times`` (same unit as the input): ``group, time, estimate, se, lower, upper, at_risk``."""
        when = np.atleast_1d(np.asarray(times, dtype=float))
        start = 1.0 if self.kind == "survival" else 0.0
        frames = []
        for g in self.groups:
            rows = self._rows(g)
            idx = np.searchsorted(rows["time"].to_numpy(), when, side="right") - 1
            pick = {
                c: np.r_[v0, rows[c].to_numpy(float)][idx + 1]
                for c, v0 in (("estimate", start), ("se", 0.0), ("lower", start), ("upper", start))
            }
            frames.append(pd.DataFrame({"group": g, "time": when, **pick, "at_risk": self._at_risk(rows, when)}))
        return pd.concat(frames, ignore_index=True)

    @staticmethod
    def _at_risk(rows: pd.DataFrame, when: np.ndarray) -> np.ndarray:
        idx = np.searchsorted(rows["time"].to_numpy(), when, side="left")
        return np.r_[rows["at_risk"].to_numpy(), 0][idx]

    def at_risk(self, times: ArrayLike) -> pd.DataFrame:
        """Number at risk (follow-up ≥ t) at each of ``times``: one row per group, one column per time."""
        when = np.atleast_1d(np.asarray(times, dtype=float))
        data = [self._at_risk(self._rows(g), when) for g in self.groups]
        return pd.DataFrame(data, index=pd.Index(self.groups, name="group"), columns=pd.Index(when, name="time"))

    def quantiles(self, probabilities: ArrayLike = (0.25, 0.5, 0.75)) -> pd.DataFrame:
        """Time by which the event probability reaches each p, with Brookmeyer–Crowley limits.

        Returns ``group, probability, time, lower, upper``; NaN where the curve (or band limit) never gets there.
        """
        probs = np.atleast_1d(np.asarray(probabilities, dtype=float))
        if ((probs <= 0) | (probs >= 1)).any():
            raise MetricInputError(f"`probabilities` must lie strictly between 0 and 1; got {probs.tolist()}")
        out = []
        for g in self.groups:
            rows = self._rows(g)
            t = rows["time"].to_numpy()
            # on the event-probability scale (1 − S, or F) the band limit that rises first gives the lower limit
            if self.kind == "survival":
                curves = [1.0 - rows[c].to_numpy() for c in ("estimate", "lower", "upper")]
            else:
                curves = [rows[c].to_numpy() for c in ("estimate", "upper", "lower")]
            for p in probs:
                out.append((g, float(p), *(_first(t, c >= p - _LEVEL_TOL) for c in curves)))
        return pd.DataFrame(out, columns=["group", "probability", "time", "lower", "upper"])

    def median(self) -> pd.DataFrame:
        """Median time to the event per group with its confidence limits (``group, time, lower, upper``)."""
        return self.quantiles([0.5]).drop(columns="probability")


def _first(times: np.ndarray, hit: np.ndarray) -> float:
    where = np.flatnonzero(hit)
    return float(times[where[0]]) if where.size else float("nan")


def _groups(group: ArrayLike | None, n: int) -> tuple[np.ndarray, tuple[object, ...]]:
    if group is None:
        return np.full(n, _ALL, dtype=object), (_ALL,)
    labels = np.asarray(group, dtype=object)
    check_lengths(time=np.empty(n), group=labels)
    if pd.isna(labels).any():
        rows = np.flatnonzero(pd.isna(labels))
        raise MetricInputError(f"`group` is missing in rows {rows[:5].tolist()}; give every subject a group label")
    return labels, tuple(sorted(pd.unique(labels), key=str))


def _counts(time: np.ndarray, is_event: np.ndarray) -> pd.DataFrame:
    uniq, inv = np.unique(time, return_inverse=True)
    total = np.bincount(inv, minlength=uniq.size)
    events = np.bincount(inv, weights=is_event.astype(float), minlength=uniq.size).astype(np.int64)
    at_risk = time.size - np.r_[0, np.cumsum(total)[:-1]]
    return pd.DataFrame({"time": uniq, "at_risk": at_risk, "events": events, "censored": total - events})


def _estimate(
    kind: str, status: np.ndarray, t: np.ndarray, group: ArrayLike | None, cause: int, ci_scale: str, level: float
) -> CurveEstimate:
    labels, groups = _groups(group, t.size)
    confidence_band(np.array([0.5]), np.array([0.1]), ci_scale, level)  # checks scale and level up front
    frames = []
    for g in groups:
        rows = labels == g
        tg, sg = t[rows], status[rows]
        curve = kaplan_meier(tg, sg) if kind == "survival" else aalen_johansen(tg, sg, cause=cause)
        frame = _counts(tg, sg == cause)
        if kind == "cumulative_incidence":
            other = _counts(tg, (sg != 0) & (sg != cause))["events"]
            frame["censored"] -= other
            frame.insert(3, "other_events", other)
        frame["estimate"] = curve.values
        frame["se"] = np.sqrt(curve.variance)
        frame["lower"], frame["upper"] = confidence_band(curve.values, frame["se"].to_numpy(), ci_scale, level)
        frame.insert(0, "group", g)
        frames.append(frame)
    return CurveEstimate(
        kind,
        pd.concat(frames, ignore_index=True),
        ci_scale,
        float(level),
        None if kind == "survival" else cause,
        groups,
    )


def kaplan_meier_estimate(
    time: ArrayLike, event: ArrayLike, *, group: ArrayLike | None = None, ci_scale: str = "log-log", level: float = 0.95
) -> CurveEstimate:
    """Kaplan–Meier survival with Greenwood standard errors, pointwise band, quantiles and number at risk.

    Parameters
    ----------
    time : follow-up (days, or any unit used consistently).
    event : 1 event, 0 censored.
    group : optional label per subject; one curve per group (sorted by label).
    ci_scale : ``"log-log"`` (default), ``"log"`` or ``"plain"`` (see :data:`CI_SCALES`).
    level : confidence level.
    """
    t = as_time(time)
    status = as_status(event, t.size, allow_competing=False)
    return _estimate("survival", status, t, group, 1, ci_scale, level)


def aalen_johansen_estimate(
    time: ArrayLike,
    status: ArrayLike,
    *,
    cause: int = 1,
    group: ArrayLike | None = None,
    ci_scale: str = "log-log",
    level: float = 0.95,
) -> CurveEstimate:
    """Aalen–Johansen cumulative incidence of ``cause`` with the other event code competing.

    Parameters
    ----------
    time : follow-up (days, or any unit used consistently).
    status : 0 censored, 1 outcome, 2 competing event.
    cause : the event code whose cumulative incidence is estimated (1 or 2).
    group, ci_scale, level : as in :func:`kaplan_meier_estimate`; the band is on the scale of F itself.
    """
    t = as_time(time)
    codes = as_status(status, t.size, allow_competing=True)
    if cause not in (1, 2):
        raise MetricInputError(f"`cause` must be 1 (outcome) or 2 (competing event); got {cause!r}")
    return _estimate("cumulative_incidence", codes, t, group, cause, ci_scale, level)
