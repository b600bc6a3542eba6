"""Cox proportional-hazards fitter for counting-process ``(start, stop]`` rows.

Array level: :func:`fit_cox` takes a covariate matrix and the interval columns and
returns a frozen :class:`CoxFit`.  Everything that the DataFrame estimator
(:mod:`riskbench.models.cox_model`) and the landmark super-model need is here.

Algorithm
---------
Rows are matched once to the sorted distinct event times of their stratum
(``lo`` = first event time after ``start``, ``hi`` = last event time not after
``stop``; the row is at risk at event times ``lo..hi``).  Each Newton iteration
then gets every risk-set sum by a reverse cumulative sum over event times of the
rows leaving at ``hi`` minus the rows that have not entered yet (``lo``), so one
iteration costs O(n·p²) with no per-event-time mask over the rows.  The
second-moment sums are never formed per event time: ``sum_k c_k S2_k`` equals
``X' diag(v * sum_{k=lo}^{hi} c_k) X``.  Efron's tie correction is applied only
over the tied event rows (one entry per event row).  The per-key differences are
one product of a sparse (keys x rows) +1/-1 pattern with X, read in row order.

Newton–Raphson starts at zero, halves a step while the objective falls, and stops
when the relative change of the objective is <= ``tol`` and the largest step on the
standardised scale is <= ``sqrt(tol)``.  The cluster-robust (sandwich) variance is
``V D'D V`` with D the per-row score residuals (weighted) summed per cluster
(Lin & Wei 1989; R's ``coxph(..., cluster=)``).

Conventions
-----------
- Covariates are centred (mean) and scaled (standard deviation, ``ddof=1``)
  inside; results are reported on the original scale.
- The ridge penalty maximises ``loglik - penalty * n_rows / 2 * sum((coef * scale)**2)``,
  i.e. an L2 penalty on the standardised coefficients in units of the mean
  log-likelihood per row.  This is the parameterisation of lifelines'
  ``penalizer`` (``CoxPHFitter`` and ``CoxTimeVaryingFitter``, ``l1_ratio=0``).
- Weighted Efron ties use the mean weight of the tied events for each of the
  ``m`` correction terms (as R's survival package and lifelines do).
- The baseline cumulative hazard is reported for a row whose covariates equal
  ``CoxFit.center`` (the covariate means); use :meth:`CoxFit.linear_predictor`.
  With ``ties="efron"`` its increments are Efron-consistent
  (``sum_l mean_weight / D_l``), with ``ties="breslow"`` they are Breslow's.
"""

from __future__ import annotations

import itertools
import warnings
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from scipy import linalg, sparse, stats

from riskbench.errors import RiskbenchError

__all__ = [
    "CoxCollinearityError",
    "CoxConstantCovariateError",
    "CoxConvergenceWarning",
    "CoxFit",
    "CoxIllConditionedWarning",
    "CoxInputError",
    "CoxNumericalError",
    "EventRiskSetMeans",
    "LikelihoodTest",
    "MonotoneLikelihoodWarning",
    "event_risk_set_means",
    "fit_cox",
]

_MONOTONE_STD_COEF = 10.0  # |coef| per SD beyond which a hazard ratio of e^10 per SD is implausible


class CoxInputError(RiskbenchError):
    """Bad input to the Cox engine (the message names the column, rows and the fix).

    ``terms`` names the design columns concerned, when the error is about particular columns, so that a
    caller can restate the problem in its own terms (a model name, a configuration key); ``cause`` is set by a
    caller fitting one of several cause-specific models (e.g. ``"competing event"``), None otherwise.
    """

    def __init__(self, message: str = "", terms: Sequence[str] = ()) -> None:
        super().__init__(message)
        self.terms: tuple[str, ...] = tuple(terms)
        self.cause: str | None = None


class CoxConstantCovariateError(CoxInputError):
    """Some covariates take a single value in the rows fitted (``terms``: those covariates)."""


class CoxCollinearityError(CoxInputError):
    """Some covariates are linear combinations of others (``terms``: the columns of each collinear set)."""


class CoxNumericalError(CoxInputError):
    """The Newton–Raphson iterations broke down (a non-finite information matrix or score).

    This happens when coefficients run off to infinity faster than the step halving can follow (monotone
    likelihood: a covariate separates the events from the rest of a risk set), typically with few events for
    the number of coefficients. ``terms``: the coefficients largest at the break-down.
    """


class CoxConvergenceWarning(UserWarning):
    """Newton–Raphson did not meet the convergence rule."""


class CoxIllConditionedWarning(RuntimeWarning):
    """The information matrix was not positive definite, so a least-squares solve or pseudo-inverse was used."""


class MonotoneLikelihoodWarning(UserWarning):
    """A coefficient runs off to infinity (the likelihood keeps rising along it); ``terms`` names them."""

    def __init__(self, message: str = "", terms: Sequence[str] = ()) -> None:
        super().__init__(message)
        self.terms: tuple[str, ...] = tuple(terms)


