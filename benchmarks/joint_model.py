"""Benchmark: the joint model on the demo cohort (3,000 patients), its dynamic predictions against the
generator's true risk, side by side with the landmark super-model; a two-stage fit timed for context.

* Fit: ``JointModel`` with the log nodule volume as the marker (random intercept and slope), age at entry and
  pack-years in the outcome hazard, the current value and slope of the marker as the association, and a
  competing hazard of age sharing the marker value.
* Two-stage approach (context): the same linear mixed model, then a time-varying Cox model on the fitted
  marker trajectories (empirical Bayes random effects) at the counting-process interval starts.
* Predictions for every landmark row (default demo landmarks 0-3 years, horizon 2 years), compared with the
  oracle risk the generator knows (``riskbench.demo.oracle``) by Pearson and Spearman correlation, against
  the landmark super-model with the same information (log volume, its change, age, pack-years) and with all
  covariates (adding the suspicion score and the serum marker, which the one-marker joint model does not see).

Last line: ``joint model, demo cohort: ours <x> s, goal 180 s, ratio <180/x>``.

Usage: ``python benchmarks/joint_model.py [--patients 3000] [--seed 2026]``
"""

from __future__ import annotations

import argparse
import time

import numpy as np
import pandas as pd
from scipy.stats import pearsonr, spearmanr

from riskbench.cohort import build_cohort
from riskbench.demo import generate_cohort
from riskbench.demo.cohort_spec import demo_cohort_spec
from riskbench.models import CoxModel, LandmarkSupermodel
from riskbench.models.joint_inputs import measurements_from_counting_process, survival_from_counting_process
from riskbench.models.joint_model import JointModel
from riskbench.time_units import DAYS_PER_YEAR

MARKER = "log_nodule_volume"
EVENT = ["age_at_entry", "pack_years"]
SAME_INFORMATION = [MARKER, "log_nodule_volume_change", "age_at_entry", "pack_years"]
ALL_COVARIATES = SAME_INFORMATION + ["suspicion_score", "serum_marker"]


def _two_stage(counting: pd.DataFrame) -> float:
    """Seconds for the mixed model (statsmodels MixedLM, ML), then a time-varying Cox model on the fitted
    marker trajectories (fixed effects plus empirical Bayes random effects) at each interval's start."""
    import statsmodels.formula.api as smf

    started = time.perf_counter()
    measurements = measurements_from_counting_process(counting, MARKER)
    measurements["t"] = measurements["time"] / DAYS_PER_YEAR
    mixed = smf.mixedlm(f"{MARKER} ~ t", measurements, groups=measurements["patient_id"], re_formula="~t").fit(
        reml=False, method="lbfgs"
    )
    effects = pd.DataFrame(mixed.random_effects).T
    index = effects.index.get_indexer(counting["patient_id"])
    b0 = np.where(index >= 0, effects.iloc[:, 0].to_numpy()[index], 0.0)
    b1 = np.where(index >= 0, effects.iloc[:, 1].to_numpy()[index], 0.0)
    t = counting["start"].to_numpy() / DAYS_PER_YEAR
    fitted = mixed.fe_params["Intercept"] + b0 + (mixed.fe_params["t"] + b1) * t
    table = counting.assign(fitted_marker=fitted).dropna(subset=EVENT)
    CoxModel(["fitted_marker", *EVENT]).fit(table)
    return time.perf_counter() - started


def _correlations(label: str, risk: np.ndarray, truth: np.ndarray, landmark: np.ndarray) -> dict[str, float]:
    row = {"model": label, "pearson": pearsonr(risk, truth)[0], "spearman": spearmanr(risk, truth)[0]}
    for s in np.unique(landmark):
        at = landmark == s
        row[f"spearman_{s / DAYS_PER_YEAR:g}y"] = spearmanr(risk[at], truth[at])[0]
    return row


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--patients", type=int, default=3000)
    parser.add_argument("--seed", type=int, default=2026)
    args = parser.parse_args(argv)

    cohort_data = generate_cohort(args.patients, args.seed)
    truth = cohort_data.truth.true_risk
    horizon = float(truth["horizon"].iloc[0])
    landmarks = np.sort(truth["landmark"].unique())
    cohort = build_cohort(cohort_data.patients, cohort_data.measurements, cohort_data.outcomes, demo_cohort_spec())
    counting = cohort.counting_process
    stack = cohort.landmark_stack(list(landmarks), horizon)
    measurements = measurements_from_counting_process(counting, MARKER)
    survival = survival_from_counting_process(counting, EVENT)
    print(
        f"demo cohort: {len(survival)} patients, {len(measurements)} marker measurements "
        f"({len(measurements) / len(survival):.1f} per patient), {int((survival.status == 1).sum())} outcomes, "
        f"{int((survival.status == 2).sum())} competing deaths; {len(stack)} landmark rows",
        flush=True,
    )

    started = time.perf_counter()
    model = JointModel(
        MARKER, event_covariates=EVENT, competing_covariates=["age_at_entry"], association="value_slope"
    ).fit(measurements, survival)
    fit_seconds = time.perf_counter() - started
    steps = ", ".join(f"{k} {v:.1f} s" for k, v in model.fit_seconds_.items())
    print(
        f"joint model fit: {fit_seconds:.1f} s ({steps}); converged {model.converged_}; "
        f"max |gradient| {np.abs(model.gradient_).max():.2e}",
        flush=True,
    )
    with pd.option_context("display.width", 160, "display.max_colwidth", 70):
        print(model.summary().round(4).to_string(index=False), flush=True)

    print(
        f"two-stage approach (mixed model, then time-varying Cox on fitted trajectories): {_two_stage(counting):.1f} s",
        flush=True,
    )

    started = time.perf_counter()
    joint_risk = model.predict_risk(stack, horizon)
    predict_seconds = time.perf_counter() - started
    print(
        f"joint model predictions: {len(stack)} rows at {len(landmarks)} landmarks in {predict_seconds:.1f} s",
        flush=True,
    )
    keyed = stack[["patient_id", "landmark"]].merge(truth, on=["patient_id", "landmark"], how="left")
    true_risk = keyed["true_risk"].to_numpy()
    ok = np.isfinite(true_risk)
    rows = [
        _correlations(
            "joint model (log volume + age, pack-years)",
            joint_risk[ok],
            true_risk[ok],
            stack["landmark"].to_numpy()[ok],
        )
    ]
    for label, covariates in (
        ("landmark super-model, same information", SAME_INFORMATION),
        ("landmark super-model, all covariates", ALL_COVARIATES),
    ):
        complete = stack.dropna(subset=covariates)
        landmark_model = LandmarkSupermodel(covariates).fit(complete)
        risk = np.full(len(stack), np.nan)
        risk[complete.index] = landmark_model.predict_risk(complete, horizon)
        use = ok & np.isfinite(risk)
        rows.append(_correlations(label, risk[use], true_risk[use], stack["landmark"].to_numpy()[use]))
    with pd.option_context("display.width", 200):
        print(pd.DataFrame(rows).round(3).to_string(index=False), flush=True)
    print(f"joint model, demo cohort: ours {fit_seconds:.1f} s, goal 180 s, ratio {180 / fit_seconds:.2f}")


if __name__ == "__main__":
    main()
