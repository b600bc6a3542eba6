"""Shipped survival datasets (inside scikit-survival, no download) with a simple score per dataset."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
import pytest
from sksurv import datasets


@dataclass(frozen=True)
class Shipped:
    name: str
    time: np.ndarray
    event: np.ndarray
    risk: np.ndarray
    horizons: np.ndarray


def _load(name: str) -> Shipped:
    if name == "whas500":
        x, y = datasets.load_whas500()
        t, e = y["lenfol"], y["fstat"]
        risk = x["age"].to_numpy() / 10 + x["hr"].to_numpy() / 50 + (x["chf"] == "1").to_numpy()
    elif name == "veterans":
        x, y = datasets.load_veterans_lung_cancer()
        t, e = y["Survival_in_days"], y["Status"]
        risk = -x["Karnofsky_score"].to_numpy()  # coarse score: many ties
    elif name == "gbsg2":
        x, y = datasets.load_gbsg2()
        t, e = y["time"], y["cens"]
        risk = x["pnodes"].to_numpy() / 5 + x["tsize"].to_numpy() / 30
    else:
        x, y = datasets.load_flchain()
        t, e = y["futime"], y["death"]
        risk = x["age"].to_numpy() / 10 + x["kappa"].to_numpy() + x["lambda"].to_numpy()
    t = np.asarray(t, dtype=float)
    e = np.asarray(e, dtype=bool)
    horizons = np.quantile(t[e], [0.2, 0.4, 0.6, 0.8])
    # rounded: sums of floats leave 1e-15 differences that scikit-survival calls ties and lifelines does not
    return Shipped(name, t, e, np.round(np.asarray(risk, dtype=float), 6), horizons)


@pytest.fixture(scope="session", params=["whas500", "veterans", "gbsg2", "flchain"])
def shipped(request) -> Shipped:
    return _load(request.param)


@pytest.fixture(scope="session")
def gbsg2_five_years():
    """GBSG2 with administrative censoring at 5 years (years = days / 365.25) and the predicted 5-year risk
    of the model validated by McLernon et al. (2023): returns (time, event, risk)."""
    x, y = datasets.load_gbsg2()
    t = y["time"] / 365.25
    e = np.where(t > 5, 0, y["cens"].astype(int))
    return np.minimum(t, 5.0), e, mclernon_risk(x)


@pytest.fixture(scope="session")
def gbsg2_nottingham():
    """GBSG2 (days) with Nottingham-group Kaplan–Meier survival at 1–5 years: (time, event, years, survival)."""
    x, y = datasets.load_gbsg2()
    t, e = np.asarray(y["time"], float), np.asarray(y["cens"], bool)
    years = np.array([365.0, 730.0, 1095.0, 1460.0, 1825.0])
    return t, e, years, nottingham_group_survival(x, t, e, years)


def mclernon_risk(x: pd.DataFrame) -> np.ndarray:
    """Predicted 5-year recurrence risk on GBSG2 from the model validated by McLernon et al. (2023).

    PI = 0.342·[20 < tsize ≤ 50] + 0.574·[tsize > 50] + 0.304·n − 0.811·rcs(n) + 0.362·[grade III],
    n = min(pnodes, 19), rcs with knots 0, 1, 9 (Harrell's normalisation); risk = 1 − 0.804^exp(PI).
    """
    n = np.minimum(x["pnodes"].to_numpy(float), 19)
    k1, k2, k3 = 0.0, 1.0, 9.0

    def cube(u):
        return np.maximum(u, 0.0) ** 3

    rcs = (cube(n - k1) - cube(n - k2) * (k3 - k1) / (k3 - k2) + cube(n - k3) * (k2 - k1) / (k3 - k2)) / (k3 - k1) ** 2
    size = x["tsize"].to_numpy(float)
    pi = (
        0.342 * ((size > 20) & (size <= 50))
        + 0.574 * (size > 50)
        + 0.304 * n
        - 0.811 * rcs
        + 0.362 * (x["tgrade"].astype(str) == "III").to_numpy()
    )
    return 1.0 - 0.804 ** np.exp(pi)


def nottingham_group_survival(x: pd.DataFrame, time: np.ndarray, event: np.ndarray, horizons) -> np.ndarray:
    """Kaplan–Meier survival within Nottingham Prognostic Index groups (the predictions in scikit-survival's
    Brier-score tests on GBSG2): NPI = 0.2·tsize/10 + 1 + grade, groups < 3.4, 3.4–5.4, > 5.4."""
    from sksurv.nonparametric import kaplan_meier_estimator

    grade = x["tgrade"].astype(str).map({"I": 1, "II": 2, "III": 3}).to_numpy()
    npi = 0.2 * x["tsize"].to_numpy(float) / 10 + 1 + grade
    group = np.where(npi < 3.4, 1, np.where(npi <= 5.4, 2, 3))
    out = np.empty((time.size, len(horizons)))
    for g in np.unique(group):
        idx = group == g
        ut, s = kaplan_meier_estimator(event[idx].astype(bool), time[idx])
        for j, h in enumerate(horizons):
            out[idx, j] = s[np.searchsorted(ut, h, side="right") - 1] if h >= ut[0] else 1.0
    return out