@dataclass(frozen=True)
class LikelihoodTest:
    """A chi-square test of all coefficients equal to zero."""

    statistic: float
    df: int
    p_value: float


@dataclass(frozen=True)
class CoxFit:
    """Result of :func:`fit_cox`; coefficients on the original covariate scale.

    Attributes
    ----------
    names : covariate names.
    coef : log hazard ratios per unit of each covariate.
    var : model-based covariance of ``coef`` (inverse penalised information).
    robust_var : cluster-robust sandwich covariance, ``None`` without ``cluster``.
    loglik, loglik_null : partial log-likelihood at ``coef`` and at zero (unpenalised).
    penalized_loglik : the objective that was maximised.
    n_iter, converged : Newton–Raphson iterations and whether the rule was met.
    baseline : DataFrame ``stratum, time, cumhaz`` — cumulative hazard at the event
        times (days) of each stratum for a row whose covariates equal ``center``.
    center, scale : covariate means and standard deviations used inside.
    score_test, lr_test, wald_test : tests of all coefficients zero;
        ``robust_wald_test`` uses ``robust_var`` (``None`` without cluster).
    """

    names: tuple[str, ...]
    coef: np.ndarray
    var: np.ndarray
    robust_var: np.ndarray | None
    loglik: float
    loglik_null: float
    penalized_loglik: float
    n_iter: int
    converged: bool
    baseline: pd.DataFrame
    center: np.ndarray
    scale: np.ndarray
    score_test: LikelihoodTest
    lr_test: LikelihoodTest
    wald_test: LikelihoodTest
    robust_wald_test: LikelihoodTest | None
    ties: str
    penalty: float
    n_rows: int
    n_events: int
    n_clusters: int | None
    strata_levels: tuple[Any, ...]

    @property
    def se(self) -> np.ndarray:
        """Model-based standard errors."""
        return np.sqrt(np.diag(self.var))

    @property
    def robust_se(self) -> np.ndarray | None:
        """Cluster-robust standard errors (``None`` without cluster)."""
        return None if self.robust_var is None else np.sqrt(np.diag(self.robust_var))

    def linear_predictor(self, X: np.ndarray | pd.DataFrame) -> np.ndarray:
        """``(x - center) · coef`` per row: the log relative hazard against ``baseline``."""
        x = np.asarray(X, dtype=float)
        if x.ndim == 1:
            x = x[None, :]
        return (x - self.center) @ self.coef


# --------------------------------------------------------------------------- input checks


def _as_names(X: Any, names: Sequence[str] | None, p: int) -> tuple[str, ...]:
    if names is not None:
        out = tuple(str(n) for n in names)
    elif isinstance(X, pd.DataFrame):
        out = tuple(str(c) for c in X.columns)
    else:
        out = tuple(f"x{j}" for j in range(p))
    if len(out) != p:
        raise CoxInputError(f"{len(out)} covariate names given for {p} columns of X; pass one name per column.")
    return out


def _first_rows(mask: np.ndarray, k: int = 5) -> str:
    rows = np.flatnonzero(mask)[:k]
    more = " ..." if mask.sum() > k else ""
    return ", ".join(str(r) for r in rows) + more


def _check_finite(name: str, values: np.ndarray) -> None:
    bad = ~np.isfinite(values)
    if bad.any():
        raise CoxInputError(
            f"column '{name}' has {int(bad.sum())} missing or non-finite values (rows {_first_rows(bad)}); "
            "drop or impute those rows before fitting."
        )


def _vector(name: str, values: Any, n: int) -> np.ndarray:
    arr = np.asarray(values, dtype=float).reshape(-1)
    if arr.shape[0] != n:
        raise CoxInputError(f"'{name}' has {arr.shape[0]} rows but X has {n}; pass one value per row.")
    _check_finite(name, arr)
    return arr


def _check_collinear(Xs: np.ndarray, names: tuple[str, ...]) -> None:
    """Raise naming each column that is a linear combination of the columns before it."""
    p = Xs.shape[1]
    if p < 2:
        return
    gram = (Xs.T @ Xs) / max(Xs.shape[0] - 1, 1)  # correlation matrix of the standardised columns
    keep: list[int] = [0]
    parts: list[str] = []
    redundant: list[str] = []
    for j in range(1, p):
        sol = linalg.lstsq(gram[np.ix_(keep, keep)], gram[keep, j])[0]
        residual = gram[j, j] - gram[keep, j] @ sol  # variance of column j not explained by the kept ones
        if residual > 1e-10 * gram[j, j]:
            keep.append(j)
            continue
        partners = [names[keep[i]] for i in np.flatnonzero(np.abs(sol) > 1e-6)]
        parts.append(f"'{names[j]}' = linear combination of {partners}")
        redundant += [names[j], *partners]
    if parts:
        raise CoxCollinearityError(
            "collinear covariates: " + "; ".join(parts) + ". Drop one column of each collinear set.",
            list(dict.fromkeys(redundant)),
        )


