"""A small Cox proportional-hazards fit (Breslow ties, time-fixed covariates) for calibration models.

Calibration regresses the outcome on one or two transforms of the predicted risk; a compact Newton–Raphson
fit keeps this stage free of the model stage (metrics depend on numpy only).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from riskbench.metrics.inputs import MetricInputError


@dataclass(frozen=True)
class HazardFit:
    """Coefficients, their covariance, and the Breslow cumulative baseline hazard.

    ``baseline_times`` are the distinct outcome times; ``baseline_log_cumhaz`` the log cumulative hazard
    just after each (kept on the log scale: with nearly separated data the coefficients grow large and
    the baseline hazard tiny, and only their combination is meaningful).
    """

    coef: np.ndarray
    var: np.ndarray
    baseline_times: np.ndarray
    baseline_log_cumhaz: np.ndarray
    converged: bool

    def log_cumhaz_at(self, t: float) -> float:
        """Log baseline cumulative hazard at time ``t`` (-inf before the first outcome)."""
        k = np.searchsorted(self.baseline_times, t, side="right")
        return float(np.r_[-np.inf, self.baseline_log_cumhaz][k])

    def risk_at(self, x: np.ndarray, t: float) -> np.ndarray:
        """Probability of the outcome by ``t`` for covariate rows ``x``."""
        with np.errstate(over="ignore"):
            cumhaz = np.exp(self.log_cumhaz_at(t) + np.atleast_2d(x) @ self.coef)
        return -np.expm1(-cumhaz)


def _risk_set_sums(eta, x, order, last_of_time):
    """S0, S1, S2 over the risk set {T >= t} at each distinct time (rows sorted by descending time)."""
    w = np.exp(eta - eta.max())[order]
    xs = x[order]
    s0 = np.cumsum(w)[last_of_time]
    s1 = np.cumsum(w[:, None] * xs, axis=0)[last_of_time]
    s2 = np.cumsum(w[:, None, None] * xs[:, :, None] * xs[:, None, :], axis=0)[last_of_time]
    return s0, s1, s2, eta.max()


def fit_hazard(x: np.ndarray, time: np.ndarray, event: np.ndarray, *, max_iter: int = 50, tol: float = 1e-9) -> HazardFit:
    """Fit a Cox model by Newton–Raphson with step halving (Breslow's likelihood for tied times).

    Parameters
    ----------
    x
        Covariates, shape (n, p), time-fixed.
    time
        Follow-up time.
    event
        1 outcome, anything else censored.
    """
    x = np.asarray(x, dtype=float).reshape(len(time), -1)
    ev = np.asarray(event) == 1
    if not ev.any():
        raise MetricInputError("no outcome to fit the calibration model on")
    order = np.argsort(-time, kind="stable")
    t_sorted = time[order]
    uniq_desc, first = np.unique(-t_sorted, return_index=True)
    # last row (in descending order) holding each distinct time = risk-set boundary for that time
    last_of_time = np.r_[first[1:], t_sorted.size] - 1
    times = -uniq_desc
    d = np.bincount(np.searchsorted(uniq_desc, -time[ev]), minlength=times.size).astype(float)
    x_events = x[ev].sum(axis=0)
    has_d = d > 0

    def loglik_grad_hess(beta):
        eta = x @ beta
        with np.errstate(all="ignore"):  # a diverging step shows up as non-finite values, refused below
            s0, s1, s2, shift = _risk_set_sums(eta, x, order, last_of_time)
            s0, s1, s2, dd = s0[has_d], s1[has_d], s2[has_d], d[has_d]
            mean = s1 / s0[:, None]
            ll = eta[ev].sum() - np.sum(dd * (np.log(s0) + shift))
            grad = x_events - (dd[:, None] * mean).sum(axis=0)
            info = np.einsum("k,kij->ij", dd, s2 / s0[:, None, None] - mean[:, :, None] * mean[:, None, :])
        return ll, grad, info

    def acceptable(new_ll, new_grad, new_info, old_ll):
        finite = np.isfinite(new_ll) and np.isfinite(new_grad).all() and np.isfinite(new_info).all()
        return finite and new_ll >= old_ll - 1e-12

    beta = np.zeros(x.shape[1])
    ll, grad, info = loglik_grad_hess(beta)
    converged = False
    for _ in range(max_iter):
        try:
            step = np.linalg.solve(info, grad)
        except np.linalg.LinAlgError as exc:
            raise MetricInputError("the calibration model is singular (predicted risks nearly constant?)") from exc
        for _half in range(30):
            new_ll, new_grad, new_info = loglik_grad_hess(beta + step)
            if acceptable(new_ll, new_grad, new_info, ll):
                break
            step = step / 2
        else:
            # no finite improvement: the likelihood is monotone (separated data); keep the last estimate
            break
        beta = beta + step
        done = abs(new_ll - ll) < tol * (1 + abs(ll))
        ll, grad, info = new_ll, new_grad, new_info
        if done:
            converged = True
            break
    # Breslow baseline hazard on the scale exp(x beta), in logs: log S0 by a running log-sum-exp is exact
    # even when the risk sets' linear predictors differ by hundreds
    log_s0 = np.logaddexp.accumulate((x @ beta)[order])[last_of_time]
    log_jumps = (np.log(d[has_d]) - log_s0[has_d])[::-1]
    return HazardFit(
        coef=beta,
        var=np.linalg.pinv(info),
        baseline_times=times[has_d][::-1],
        baseline_log_cumhaz=np.logaddexp.accumulate(log_jumps),
        converged=converged,
    )
