"""What a statistician reads off a fitted Cox model: sizes, likelihoods, the three global tests, concordance.

:class:`CoxSummary` is immutable and built by :meth:`riskbench.models.cox_model.CoxModel.fit_summary`.

* −2 log L of the null model (all coefficients 0) and of the fitted model (partial likelihood with the
  model's tie handling; unpenalised even when a ridge penalty was used in fitting).
* Global tests of all coefficients equal to zero: likelihood ratio ``2 (log L − log L₀)``, score
  ``U(0)' I(0)⁻¹ U(0)`` and Wald ``β' V⁻¹ β``, each χ² with p degrees of freedom (Collett 2015, *Modelling
  Survival Data in Medical Research*, 3rd ed., CRC Press). The Wald test uses the variance the summary shows
  (``variance``: model-based, or the cluster-robust sandwich of Lin & Wei 1989); the likelihood-ratio and score
  tests are model-based.
* Harrell's concordance of the linear predictor on the fitting rows: at each event time the event row is
  compared with every other row at risk then (for one row per subject this is Harrell's C), within strata
  (:func:`riskbench.metrics.concordance.concordance_counting_process`).
"""

from __future__ import annotations

import html
from dataclasses import dataclass

import numpy as np
import pandas as pd

from riskbench.metrics.concordance import concordance_counting_process
from riskbench.metrics.inputs import MetricInputError
from riskbench.models.cox_engine import LikelihoodTest

__all__ = ["VARIANCES", "CoxSummary", "stratified_concordance"]

#: The standard errors a Cox summary can show.
VARIANCES: dict[str, str] = {
    "model": "model-based (inverse of the information matrix)",
    "robust": "cluster-robust sandwich (Lin & Wei 1989), clustered by the id column",
}


@dataclass(frozen=True)
class CoxSummary:
    """Summary of a fitted Cox model.

    Attributes
    ----------
    coefficients : DataFrame indexed by covariate (``CoxModel.summary``: coef, se, robust_se, z, p_value,
        hazard_ratio, hr_lower_<level>, hr_upper_<level>, se_used).
    n_rows : fitting rows (counting-process intervals or one row per subject).
    n_patients : distinct values of the id column, ``None`` when the table has none.
    n_events : events (rows ending with the event).
    minus2_loglik_null, minus2_loglik : −2 log partial likelihood at β = 0 and at the estimate.
    likelihood_ratio, score, wald : global χ² tests (``statistic``, ``df``, ``p_value``).
    concordance, concordance_se : Harrell's C of the linear predictor on the fitting rows and its
        infinitesimal-jackknife standard error (NaN for a stratified model).
    variance : ``"model"`` or ``"robust"`` — the standard errors used by the coefficient table and the Wald test.
    ties : ``"efron"`` or ``"breslow"``.
    penalty : the ridge penalty of the fit (0 = none).
    alpha : 1 − confidence level of the intervals in ``coefficients``.
    """

    coefficients: pd.DataFrame
    n_rows: int
    n_patients: int | None
    n_events: int
    minus2_loglik_null: float
    minus2_loglik: float
    likelihood_ratio: LikelihoodTest
    score: LikelihoodTest
    wald: LikelihoodTest
    concordance: float
    concordance_se: float
    variance: str
    ties: str
    penalty: float
    alpha: float

    def tests(self) -> pd.DataFrame:
        """The three global tests as a table: index ``test``, columns ``statistic, df, p_value``."""
        rows = {"likelihood ratio": self.likelihood_ratio, "score": self.score, f"Wald ({self.variance})": self.wald}
        return pd.DataFrame(
            [(t.statistic, t.df, t.p_value) for t in rows.values()],
            index=pd.Index(list(rows), name="test"),
            columns=["statistic", "df", "p_value"],
        )

    def facts(self) -> pd.DataFrame:
        """Sizes, likelihoods, concordance and settings as a two-column table (``item``, ``value``)."""
        items = [
            ("rows", self.n_rows),
            ("patients", "not known (no id column)" if self.n_patients is None else self.n_patients),
            ("events", self.n_events),
            ("-2 log L (null)", self.minus2_loglik_null),
            ("-2 log L (model)", self.minus2_loglik),
            ("concordance (Harrell)", self.concordance),
            ("concordance SE", self.concordance_se),
            ("standard errors", VARIANCES[self.variance]),
            ("ties", self.ties),
            ("ridge penalty", self.penalty),
        ]
        return pd.DataFrame(items, columns=["item", "value"])

    def _repr_html_(self) -> str:
        """Notebook display: facts, global tests and coefficients, every text escaped."""
        facts = "".join(
            f"<tr><th>{_esc(k)}</th><td>{_esc(_fmt(v))}</td></tr>" for k, v in self.facts().itertuples(index=False)
        )
        return (
            "<div><strong>Cox proportional-hazards model</strong>"
            f"<table>{facts}</table>{_frame_html(self.tests())}{_frame_html(self.coefficients)}"
            "<p><em>Research software, not a medical device; not for clinical decisions without proper "
            "validation; defer to local ethics approval, data-protection rules and clinical governance.</em></p></div>"
        )


def _esc(value: object) -> str:
    return html.escape(str(value), quote=True)


def _fmt(value: object) -> str:
    if isinstance(value, float | np.floating):
        return f"{float(value):.6g}"
    return str(value)


def _frame_html(frame: pd.DataFrame) -> str:
    head = "".join(f"<th>{_esc(c)}</th>" for c in [frame.index.name or "", *frame.columns])
    body = "".join(
        "<tr><th>" + _esc(idx) + "</th>" + "".join(f"<td>{_esc(_fmt(v))}</td>" for v in row) + "</tr>"
        for idx, row in zip(frame.index, frame.itertuples(index=False))
    )
    return f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


def stratified_concordance(
    start: np.ndarray,
    stop: np.ndarray,
    event: np.ndarray,
    linear_predictor: np.ndarray,
    strata: np.ndarray | None,
    cluster: np.ndarray | None,
) -> tuple[float, float]:
    """Harrell's C of ``linear_predictor`` over the risk sets of ``(start, stop]`` rows, pairs within strata.

    Returns ``(estimate, se)``; with more than one stratum the pair counts are pooled and the SE is NaN.
    """
    if strata is None:
        c = concordance_counting_process(start, stop, event, linear_predictor, cluster)
        return c.estimate, c.se
    num = den = 0.0
    for level in pd.unique(strata):
        rows = strata == level
        try:
            c = concordance_counting_process(start[rows], stop[rows], event[rows], linear_predictor[rows])
        except MetricInputError:  # a stratum without an event, or without anyone else at risk: no pairs
            continue
        num += c.concordant + 0.5 * c.tied_risk
        den += c.comparable
    return (num / den if den else float("nan")), float("nan")