# --------------------------------------------------------------------------- risk-set layout


@dataclass(frozen=True)
class _Layout:
    """Row-to-event-time matching, computed once per fit (the one sort).

    Positions below index the *active* rows (rows at risk at one event time or more).
    The sparse (keys x rows) difference pattern gets the per-row weights ``v`` as data at
    each iteration; its product with the covariates, reverse-cumulated over keys, gives
    the risk-set sums in O(n·p) without an (n, p) temporary.
    """

    n_keys: int  # distinct (stratum, event time) pairs
    bounds: np.ndarray  # segment starts per stratum in key space, plus n_keys
    key_time: np.ndarray  # event time of each key
    key_stratum: np.ndarray  # stratum code of each key
    active: np.ndarray  # indices (into the input rows) of active rows
    lo: np.ndarray  # per active row: first key at risk
    hi: np.ndarray  # per active row: last key at risk
    risk: sparse.csc_matrix  # key x row: +1 at the row's last key, -1 at the key before it enters
    risk_src: np.ndarray  # row of each stored entry of ``risk``
    risk_sign: np.ndarray  # +1 / -1 of each stored entry
    death: np.ndarray  # positions of event rows, sorted by key
    death_key: np.ndarray  # key of each event row
    frac: np.ndarray  # Efron fraction l/m of each event row (0 for Breslow)
    ties_per_key: np.ndarray  # m_k, number of event rows per key


def _risk_matrix(lo: np.ndarray, hi: np.ndarray, entering: np.ndarray, n_keys: int):
    """Difference pattern whose reverse cumulative sum over keys is the at-risk indicator.

    Column i holds +1 at ``hi[i]`` and, if the row enters after its stratum's first key,
    -1 at ``lo[i] - 1``.  Stored column by column so a product with X reads X once, in order.
    """
    n = hi.size
    counts = 1 + entering.astype(np.int64)
    indptr = np.r_[0, np.cumsum(counts)]
    indices = np.empty(indptr[-1], dtype=np.int64)
    sign = np.ones(indptr[-1])
    first = indptr[:-1]
    indices[first] = hi
    second = first[entering] + 1
    indices[second] = lo[entering] - 1
    sign[second] = -1.0
    src = np.repeat(np.arange(n), counts)
    matrix = sparse.csc_matrix((sign.copy(), indices, indptr), shape=(n_keys, n))
    return matrix, src, sign


def _count_up_to(keys: np.ndarray, queries: np.ndarray, size: int) -> np.ndarray:
    """Number of ``keys`` (sorted, distinct, in ``[0, size)``) that are <= each query."""
    if size <= 50_000_000:  # dense table: a gather instead of a binary search per row
        table = np.cumsum(np.bincount(keys, minlength=size))
        return table[queries]
    return np.searchsorted(keys, queries, side="right")


def _layout(start: np.ndarray, stop: np.ndarray, event: np.ndarray, strata: np.ndarray, ties: str) -> _Layout:
    is_event = event > 0
    times = np.unique(stop[is_event])  # all distinct event times (one sort over the events)
    base = np.int64(times.size + 1)
    # integer codes keep exact float comparisons: code = number of event times <= t
    key_row_stop = strata * base + np.searchsorted(times, stop, side="right")
    key_row_start = strata * base + np.searchsorted(times, start, side="right")
    keys = np.unique(key_row_stop[is_event])
    n_keys = keys.size
    size = int((strata.max() + 1) * base)
    lo_all = _count_up_to(keys, key_row_start, size)
    hi_all = _count_up_to(keys, key_row_stop, size) - 1
    key_stratum = keys // base
    key_time = times[(keys % base) - 1]
    seg_starts = np.flatnonzero(np.r_[True, key_stratum[1:] != key_stratum[:-1]])
    bounds = np.r_[seg_starts, n_keys].astype(np.int64)
    # rows whose interval holds no event time of their stratum contribute nothing
    active = np.flatnonzero(lo_all <= hi_all)
    lo, hi = lo_all[active], hi_all[active]
    seg_of_key = np.repeat(np.arange(seg_starts.size), np.diff(bounds))
    entering = lo > bounds[seg_of_key[lo]]  # rows entering after their stratum's first key
    risk, risk_src, risk_sign = _risk_matrix(lo, hi, entering, n_keys)
    death = np.flatnonzero(is_event[active])
    death_key = hi[death]
    order = np.argsort(death_key, kind="stable")
    death, death_key = death[order], death_key[order]
    ties_per_key = np.bincount(death_key, minlength=n_keys)
    first = np.r_[0, np.cumsum(ties_per_key)[:-1]]
    rank_in_key = np.arange(death.size) - first[death_key]
    frac = rank_in_key / ties_per_key[death_key] if ties == "efron" else np.zeros(death.size)
    return _Layout(
        n_keys=n_keys,
        bounds=bounds,
        key_time=key_time,
        key_stratum=key_stratum,
        active=active,
        lo=lo,
        hi=hi,
        risk=risk,
        risk_src=risk_src,
        risk_sign=risk_sign,
        death=death,
        death_key=death_key,
        frac=frac.astype(float),
        ties_per_key=ties_per_key,
    )


