"""Stand-ins for riskbench.metrics used by these tests ONLY while the metrics stage has not landed.

They wrap scikit-survival and lifelines; the library never imports this file. The fixture in conftest.py
installs a stand-in only for a name that riskbench.metrics does not (yet) define.
"""

from types import SimpleNamespace

import numpy as np
import pandas as pd
from sksurv.metrics import (
    brier_score as sk_brier,
    concordance_index_censored,
    concordance_index_ipcw,
    cumulative_dynamic_auc,
)
from sksurv.util import Surv

from riskbench.validation.reclassification import kaplan_meier_at


def _surv(time, event):
    return Surv.from_arrays(np.asarray(event).astype(bool), np.asarray(time, float))


def _km_risk(time, event, t):
    if len(time) == 0:
        return np.nan
    return 1 - kaplan_meier_at(np.asarray(time, float), np.asarray(event), t)


def concordance_harrell(time, event, risk, with_se=False):
    return SimpleNamespace(estimate=concordance_index_censored(np.asarray(event).astype(bool), np.asarray(time, float), risk)[0])


def concordance_uno(time, event, risk, tau, *, train_time=None, train_event=None, with_se=False):
    y = _surv(time, event)
    return SimpleNamespace(estimate=concordance_index_ipcw(y, y, risk, tau=tau)[0])


def auc_cumulative_dynamic(time, event, risk, horizons, *, train_time=None, train_event=None):
    y = _surv(time, event)
    auc, mean = cumulative_dynamic_auc(y, y, risk, horizons)
    return SimpleNamespace(table=pd.DataFrame({"horizon": horizons, "auc": auc}), integrated=mean)


def brier_score(time, event, risk, horizons, *, train_time=None, train_event=None):
    y = _surv(time, event)
    risk = np.asarray(risk, float).reshape(len(time), -1)
    _, b = sk_brier(y, y, 1 - risk, horizons)
    null = [
        sk_brier(y, y, np.full((len(time), 1), 1 - _km_risk(time, event, h)), [h])[1][0] for h in horizons
    ]
    return pd.DataFrame({"horizon": horizons, "brier": b, "brier_null": null, "scaled_brier": 1 - b / np.array(null)})


def calibration_at_horizon(time, event, risk, horizon, *, n_groups=10, n_boot=0, check_direction=False):
    risk = np.asarray(risk, float)
    event = (np.asarray(event) == 1).astype(int)
    groups = pd.qcut(risk, n_groups, labels=False, duplicates="drop")
    obs, pred, size = [], [], []
    for g in np.unique(groups):
        m = groups == g
        obs.append(_km_risk(time[m], event[m], horizon))
        pred.append(risk[m].mean())
        size.append(m.sum())
    obs, pred, size = map(np.asarray, (obs, pred, size))
    ici = float(np.sum(size * np.abs(obs - pred)) / size.sum())
    lo = np.log(np.clip(pred, 1e-6, 1 - 1e-6) / (1 - np.clip(pred, 1e-6, 1 - 1e-6)))
    lobs = np.log(np.clip(obs, 1e-4, 1 - 1e-4) / (1 - np.clip(obs, 1e-4, 1 - 1e-4)))
    slope = float(np.polyfit(lo, lobs, 1, w=np.sqrt(size))[0]) if len(lo) > 1 else np.nan
    return SimpleNamespace(ici=ici, slope=slope)


def net_benefit(time, event, risk, horizon, thresholds):
    time, event, risk = np.asarray(time, float), np.asarray(event), np.asarray(risk, float)
    rows = []
    for pt in thresholds:
        pos = risk >= pt
        frac = pos.mean()
        p_evt = _km_risk(time[pos], event[pos], horizon) if pos.any() else 0.0
        model = p_evt * frac - (1 - p_evt) * frac * pt / (1 - pt)
        p_all = _km_risk(time, event, horizon)
        rows.append((pt, model, p_all - (1 - p_all) * pt / (1 - pt), 0.0))
    return pd.DataFrame(rows, columns=["threshold", "model", "treat_all", "treat_none"])


NAMES = (
    "concordance_harrell",
    "concordance_uno",
    "auc_cumulative_dynamic",
    "brier_score",
    "calibration_at_horizon",
    "net_benefit",
)
