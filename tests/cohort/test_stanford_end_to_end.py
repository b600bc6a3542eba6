"""Stanford heart transplant data rebuilt as raw dates and put through the cohort stage.

Source of the published values: the Stanford heart transplant data of Crowley & Hu (1977, J Am Stat Assoc
72:27-36) fitted with R's survival package (Therneau, ``coxph(Surv(start, stop, event) ~ age + year + surgery +
transplant, data = heart)``, Efron ties); its printed output: coef 0.0272, -0.1463, -0.6372, -0.0103; SE 0.0137,
0.0705, 0.3672, 0.3138; "Likelihood ratio test=15.1 on 4 df" (**from memory** of that R output).
The shipped rows (lifelines ``load_stanford_heart_transplants``) follow these conventions, which the raw
tables below undo and the cohort stage must reproduce:

- every time is shifted by +1 day: entry is set one day before acceptance;
- a transplant on the day follow-up ends is placed at stop - 0.5: its timestamp is noon of the day before;
- ``year`` = years (365.25 days) from 1967-10-01 to acceptance; ``age`` = age at acceptance minus 48 years.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from lifelines import CoxTimeVaryingFitter
from lifelines.datasets import load_stanford_heart_transplants

from riskbench.cohort import CohortSpec, RowState, VariableSpec, build_cohort

ORIGIN = pd.Timestamp("1967-10-01")
COVARIATES = ["age", "year", "surgery", "transplant"]
PUBLISHED_COEF = [0.0272, -0.1463, -0.6372, -0.0103]
PUBLISHED_SE = [0.0137, 0.0705, 0.3672, 0.3138]


def _raw_tables(shipped: pd.DataFrame) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    """One row per patient with dates, a dated transplant (0 at entry, 1 at transplant) and the end."""
    patients, meas, outcomes = [], [], []
    for pid, g in shipped.sort_values(["id", "start"]).groupby("id"):
        first, last = g.iloc[0], g.iloc[-1]
        accept = ORIGIN + pd.Timedelta(days=round(first.year * 365.25))
        birth = accept - pd.Timedelta(days=round((first.age + 48) * 365.25))
        entry = accept - pd.Timedelta(days=1)
        patients.append(
            {
                "patient_id": str(pid),
                "entry_date": entry,
                "acceptance_date": accept,
                "birth_date": birth,
                "surgery": int(first.surgery),
            }
        )
        meas.append({"patient_id": str(pid), "date": entry, "variable": "transplant", "value": 0.0})
        done = g[g.transplant == 1]
        if len(done):
            meas.append(
                {
                    "patient_id": str(pid),
                    "date": entry + pd.Timedelta(days=float(done.start.iloc[0])),
                    "variable": "transplant",
                    "value": 1.0,
                }
            )
        outcomes.append(
            {
                "patient_id": str(pid),
                "date": entry + pd.Timedelta(days=float(last.stop)),
                "kind": "outcome" if last.event else "end_of_follow_up",
            }
        )
    patients = pd.DataFrame(patients)
    # Static covariates of the shipped data, from the raw dates (conventions above).
    patients["year"] = (patients.acceptance_date - ORIGIN).dt.days / 365.25
    patients["age"] = (patients.acceptance_date - patients.birth_date).dt.days / 365.25 - 48
    return patients, pd.DataFrame(meas), pd.DataFrame(outcomes)


@pytest.fixture(scope="module")
def rebuilt() -> tuple[pd.DataFrame, pd.DataFrame]:
    shipped = load_stanford_heart_transplants()
    spec = CohortSpec(
        variables=(VariableSpec("transplant", unit="1", plausible_min=0, plausible_max=1),),
        max_carry_days=None,
        static=("age", "year", "surgery"),
        current_age=False,
    )
    cohort = build_cohort(*_raw_tables(shipped), spec)
    assert (cohort.ledger.state == RowState.USED).all()
    ours = cohort.counting_process.rename(columns={"status": "event"})
    return ours, shipped


def test_rebuilt_rows_equal_the_shipped_rows(rebuilt) -> None:
    ours, shipped = rebuilt
    assert len(ours) == 172 and ours.patient_id.nunique() == 103
    ours = ours.assign(id=ours.patient_id.astype(int)).sort_values(["id", "start"], ignore_index=True)
    shipped = shipped.sort_values(["id", "start"], ignore_index=True)
    for col in ["start", "stop", "event", "transplant", "surgery"]:
        np.testing.assert_array_equal(ours[col].to_numpy(float), shipped[col].to_numpy(float), err_msg=col)
    # year and age come back from whole-day dates to well within the data's own precision.
    np.testing.assert_allclose(ours[["year", "age"]].to_numpy(), shipped[["year", "age"]].to_numpy(), atol=2e-3)


def test_cox_on_rebuilt_rows_gives_published_fit(rebuilt) -> None:
    ours, _ = rebuilt
    ctv = CoxTimeVaryingFitter().fit(
        ours[["patient_id", "start", "stop", "event", *COVARIATES]],
        id_col="patient_id",
        start_col="start",
        stop_col="stop",
        event_col="event",
    )
    assert np.round(ctv.params_[COVARIATES].to_numpy(), 4).tolist() == PUBLISHED_COEF
    assert np.round(ctv.standard_errors_[COVARIATES].to_numpy(), 4).tolist() == PUBLISHED_SE
    assert round(ctv.log_likelihood_ratio_test().test_statistic, 1) == 15.1


def test_project_cox_engine_on_rebuilt_rows_gives_published_fit(rebuilt) -> None:
    from riskbench.models.cox_engine import fit_cox

    ours, _ = rebuilt
    fit = fit_cox(ours[COVARIATES], ours["stop"], ours["event"], ours["start"], ties="efron")
    assert np.round(fit.coef, 4).tolist() == PUBLISHED_COEF
    assert np.round(fit.se, 4).tolist() == PUBLISHED_SE
    assert round(fit.lr_test.statistic, 1) == 15.1


def test_project_cox_model_on_rebuilt_rows_gives_published_fit(rebuilt) -> None:
    from riskbench.models import CoxModel

    ours, _ = rebuilt
    model = CoxModel(COVARIATES, cluster=None).fit(ours.rename(columns={"event": "status"}))
    assert np.round(model.coef_, 4).tolist() == PUBLISHED_COEF
    assert np.round(model.se_, 4).tolist() == PUBLISHED_SE
    assert round(model.fit_.lr_test.statistic, 1) == 15.1