def _segment_reverse_cumsum(values: np.ndarray, bounds: np.ndarray) -> np.ndarray:
    """Sum over keys k..end of the stratum segment (keeps strata apart, exact resets)."""
    out = np.empty_like(values)
    for a, b in itertools.pairwise(bounds):
        out[a:b] = np.cumsum(values[a:b][::-1], axis=0)[::-1]
    return out


def _bincount_cols(index: np.ndarray, weights: np.ndarray, size: int) -> np.ndarray:
    """Column-wise ``np.bincount``: (rows, p) weights -> (size, p) sums."""
    return np.stack(
        [np.bincount(index, weights=weights[:, j], minlength=size) for j in range(weights.shape[1])], axis=1
    )


def _risk_set_sums(L: _Layout, v: np.ndarray, Xa: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """S0 (K,) and S1 (K, p): sums of ``v`` and ``v * x`` over each key's risk set."""
    M = L.risk
    M.data = v[L.risk_src] * L.risk_sign
    diff0 = np.bincount(M.indices, weights=M.data, minlength=L.n_keys)
    diff1 = M @ Xa
    return _segment_reverse_cumsum(diff0, L.bounds), _segment_reverse_cumsum(diff1, L.bounds)


def _weighted_gram(Xa: np.ndarray, wt: np.ndarray, chunk: int = 1 << 15) -> np.ndarray:
    """``X' diag(wt) X`` in row chunks (cache-sized temporaries instead of an (n, p) copy)."""
    out = np.zeros((Xa.shape[1], Xa.shape[1]))
    for a in range(0, Xa.shape[0], chunk):
        xc = Xa[a : a + chunk]
        out += xc.T @ (xc * wt[a : a + chunk, None])
    return out


@dataclass(frozen=True)
class _Fixed:
    """Per-fit constants: event-row covariates, weights and their weighted sum."""

    Xd: np.ndarray
    wd: np.ndarray
    mw: np.ndarray  # mean weight of the tie group, per event row
    wx_events: np.ndarray  # sum over events of w * x


def _fixed(Xa: np.ndarray, wa: np.ndarray, L: _Layout) -> _Fixed:
    Xd, wd = Xa[L.death], wa[L.death]
    dw = np.bincount(L.death_key, weights=wd, minlength=L.n_keys)
    return _Fixed(Xd, wd, (dw / L.ties_per_key)[L.death_key], wd @ Xd)


@dataclass
class _State:
    """Everything computed at one coefficient vector (standardised scale)."""

    loglik: float
    score: np.ndarray
    info: np.ndarray
    shift: float
    r: np.ndarray  # exp(eta - shift) per active row
    S1: np.ndarray
    E1: np.ndarray
    alpha: np.ndarray  # sum_l mw / D_l per key
    beta_f: np.ndarray  # sum_l mw f_l / D_l
    a: np.ndarray  # sum_l mw / D_l^2
    b: np.ndarray  # sum_l mw f_l / D_l^2
    c: np.ndarray  # sum_l mw f_l^2 / D_l^2
    inv_d: np.ndarray  # sum_l 1 / D_l
    inv_d_f: np.ndarray  # sum_l f_l / D_l
    A: np.ndarray  # per active row: sum of alpha over its keys


def _evaluate(beta: np.ndarray, Xa: np.ndarray, wa: np.ndarray, L: _Layout, F: _Fixed | None = None) -> _State:
    """Partial log-likelihood, score and information at ``beta`` (standardised covariates)."""
    F = _fixed(Xa, wa, L) if F is None else F
    K, k = L.n_keys, L.death_key
    eta = np.einsum("ij,j->i", Xa, beta)  # not BLAS gemv: its threads stall on a shared machine
    shift = float(eta.max())
    r = np.exp(eta - shift)  # shift guards overflow; every ratio below is shift-free
    v = wa * r
    # risk-set sums: rows leaving at their last key (reverse cumsum) minus rows not yet entered
    S0, S1 = _risk_set_sums(L, v, Xa)
    # tied-event sums and Efron terms, one entry per event row
    vd = v[L.death]
    E0 = np.bincount(k, weights=vd, minlength=K)
    E1 = _bincount_cols(k, F.Xd * vd[:, None], K)
    f = L.frac
    D = S0[k] - f * E0[k]
    h = F.mw / D
    hd = h / D
    alpha = np.bincount(k, weights=h, minlength=K)
    beta_f = np.bincount(k, weights=h * f, minlength=K)
    a = np.bincount(k, weights=hd, minlength=K)
    b = np.bincount(k, weights=hd * f, minlength=K)
    c = np.bincount(k, weights=hd * f * f, minlength=K)
    inv_d = np.bincount(k, weights=1.0 / D, minlength=K)
    inv_d_f = np.bincount(k, weights=f / D, minlength=K)
    loglik = float(F.wd @ (eta[L.death] - shift) - F.mw @ np.log(D))
    score = F.wx_events - alpha @ S1 + beta_f @ E1
    R = _segment_reverse_cumsum(alpha, L.bounds)
    A = R[L.lo] - (R[L.hi] - alpha[L.hi])
    info = _weighted_gram(Xa, v * A)
    info -= F.Xd.T @ (F.Xd * (vd * beta_f[k])[:, None])
    cross = S1.T @ (E1 * b[:, None])
    info -= S1.T @ (S1 * a[:, None]) - cross - cross.T + E1.T @ (E1 * c[:, None])
    return _State(loglik, score, info, shift, r, S1, E1, alpha, beta_f, a, b, c, inv_d, inv_d_f, A)


def _score_residuals(Xa: np.ndarray, L: _Layout, s: _State) -> np.ndarray:
    """Per-row score residuals (standardised scale, unweighted); ``sum(w * res) = score``.

    Event rows use the Efron-averaged mean ``(1/m) sum_l xbar_l`` and are at risk with
    weight ``1 - f_l`` in their own tie group, as in R's survival package.
    """
    d, k = L.death, L.death_key
    G = s.S1 * s.a[:, None] - s.E1 * s.b[:, None]  # sum_l h_l xbar_l
    Gf = s.S1 * s.b[:, None] - s.E1 * s.c[:, None]  # sum_l h_l f_l xbar_l
    RG = _segment_reverse_cumsum(G, L.bounds)
    B = RG[L.lo] - (RG[L.hi] - G[L.hi])
    res = -s.r[:, None] * (Xa * s.A[:, None] - B)
    m = L.ties_per_key[:, None]
    xbar_event = (s.S1 * s.inv_d[:, None] - s.E1 * s.inv_d_f[:, None]) / m
    res[d] += Xa[d] - xbar_event[k]
    res[d] += s.r[d, None] * (Xa[d] * s.beta_f[k][:, None] - Gf[k])
    return res


def _chi2(stat: float, df: int) -> LikelihoodTest:
    return LikelihoodTest(float(stat), int(df), float(stats.chi2.sf(stat, df)))


def _solve_pd(H: np.ndarray, g: np.ndarray) -> np.ndarray:
    try:
        return linalg.cho_solve(linalg.cho_factor(H), g)
    except linalg.LinAlgError:
        warnings.warn(
            CoxIllConditionedWarning(
                "the information matrix is not positive definite (ill-conditioned: nearly collinear covariates or "
                "coefficients running off); a least-squares Newton step was taken instead"
            ),
            stacklevel=4,
        )
        return linalg.lstsq(H, g)[0]


def _inverse_pd(H: np.ndarray) -> np.ndarray:
    try:
        return linalg.cho_solve(linalg.cho_factor(H), np.eye(H.shape[0]))
    except linalg.LinAlgError:
        warnings.warn(
            CoxIllConditionedWarning(
                "the information matrix is not positive definite (ill-conditioned); the covariance is a "
                "pseudo-inverse and the standard errors are unreliable"
            ),
            stacklevel=4,
        )
        return linalg.pinvh(H)


def _quad_form_inv(x: np.ndarray, V: np.ndarray) -> float:
    return float(x @ linalg.lstsq(V, x)[0])


# --------------------------------------------------------------------------- the fitter


def fit_cox(
    X: np.ndarray | pd.DataFrame,
    stop: Any,
    event: Any,
    start: Any = None,
    *,
    strata: Any = None,
    weights: Any = None,
    cluster: Any = None,
    ties: str = "efron",
    penalty: float = 0.0,
    max_iter: int = 50,
    tol: float = 1e-9,
    names: Sequence[str] | None = None,
    initial: Any = None,
) -> CoxFit:
    """Fit a Cox model to counting-process rows ``(start, stop]`` by Newton–Raphson.

    Parameters
    ----------
    X : (n, p) covariates as known at each row's start (DataFrame columns give names).
    stop : (n,) end of each interval, days since entry.
    event : (n,) 1 if the event happened at ``stop``, else 0.
    start : (n,) start of each interval, days; default 0 (time-fixed data).
    strata : (n,) stratum labels; each stratum has its own baseline hazard.
    weights : (n,) positive case weights.
    cluster : (n,) cluster labels (usually patient id) for the sandwich variance.
    ties : ``"efron"`` or ``"breslow"``.
    penalty : ridge penalty λ ≥ 0; maximises ``loglik - λ n/2 ‖coef·scale‖²``
        (lifelines' ``penalizer`` parameterisation).
    max_iter : maximum Newton–Raphson iterations.
    tol : convergence when the relative change of the (penalised) log-likelihood is
        ≤ ``tol`` and the largest step on the standardised scale is ≤ ``sqrt(tol)``.
    names : covariate names (default: DataFrame columns or ``x0..``).
    initial : (p,) coefficients (per unit of each covariate) to start Newton–Raphson from instead of 0, e.g.
        the whole-cohort estimate when refitting on a bootstrap resample: the same optimum (to ``tol``) in
        fewer iterations. The null model, and so the likelihood-ratio test, is still evaluated at 0.

    Returns
    -------
    CoxFit

    Raises
    ------
    CoxInputError
        No events, non-finite values, ``start >= stop``, constant or collinear columns,
        bad ``ties``/``event``/``weights``.

    Warns
    -----
    MonotoneLikelihoodWarning
        A coefficient runs off to infinity (named).
    CoxConvergenceWarning
        The convergence rule was not met in ``max_iter`` iterations.
    """
    inp = _checked_inputs(X, stop, event, start, strata, weights, cluster, ties, penalty, names)
    n, p = inp.x.shape
    center = inp.x.mean(axis=0)
    scale = inp.x.std(axis=0, ddof=1) if n > 1 else np.zeros(p)
    const = ~(scale > 0)
    if const.any():
        constant = [inp.names[j] for j in np.flatnonzero(const)]
        raise CoxConstantCovariateError(
            f"covariates {constant} are constant; drop them (they are absorbed by the baseline hazard).", constant
        )
    Xs = inp.x - center
    Xs /= scale
    _check_collinear(Xs, inp.names)

    L = _layout(inp.start, inp.stop, inp.event, inp.strata_codes, ties)
    Xa, wa = (Xs, inp.weights) if L.active.size == n else (Xs[L.active], inp.weights[L.active])
    pen = float(penalty) * n
    try:
        nr = _newton_raphson(Xa, wa, L, pen, max_iter, tol, _initial(initial, scale, inp.names))
    except _BreakDown as stop:
        largest = [inp.names[j] for j in np.argsort(-np.abs(stop.beta))[: min(p, 5)] if abs(stop.beta[j]) > 1.0]
        raise CoxNumericalError(
            f"the fit broke down numerically after {stop.n_iter} Newton–Raphson iterations (the information "
            f"matrix became non-finite): the coefficients of {largest or list(inp.names)} were running off to "
            f"infinity (monotone likelihood: usually a covariate that separates the events from the rest of their "
            f"risk sets, with few events for the {p} coefficients). Use fewer covariates, more events, or a ridge "
            "penalty.",
            largest or inp.names,
        ) from None
    _warn_convergence(nr, inp.names, tol)

    V_std = _inverse_pd(nr.state.info + pen * np.eye(p))
    coef = nr.beta / scale
    var = V_std / np.outer(scale, scale)
    robust_var = robust_wald = None
    if inp.cluster_codes is not None and inp.n_clusters is not None:
        res = _score_residuals(Xa, L, nr.state) * wa[:, None]
        per_cluster = _bincount_cols(inp.cluster_codes[L.active], res, inp.n_clusters)
        robust_var = (V_std @ (per_cluster.T @ per_cluster) @ V_std) / np.outer(scale, scale)
        robust_wald = _chi2(_quad_form_inv(coef, robust_var), p)
    return CoxFit(
        names=inp.names,
        coef=coef,
        var=var,
        robust_var=robust_var,
        loglik=nr.state.loglik,
        loglik_null=nr.null.loglik,
        penalized_loglik=nr.objective,
        n_iter=nr.n_iter,
        converged=nr.converged,
        baseline=_baseline_frame(nr.state, L, inp.strata_levels if strata is not None else None),
        center=center,
        scale=scale,
        score_test=_chi2(_quad_form_inv(nr.null.score, nr.null.info), p),
        lr_test=_chi2(2.0 * (nr.state.loglik - nr.null.loglik), p),
        wald_test=_chi2(_quad_form_inv(coef, var), p),
        robust_wald_test=robust_wald,
        ties=ties,
        penalty=float(penalty),
        n_rows=n,
        n_events=int((inp.event > 0).sum()),
        n_clusters=inp.n_clusters,
        strata_levels=inp.strata_levels,
    )


@dataclass(frozen=True)
class _Inputs:
    """Validated arrays of one fit."""

    x: np.ndarray
    stop: np.ndarray
    start: np.ndarray
    event: np.ndarray
    weights: np.ndarray
    strata_codes: np.ndarray
    strata_levels: tuple[Any, ...]
    cluster_codes: np.ndarray | None
    n_clusters: int | None
    names: tuple[str, ...]


def _labels(name: str, values: Any, n: int) -> tuple[np.ndarray, list[Any]]:
    arr = np.asarray(values).reshape(-1)
    if arr.shape[0] != n:
        raise CoxInputError(f"'{name}' has {arr.shape[0]} rows but X has {n}; pass one label per row.")
    codes, uniques = pd.factorize(pd.Series(arr), sort=True)
    if (codes < 0).any():
        raise CoxInputError(f"'{name}' is missing in rows {_first_rows(codes < 0)}; fill or drop them.")
    return codes.astype(np.int64), uniques.tolist()


def _checked_inputs(
    X: Any,
    stop: Any,
    event: Any,
    start: Any,
    strata: Any,
    weights: Any,
    cluster: Any,
    ties: str,
    penalty: float,
    names: Sequence[str] | None,
) -> _Inputs:
    if ties not in ("efron", "breslow"):
        raise CoxInputError(f"ties={ties!r}; use 'efron' or 'breslow'.")
    if not (np.isfinite(penalty) and penalty >= 0):
        raise CoxInputError(f"penalty={penalty!r}; use a finite value >= 0.")
    x = np.asarray(X, dtype=float)
    if x.ndim == 1:
        x = x[:, None]
    if x.ndim != 2 or x.shape[1] == 0:
        raise CoxInputError("X must be a 2-D array with at least one covariate column.")
    n, p = x.shape
    col_names = _as_names(X, names, p)
    for j, nm in enumerate(col_names):
        _check_finite(nm, x[:, j])
    t_stop = _vector("stop", stop, n)
    t_start = np.zeros(n) if start is None else _vector("start", start, n)
    ev = _vector("event", event, n)
    bad = ~np.isin(ev, (0.0, 1.0))
    if bad.any():
        raise CoxInputError(f"'event' must be 0 or 1; rows {_first_rows(bad)} are not. Recode other statuses first.")
    bad = t_start >= t_stop
    if bad.any():
        raise CoxInputError(
            f"start >= stop in {int(bad.sum())} rows ({_first_rows(bad)}); every interval (start, stop] needs "
            "positive length — drop zero-length rows or move a same-day event to stop + a fraction of a day."
        )
    w = np.ones(n) if weights is None else _vector("weights", weights, n)
    if (w <= 0).any():
        raise CoxInputError(f"'weights' must be positive; rows {_first_rows(w <= 0)} are not. Drop those rows.")
    if not (ev > 0).any():
        raise CoxInputError("no events (event == 1) in the data: a Cox model needs at least one event.")
    strata_codes, strata_levels = (np.zeros(n, dtype=np.int64), [0]) if strata is None else _labels("strata", strata, n)
    cluster_codes, n_clusters = None, None
    if cluster is not None:
        cluster_codes, uniques = _labels("cluster", cluster, n)
        n_clusters = len(uniques)
    return _Inputs(x, t_stop, t_start, ev, w, strata_codes, tuple(strata_levels), cluster_codes, n_clusters, col_names)


@dataclass(frozen=True)
class _Newton:
    """Outcome of the Newton–Raphson iterations (standardised scale)."""

    beta: np.ndarray
    state: _State
    null: _State
    objective: float
    n_iter: int
    converged: bool
    history: tuple[np.ndarray, ...]


class _BreakDown(Exception):
    """Raised inside the iterations when the information matrix is no longer finite."""

    def __init__(self, beta: np.ndarray, n_iter: int) -> None:
        super().__init__("non-finite information matrix")
        self.beta, self.n_iter = beta, n_iter


def _initial(initial: Any, scale: np.ndarray, names: tuple[str, ...]) -> np.ndarray | None:
    """Starting coefficients on the standardised scale (None: start from 0)."""
    if initial is None:
        return None
    beta = np.asarray(initial, dtype=float).reshape(-1)
    if beta.size != scale.size or not np.isfinite(beta).all():
        raise CoxInputError(
            f"`initial` must hold {scale.size} finite coefficients, one per covariate {list(names)}; "
            f"got {np.asarray(initial).tolist()!r}"
        )
    return beta * scale


def _newton_raphson(
    Xa: np.ndarray, wa: np.ndarray, L: _Layout, pen: float, max_iter: int, tol: float, initial: np.ndarray | None = None
) -> _Newton:
    """Maximise ``loglik - pen/2 ‖β‖²`` from β = ``initial`` (default 0) with step halving.

    Converged when the relative change of the objective is ≤ ``tol`` and the largest step is
    ≤ ``sqrt(tol)``; stopped early when the objective stays flat for 3 steps while the
    coefficients still move (monotone likelihood).
    """
    F = _fixed(Xa, wa, L)
    p = Xa.shape[1]
    beta = np.zeros(p)
    null = state = _evaluate(beta, Xa, wa, L, F)
    if initial is not None:
        start = _evaluate(initial, Xa, wa, L, F)
        if np.isfinite(start.loglik) and start.loglik >= null.loglik:  # else the start is worse than 0: keep 0
            beta, state = initial.copy(), start
    obj = state.loglik - 0.5 * pen * float(beta @ beta)
    converged, n_iter, flat_runs = False, 0, 0
    history = [beta.copy()]
    for n_iter in range(1, max_iter + 1):
        if not (np.isfinite(state.info).all() and np.isfinite(state.score).all()):
            raise _BreakDown(beta, n_iter - 1)
        step = _solve_pd(state.info + pen * np.eye(p), state.score - pen * beta)
        for _ in range(40):  # step halving until the objective does not fall
            trial = beta + step
            new = _evaluate(trial, Xa, wa, L, F)
            new_obj = new.loglik - 0.5 * pen * float(trial @ trial)
            if np.isfinite(new_obj) and new_obj >= obj - 1e-12 * abs(obj):
                break
            step = step / 2.0
        else:
            break
        rel = abs(new_obj - obj) / max(abs(obj), 1e-300)
        max_step = float(np.abs(step).max())
        beta, state, obj = trial, new, new_obj
        history.append(beta.copy())
        if rel <= tol and max_step <= np.sqrt(tol):
            converged = True
            break
        flat_runs = flat_runs + 1 if rel <= tol else 0
        if flat_runs >= 3:
            break
    return _Newton(beta, state, null, obj, n_iter, converged, tuple(history))


def _warn_convergence(nr: _Newton, names: tuple[str, ...], tol: float) -> None:
    running = _running_off(list(nr.history), nr.converged)
    if running:
        terms = [names[j] for j in running]
        warnings.warn(
            MonotoneLikelihoodWarning(
                f"monotone likelihood: coefficient(s) {terms} run off to infinity "
                "(an event pattern is perfectly separated by them); their estimates and standard errors are "
                "meaningless — drop or coarsen them, or use a ridge penalty.",
                terms,
            ),
            stacklevel=3,
        )
    elif not nr.converged:
        warnings.warn(
            f"Newton–Raphson did not converge in {nr.n_iter} iterations (tol={tol}); results may be inaccurate.",
            CoxConvergenceWarning,
            stacklevel=3,
        )


def _baseline_frame(state: _State, L: _Layout, strata_levels: tuple[Any, ...] | None) -> pd.DataFrame:
    """Cumulative baseline hazard per stratum at the covariate centre."""
    dlam = state.alpha * np.exp(-state.shift)  # hazard increments at the centre (shift undone)
    cumhaz = np.empty_like(dlam)
    for a, b in zip(L.bounds[:-1], L.bounds[1:]):
        cumhaz[a:b] = np.cumsum(dlam[a:b])
    stratum = np.asarray(strata_levels, dtype=object)[L.key_stratum] if strata_levels is not None else 0
    return pd.DataFrame({"stratum": stratum, "time": L.key_time, "cumhaz": cumhaz})


def _running_off(history: list[np.ndarray], converged: bool) -> list[int]:
    """Coefficients (standardised) that are huge, or still growing at the end without convergence."""
    last = history[-1]
    huge = set(np.flatnonzero(np.abs(last) > _MONOTONE_STD_COEF).tolist())
    if not converged and len(history) >= 4:
        tail = np.abs(np.array(history[-4:]))
        growing = np.all(np.diff(tail, axis=0) > 1e-3, axis=0) & (tail[-1] > 3.0)
        huge |= set(np.flatnonzero(growing).tolist())
    return sorted(huge)


@dataclass(frozen=True)
class EventRiskSetMeans:
    """Each event row with the risk-weighted covariate mean of its risk set (the parts of a Schoenfeld residual).

    Attributes
    ----------
    row : position of each event row in the input.
    time : its event time (days).
    mean : (n_events, p) risk-set mean of the standardised covariates at that time (for Efron ties the average
        over the m Efron terms, as in R's survival package and lifelines), in event-key order.
    """

    row: np.ndarray
    time: np.ndarray
    mean: np.ndarray


def event_risk_set_means(
    x_std: np.ndarray,
    start: np.ndarray,
    stop: np.ndarray,
    event: np.ndarray,
    strata_codes: np.ndarray,
    weights: np.ndarray,
    beta_std: np.ndarray,
    ties: str,
) -> EventRiskSetMeans:
    """Risk-set covariate means at each event of ``(start, stop]`` rows for standardised coefficients ``beta_std``.

    ``x_std`` are the covariates centred and scaled as in :class:`CoxFit` (``(x - center) / scale``);
    ``strata_codes`` are integer codes from 0.
    """
    L = _layout(start, stop, event, strata_codes, ties)
    state = _evaluate(beta_std, x_std[L.active], weights[L.active], L)
    k = L.death_key
    xbar = (state.S1 * state.inv_d[:, None] - state.E1 * state.inv_d_f[:, None]) / L.ties_per_key[:, None]
    return EventRiskSetMeans(row=L.active[L.death], time=L.key_time[k], mean=xbar[k])
