"""Harrell's and Uno's concordance index in O(n log n), a risk-set variant for counting-process rows, and
infinitesimal-jackknife standard errors.

Conventions (those of scikit-survival's ``concordance_index_censored`` / ``concordance_index_ipcw``):
a pair is comparable when the earlier time is an outcome; a subject censored at the same time as an
outcome counts as later; two outcomes at the same time are not compared; equal risks count one half.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from riskbench.metrics.censoring import inverse_censoring_weights
from riskbench.metrics.dominance import DominanceCounts, DominanceSums, dominance_counts, dominance_sums
from riskbench.metrics.inputs import ArrayLike, MetricInputError, as_risk, as_status, as_time, check_lengths
from riskbench.metrics.risk_sets import OutcomeSet, censoring_curve, dense_rank


@dataclass(frozen=True)
class Concordance:
    """A concordance estimate with its pair counts.

    Attributes
    ----------
    estimate
        Concordance index (probability that the subject with the earlier outcome has the higher risk).
    se
        Infinitesimal-jackknife standard error (censoring weights, if any, treated as fixed).
    concordant, discordant, tied_risk, comparable
        Unweighted counts of comparable pairs (for Uno's C: pairs whose earlier outcome falls before ``tau``).
    tied_time
        Pairs of an outcome and a censoring at the same time (counted as comparable).
    """

    estimate: float
    se: float
    concordant: int
    discordant: int
    tied_risk: int
    comparable: int
    tied_time: int = 0


TIED_TOL = 1e-8
"""Scores closer than this (absolute) count as tied, as in scikit-survival, so that rounding noise in a
computed score (e.g. 0.1 + 0.2 vs 0.3) does not decide a pair."""


def _result(
    estimate: float, se: float, below: np.ndarray, tied: np.ndarray, total: np.ndarray, tied_time: int = 0
) -> Concordance:
    """Concordance with pair counts summed from per-outcome counts."""
    concordant, tied_risk, comparable = (round(float(x.sum())) for x in (below, tied, total))
    return Concordance(
        estimate=estimate,
        se=se,
        concordant=concordant,
        discordant=comparable - concordant - tied_risk,
        tied_risk=tied_risk,
        comparable=comparable,
        tied_time=tied_time,
    )


def _pair_sums(key_point, key_query, rank, weight_point):
    """Per item i: dominance sums over items j with ``key_point[j] <= key_query[i]``.

    Each item enters twice in one key order, once counted (as a point) and once asking (as a query).
    """
    n = rank.size
    key = np.concatenate([2 * key_point, 2 * key_query + 1])  # equal keys: the point is not before the query
    rk = np.concatenate([rank, rank])
    w = np.concatenate([weight_point, np.zeros(n)])
    sums = dominance_sums(key, rk, w)
    return sums.below[n:], sums.tied[n:], sums.total[n:]


def _influence_se(num_i, den_i, estimate, den_total, cluster=None) -> float:
    """sqrt(sum_k (dC/dv_k)^2) with case weights v (pairs weighted by v_i v_j); summed within clusters."""
    dc = (num_i - estimate * den_i) / den_total
    if cluster is not None:
        dc = np.bincount(dense_rank(cluster), weights=dc)
    return float(np.sqrt(np.sum(dc**2)))


def _time_keys(time: np.ndarray, is_event: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Order key for 'later than' (a larger time first; a censoring before an outcome at an equal time)
    and the dense rank of -time."""
    t_rank = dense_rank(-time)
    return 2 * t_rank + is_event.astype(np.int64), t_rank


@dataclass(frozen=True)
class _EarlierCompeting:
    """Pairs of an outcome i and a competing event j strictly before it (Wolbers et al. 2014): pair weight
    ``outcome_weight[i] * competing_weight[j]``; both arrays are zero outside the pairs' members."""

    outcome_weight: np.ndarray
    competing_weight: np.ndarray


class _PairContributions(NamedTuple):
    """Per subject: numerator and denominator contributions as the outcome i of a pair (``num_i``,
    ``den_i``) and as its other member j (``num_j``, ``den_j``, zero unless the SE is wanted); and per used
    outcome the unweighted below / tied / total pair counts."""

    num_i: np.ndarray
    den_i: np.ndarray
    num_j: np.ndarray
    den_j: np.ndarray
    counts: tuple[np.ndarray, np.ndarray, np.ndarray]


def _earlier_competing_sums(time, rank, pairs: _EarlierCompeting, *, with_se: bool) -> _PairContributions:
    """The pairs of an outcome and a competing event strictly before it."""
    t_rank = dense_rank(time)  # ascending: a strictly smaller key is a strictly earlier time
    weighted = dominance_sums(t_rank, rank, pairs.competing_weight)
    counts = dominance_sums(t_rank, rank, (pairs.competing_weight > 0).astype(float))
    w = pairs.outcome_weight
    num_i = w * (weighted.below + 0.5 * weighted.tied)
    den_i = w * weighted.total
    num_j = den_j = np.zeros_like(w)
    if with_se:
        # role 2: competing event j asks for the later outcomes i with a higher risk, weighted by w_i
        flip = dominance_sums(int(t_rank.max()) - t_rank, int(rank.max()) - rank, w)
        num_j = pairs.competing_weight * (flip.below + 0.5 * flip.tied)
        den_j = pairs.competing_weight * flip.total
    used = w > 0
    return _PairContributions(num_i, den_i, num_j, den_j, (counts.below[used], counts.tied[used], counts.total[used]))


def _weighted_concordance(
    time, is_event, risk, event_weight, *, with_se: bool, earlier_competing: _EarlierCompeting | None = None
) -> Concordance:
    """C = sum_i w_i (#{j later, r_j < r_i} + ½ #{ties}) / sum_i w_i #{j later}; i over outcomes.

    With ``earlier_competing``, the pairs of an outcome and an earlier competing event are added with their
    own weights (Wolbers et al. 2014).
    """
    n = time.size
    key, t_rank = _time_keys(time, is_event)
    rank = dense_rank(risk, TIED_TOL)
    ev = is_event.astype(bool)
    # role 1: outcome i asks for the subjects later than it (key strictly smaller)
    sums = dominance_sums(key, rank, np.ones(n))
    below, tied, total = (np.where(ev, a, 0.0) for a in (sums.below, sums.tied, sums.total))
    num_i = event_weight * (below + 0.5 * tied)
    den_i = event_weight * total
    used = ev & (event_weight > 0)
    counts = [below[used], tied[used], total[used]]
    extra = None
    if earlier_competing is not None:
        extra = _earlier_competing_sums(time, rank, earlier_competing, with_se=with_se)
        num_i, den_i = num_i + extra.num_i, den_i + extra.den_i
        counts = [np.r_[a, b] for a, b in zip(counts, extra.counts)]
    den = float(den_i.sum())
    _require_pairs(den)
    estimate = float(num_i.sum() / den)
    tied_time = _tied_time_pairs(t_rank, is_event, used)
    se = float("nan")
    if with_se:
        # role 2: subject j asks for the outcomes it is later than, weighted by the outcome's weight;
        # flipping both orders turns "earlier outcome with higher risk" into a dominance question again
        flip = dominance_sums(
            int(key.max()) - key, int(rank.max()) - rank, np.where(ev, event_weight, 0.0), reuse_reversed=sums
        )
        num_j = flip.below + 0.5 * flip.tied
        den_j = flip.total
        if extra is not None:
            num_j, den_j = num_j + extra.num_j, den_j + extra.den_j
        se = _influence_se(num_i + num_j, den_i + den_j, estimate, den)
    return _result(estimate, se, counts[0], counts[1], counts[2], tied_time)


def _require_pairs(den: float) -> None:
    """Refuse a concordance without a comparable pair (``den``: their total weight)."""
    if den == 0:
        raise MetricInputError(
            "no comparable pair: every outcome is the last observation (or no outcome before `tau`); "
            "concordance is undefined"
        )


def _tied_time_pairs(t_rank: np.ndarray, is_event: np.ndarray, used: np.ndarray) -> int:
    """Pairs of a counted outcome and a censoring at the same time."""
    cens = np.bincount(t_rank, weights=(~is_event.astype(bool)).astype(float))
    ev = np.bincount(t_rank, weights=used.astype(float), minlength=cens.size)
    return round(float(np.sum(cens * ev)))


def _prepare(time, event, risk, *, allow_competing: bool):
    t = as_time(time)
    status = as_status(event, t.size, allow_competing=allow_competing)
    r = as_risk(risk, t.size)
    if r.ndim != 1:
        raise MetricInputError("`risk` must be one score per subject (1-D) for concordance")
    return t, status, r


def concordance_harrell(time: ArrayLike, event: ArrayLike, risk: ArrayLike, *, with_se: bool = True) -> Concordance:
    """Harrell's concordance index.

    Parameters
    ----------
    time
        Follow-up time (days; any unit used consistently).
    event
        0 censored, 1 outcome, 2 competing event. A subject with a competing event stays comparable with
        every later outcome (it can never have the outcome), as in Wolbers et al. (2009).
    risk
        Score where higher means worse (e.g. predicted probability of the outcome). A survival
        probability or survival time must be negated first.
    with_se
        Compute the infinitesimal-jackknife standard error (doubles the work).

    Returns
    -------
    Concordance
    """
    t, status, r = _prepare(time, event, risk, allow_competing=True)
    if (status == 2).any():
        # never having the outcome: later than every observed time
        t = np.where(status == 2, t.max() + 1.0, t)
    is_event = status == 1
    if not is_event.any():
        raise MetricInputError("`event` holds no outcome (code 1): concordance is undefined")
    return _weighted_concordance(t, is_event, r, is_event.astype(float), with_se=with_se)


def concordance_uno(
    time: ArrayLike,
    event: ArrayLike,
    risk: ArrayLike,
    tau: float | None = None,
    *,
    train_time: ArrayLike | None = None,
    train_event: ArrayLike | None = None,
    with_se: bool = True,
) -> Concordance:
    """Uno's concordance index (Uno et al. 2011): pairs weighted by 1/G(T_i)² up to the truncation time ``tau``.

    With competing events (``event`` 2) this is the competing-risk form of Wolbers et al. (2014,
    Biostatistics 15:526): besides the pairs of an outcome i and a subject j still followed after it
    (weight 1/G(T_i)²), an outcome is compared with every competing event strictly before it (weight
    1/(G(T_i) G(T_j))), so the index measures how well ``risk`` ranks the cumulative incidence of the
    outcome. G is the Kaplan–Meier of the censoring (a competing event is not a censoring).

    Parameters
    ----------
    time, event, risk
        Evaluation data; ``event`` 0 censored, 1 outcome, 2 competing event; ``risk`` higher = worse.
    tau
        Truncation time: only outcomes before ``tau`` start a pair (``None``: no truncation).
    train_time, train_event
        Data for the censoring Kaplan–Meier G (default: the evaluation data).
    with_se
        Infinitesimal-jackknife standard error, treating the censoring weights as fixed.
    """
    t, status, r = _prepare(time, event, risk, allow_competing=True)
    g_curve = censoring_curve(t, status, train_time, train_event)
    is_event = status == 1
    use = is_event & (t < tau if tau is not None else True)
    if not use.any():
        raise MetricInputError(f"no outcome happens before tau={tau}: Uno's C is undefined; choose a later tau")
    weight = inverse_censoring_weights(g_curve, t, use, power=2)
    earlier = None
    if (status == 2).any():
        # only competing events before the last outcome used can be in a pair
        competing = (status == 2) & (t < t[use].max())
        earlier = _EarlierCompeting(
            outcome_weight=inverse_censoring_weights(g_curve, t, use, power=1),
            competing_weight=inverse_censoring_weights(g_curve, t, competing, power=1),
        )
    return _weighted_concordance(t, is_event, r, weight, with_se=with_se, earlier_competing=earlier)


class HorizonConcordance(NamedTuple):
    """Harrell's and Uno's C of one score at one horizon (see :func:`concordance_at_horizon`)."""

    harrell: float
    uno: float


def concordance_at_horizon(
    outcomes: OutcomeSet, risk: ArrayLike, tau: float, *, rank: np.ndarray | None = None
) -> HorizonConcordance:
    """Harrell's C with outcome and follow-up truncated at ``tau`` and Uno's C with truncation time ``tau``, in
    one pass over the pairs; estimates equal to ``concordance_harrell(min(time, tau), status truncated at tau,
    risk)`` and ``concordance_uno(time, status, risk, tau)`` (no standard errors, no pair counts).

    Both indices count, for each outcome, the subjects later than it with a lower, equal or any score; those
    sums are computed once. Harrell's index adds the competing events strictly before each outcome (after
    truncation they never have the outcome, so they are later than every outcome); Uno's adds the same pairs
    with inverse-probability weights (Wolbers et al. 2014). The unweighted sums are integers, so Harrell's value
    is exactly that of the separate call; Uno's differs from it by rounding at most (its earlier-competing sums
    run over the outcomes and competing events only).

    Parameters
    ----------
    outcomes
        The evaluation set (time in days, status 0/1/2), shared by every score and horizon measured on it.
    risk
        Score per subject, higher = worse.
    tau
        Truncation time (days).
    rank
        ``dense_rank(risk, TIED_TOL)`` when already at hand (shared with the AUC of the same score).

    Raises
    ------
    MetricInputError
        When either index is undefined (the messages of the separate functions).
    """
    t, status = outcomes.time, outcomes.status
    r = as_risk(risk, t.size)
    if r.ndim != 1:
        raise MetricInputError("`risk` must be one score per subject (1-D) for concordance")
    is_event = status == 1
    harrell_event = is_event & (t <= tau)
    if not harrell_event.any():
        raise MetricInputError("`event` holds no outcome (code 1): concordance is undefined")
    key, _ = outcomes.later_key()
    if rank is None:
        rank = dense_rank(r, TIED_TOL)
    later = dominance_counts(key, rank, asking=is_event)  # 0 for the subjects other than outcomes
    below, tied, total = later.below, later.tied, later.total
    competing = status == 2
    earlier = None
    if competing.any():
        earlier = _earlier_competing_pairs(outcomes.time_rank(), rank, is_event, competing)
    h_num, h_den = below + 0.5 * tied, total
    if earlier is not None:
        h_num = h_num + np.where(harrell_event, earlier.below + 0.5 * earlier.tied, 0.0)
        h_den = h_den + np.where(harrell_event, earlier.total, 0.0)
    h_num, h_den = np.where(harrell_event, h_num, 0.0), np.where(harrell_event, h_den, 0.0)
    den = float(h_den.sum())
    _require_pairs(den)
    harrell = float(h_num.sum() / den)
    weight, pairs = outcomes.cached(("uno_weights", tau), lambda: _uno_weights(outcomes, tau))
    num_i = weight * (below + 0.5 * tied)
    den_i = weight * total
    if pairs is not None:
        extra = _earlier_competing_pairs(outcomes.time_rank(), rank, is_event, competing, pairs)
        num_i, den_i = num_i + extra.below, den_i + extra.total
    den = float(den_i.sum())
    _require_pairs(den)
    return HorizonConcordance(harrell, float(num_i.sum() / den))


def _uno_weights(outcomes: OutcomeSet, tau: float) -> tuple[np.ndarray, _EarlierCompeting | None]:
    """Uno's pair weights 1/G(T_i)² of the outcomes before ``tau`` and, with competing events, the weights of
    the pairs of an outcome and an earlier competing event; they depend on the rows and ``tau`` only."""
    t, status = outcomes.time, outcomes.status
    use = (status == 1) & (t < tau)
    if not use.any():
        raise MetricInputError(f"no outcome happens before tau={tau}: Uno's C is undefined; choose a later tau")
    g_curve = outcomes.censoring
    weight = inverse_censoring_weights(g_curve, t, use, power=2)
    competing = status == 2
    if not competing.any():
        return weight, None
    pairs = _EarlierCompeting(
        outcome_weight=inverse_censoring_weights(g_curve, t, use, power=1),
        competing_weight=inverse_censoring_weights(g_curve, t, competing & (t < t[use].max()), power=1),
    )
    return weight, pairs


class _PairTotals(NamedTuple):
    below: np.ndarray
    tied: np.ndarray
    total: np.ndarray


def _earlier_competing_pairs(
    t_rank: np.ndarray,
    rank: np.ndarray,
    is_event: np.ndarray,
    competing: np.ndarray,
    pairs: _EarlierCompeting | None = None,
) -> _PairTotals:
    """Per outcome, the competing events strictly before it with a lower, equal and any score: counted
    (``pairs`` None) or weighted (``below`` and ``total`` then hold ``outcome_weight * (below + ½ tied)`` and
    ``outcome_weight * total``). Only outcomes and competing events enter the sums; zero for other subjects."""
    members = np.flatnonzero(is_event | competing)
    sums: DominanceCounts | DominanceSums
    if pairs is None:  # integer counts: no sort needed
        sums = dominance_counts(t_rank[members], rank[members], competing[members], asking=is_event[members])
    else:
        sums = dominance_sums(t_rank[members], rank[members], pairs.competing_weight[members])
    out = [np.zeros(t_rank.size) for _ in range(3)]
    if pairs is None:
        for full, part in zip(out, (sums.below, sums.tied, sums.total)):
            full[members] = part
    else:
        w = pairs.outcome_weight[members]
        out[0][members] = w * (sums.below + 0.5 * sums.tied)
        out[2][members] = w * sums.total
    return _PairTotals(*out)


def concordance_counting_process(
    start: ArrayLike,
    stop: ArrayLike,
    event: ArrayLike,
    risk: ArrayLike,
    patient_id: ArrayLike | None = None,
) -> Concordance:
    """Concordance over risk sets of counting-process rows (time-varying risk).

    At each outcome time t (a row with ``event`` 1 and ``stop`` = t) the outcome row is compared with every
    other row at risk at t (``start`` < t <= ``stop``; a row censored at t counts, one with an outcome at t
    does not), each scored with the risk of that row. Equal risks count one half.

    Parameters
    ----------
    start, stop
        Row interval (start, stop] in days.
    event
        1 when the row ends with the outcome, 0 otherwise (a competing event, 2, ends the row as censored).
    risk
        Row's score, higher = worse.
    patient_id
        Optional; the standard error then sums influences within patient (rows of one patient are not
        independent).
    """
    stop_a = as_time(stop, "stop")
    start_a = as_time(start, "start")
    n = check_lengths(start=start_a, stop=stop_a, event=np.asarray(event), risk=np.asarray(risk))
    if patient_id is not None:
        check_lengths(stop=stop_a, patient_id=np.asarray(patient_id))
    bad = np.flatnonzero(start_a >= stop_a)
    if bad.size:
        raise MetricInputError(f"rows {bad[:5].tolist()} have `start` >= `stop`: each row must cover (start, stop]")
    is_event = as_status(event, n, allow_competing=True) == 1
    r = as_risk(risk, n)
    if not is_event.any():
        raise MetricInputError("`event` holds no outcome (code 1): concordance is undefined")
    # one time scale for starts and stops; rank 0 = latest time
    grid = np.unique(np.r_[start_a, stop_a])
    inv_stop = grid.size - 1 - np.searchsorted(grid, stop_a)
    inv_start = grid.size - 1 - np.searchsorted(grid, start_a)
    key_stop = 2 * inv_stop + is_event  # same 'later than' order as for one row per subject
    rank = dense_rank(r, TIED_TOL)
    ones = np.ones(n)
    # rows with stop later than t (or censored at t) ...
    a = dominance_sums(key_stop, rank, ones)
    # ... minus those that have not started by t (start >= t): a start at or after t sorts before the query
    b_below, b_tied, b_total = _pair_sums(inv_start, inv_stop, rank, ones)
    below = np.where(is_event, a.below - b_below, 0.0)
    tied = np.where(is_event, a.tied - b_tied, 0.0)
    total = np.where(is_event, a.total - b_total, 0.0)
    den = float(total.sum())
    if den == 0:
        raise MetricInputError(
            "no row is at risk at any outcome time besides the outcome row: concordance is undefined"
        )
    num_i = below + 0.5 * tied
    estimate = float(num_i.sum() / den)
    # influence of each row as a member of other rows' risk sets (both orders flipped)
    rmax, last = int(rank.max()), grid.size - 1
    ev_w = is_event.astype(float)
    fa = dominance_sums(int(key_stop.max()) - key_stop, rmax - rank, ev_w, reuse_reversed=a)
    fb_below, fb_tied, fb_total = _pair_sums(last - inv_stop, last - inv_start, rmax - rank, ev_w)
    num_j = (fa.below - fb_below) + 0.5 * (fa.tied - fb_tied)
    den_j = fa.total - fb_total
    se = _influence_se(num_i + num_j, total + den_j, estimate, den, cluster=patient_id)
    return _result(estimate, se, below, tied, total)
