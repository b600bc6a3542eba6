"""Bootstrap optimism checked against an independent Harrell–Lee–Mark loop written here.

Harrell FE, Lee KL, Mark DB (1996) Stat Med 15:361-387, section 5.3 (the bootstrap estimate of optimism): fit on
all patients and measure there (apparent); for each bootstrap resample of patients refit, measure the refit on
the resample and on the original patients, and average the difference (optimism); corrected = apparent −
optimism. The loop below uses only numpy (resampling), lifelines' ``CoxPHFitter`` (Efron ties, its default) and
scikit-survival's ``concordance_index_censored``; the patient draws are the ones riskbench documents for a
replicate (``SeedSequence(seed).spawn(n_boot)``, one generator per replicate, ``integers(0, n, n)`` over the
sorted patient ids), so both sides see the same resamples and must agree to rounding.

The model is deliberately over-fitted (80 patients, 10 pure-noise covariates beside one real one), so the
optimism is large and a wrong sign, a missing term or the apparent C passed as corrected cannot go unnoticed.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from lifelines import CoxPHFitter
from sksurv.metrics import concordance_index_censored

from riskbench.validation import ModelSpec, PrecomputedTables, bootstrap_optimism

HORIZON = 730.5
NOISE = [f"noise_{i}" for i in range(10)]
COVARIATES = ["signal", *NOISE]


def _overfit_stack(n: int = 80, seed: int = 2) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    x = rng.normal(size=(n, len(COVARIATES)))
    event_time = rng.exponential(600.0 * np.exp(-0.7 * x[:, 0]))
    censor_time = rng.uniform(100.0, 1500.0, size=n)
    time = np.minimum.reduce([event_time, censor_time, np.full(n, HORIZON)])
    status = ((event_time <= censor_time) & (event_time <= HORIZON)).astype(int)
    frame = pd.DataFrame(x, columns=COVARIATES)
    frame.insert(0, "status", status)
    frame.insert(0, "time", time)
    frame.insert(0, "landmark", 0.0)
    frame.insert(0, "patient_id", [f"p{i:03d}" for i in range(n)])
    return frame


def _harrell(rows: pd.DataFrame, risk: np.ndarray) -> float:
    """Harrell's C of "outcome by the horizon", scored just inside the horizon when nobody is followed beyond
    it (as riskbench's evaluation_time documents), with scikit-survival's implementation and its default tie
    tolerance (risks within 1e-8 tie; an over-fitted model has several risks within 1e-8 of 1)."""
    time = rows["time"].to_numpy()
    t_eval = HORIZON - 1e-6 if time.max() <= HORIZON else HORIZON
    event = (rows["status"].to_numpy() == 1) & (time <= t_eval)
    return concordance_index_censored(event, np.minimum(time, t_eval), risk)[0]


class _LifelinesCox:
    """lifelines' Cox fit (Efron ties, its default) and the risk by the horizon as the product-integral over its
    Breslow-type baseline increments dH₀ (at the covariate means): 1 − ∏_{t ≤ w} (1 − min(1, e^{(x − x̄)β} dH₀(t)))
    (Kalbfleisch & Prentice 2002, The Statistical Analysis of Failure Time Data, 2nd ed., section 4.3: the
    discrete-hazard survival estimate; riskbench's models predict this form)."""

    def __init__(self, rows: pd.DataFrame) -> None:
        data = rows[["time", *COVARIATES]].assign(event=(rows["status"] == 1).astype(int))
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            self.fitter = CoxPHFitter().fit(
                data, duration_col="time", event_col="event", fit_options={"precision": 1e-12, "r_precision": 1e-14}
            )

    def risk(self, rows: pd.DataFrame) -> np.ndarray:
        baseline = self.fitter.baseline_cumulative_hazard_.iloc[:, 0]
        cumulative = baseline[baseline.index <= HORIZON].to_numpy()
        increments = np.diff(cumulative, prepend=0.0)
        increments = increments[increments > 0]
        x = rows[COVARIATES].to_numpy() - self.fitter._norm_mean[COVARIATES].to_numpy()
        score = np.exp(x @ self.fitter.params_[COVARIATES].to_numpy())
        return 1.0 - np.prod(1.0 - np.minimum(1.0, np.outer(score, increments)), axis=1)


def _independent_optimism(stack: pd.DataFrame, n_boot: int, seed: int) -> tuple[float, float]:
    ids = np.sort(stack["patient_id"].unique())
    by_id = stack.set_index("patient_id")
    apparent = _harrell(stack, _LifelinesCox(stack).risk(stack))
    optimism = []
    for replicate_seed in np.random.SeedSequence(seed).spawn(n_boot):
        rng = np.random.default_rng(replicate_seed)
        drawn = ids[rng.integers(0, len(ids), size=len(ids))]
        boot = by_id.loc[drawn].reset_index()
        refit = _LifelinesCox(boot)
        optimism.append(_harrell(boot, refit.risk(boot)) - _harrell(stack, refit.risk(stack)))
    return apparent, float(np.mean(optimism))


@pytest.mark.parametrize("seed", [5, 11])
def test_optimism_of_an_overfitted_cox_matches_an_independent_loop(seed) -> None:
    stack = _overfit_stack()
    n_boot = 12
    spec = ModelSpec("overfitted", COVARIATES, params={"landmark_effects": "none"})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        table = bootstrap_optimism(spec, PrecomputedTables(stack), [HORIZON], n_boot=n_boot, seed=seed)
    row = table.set_index("metric").loc["harrell_c"]
    apparent, optimism = _independent_optimism(stack, n_boot, seed)
    assert row["n_boot"] == n_boot
    assert row["apparent"] == pytest.approx(apparent, abs=1e-10)
    assert row["optimism"] == pytest.approx(optimism, abs=1e-10)
    assert row["corrected"] == pytest.approx(apparent - optimism, abs=1e-10)
    # The design works: ten noise covariates on 80 patients give a clearly positive optimism.
    assert optimism > 0.03
