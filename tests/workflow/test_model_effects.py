"""The models stage's effect outputs on a demo-generator cohort: hazard ratios per step (stated in ``per``),
interaction terms without hazard ratios, the β(s) figure and the landmark-form likelihood-ratio table.

Outside definitions as in tests/report/test_effects.py (exp(β·u) per step u) and
tests/validation/test_landmark_form.py (likelihood-ratio statistic against lifelines' log-likelihoods).
"""

from __future__ import annotations

import importlib.util
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

_SPEC = importlib.util.spec_from_file_location("analysis_builder", Path(__file__).with_name("analysis_builder.py"))
B = importlib.util.module_from_spec(_SPEC)
_SPEC.loader.exec_module(B)


@pytest.fixture(scope="module")
def run_dir(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("effects")
    B.write_data(folder, 300)
    models = [
        {"name": "clinical", "covariates": B.CLINICAL, "params": {"landmark_effects": "none"}},
        {"name": "imaging_clinical", "covariates": B.IMAGING},
    ]  # default: linear landmark effects
    config = B.write_config(
        folder, models=models, report={"effect_units": {"pack_years": 10, "suspicion_score": 0.1, "age_at_entry": "sd"}}
    )
    out = folder / "run"
    B.run_stages(config, out, ("cohort", "models"))
    return out


def test_hazard_ratios_per_step_state_the_step(run_dir):
    table = pd.read_csv(run_dir / "tables" / "hazard_ratios_imaging_clinical.csv").set_index("term")
    coefficients = pd.read_csv(run_dir / "tables" / "coefficients_imaging_clinical.csv").set_index("term")
    assert list(table.index) == B.IMAGING
    assert (
        table.loc["pack_years", "per"].startswith("10 ")
        and "set in the configuration" in table.loc["pack_years", "per"]
    )
    assert table.loc["sex_male", "per"] == "1 (present vs absent)"
    assert "standard deviation" in table.loc["age_at_entry", "per"]
    assert "interquartile range" in table.loc["serum_marker", "per"]
    beta = coefficients.loc["suspicion_score", "coef"]
    assert table.loc["suspicion_score", "hazard_ratio"] == pytest.approx(
        np.exp(0.1 * beta), rel=2e-5
    )  # the CSV keeps 6 digits
    assert table.loc["suspicion_score", "effect_at"].startswith("landmark 0")
    interactions = coefficients[coefficients.index.str.contains(":")]
    assert len(interactions) == len(B.IMAGING)  # linear: one x:s term per covariate
    assert interactions["hazard_ratio"].isna().all() and interactions["coef"].notna().all()
    constant = pd.read_csv(run_dir / "tables" / "hazard_ratios_clinical.csv")
    assert set(constant["effect_at"]) == {"every landmark"}


def test_landmark_effect_figure_and_form_tests(run_dir):
    assert (run_dir / "figures" / "landmark_effects.png").stat().st_size > 10_000
    assert (run_dir / "figures" / "hazard_ratios.png").is_file()
    forms = pd.read_csv(run_dir / "tables" / "landmark_effect_forms.csv")
    pairs = forms[["model", "smaller_form", "larger_form"]].values.tolist()
    assert pairs == [
        ["clinical", "none", "linear"],
        ["clinical", "none", "quadratic"],
        ["imaging_clinical", "linear", "quadratic"],
    ]
    assert (forms["df"] == [len(B.CLINICAL), 2 * len(B.CLINICAL), len(B.IMAGING)]).all()
    # The likelihood-ratio test's definition (Wilks 1938, Ann Math Stat 9:60-62): p is the chi-squared tail of the
    # statistic on the added terms (the CSV keeps 6 significant digits).
    from scipy.stats import chi2

    assert (forms["lr_statistic"] >= 0).all()
    np.testing.assert_allclose(forms["p_value"], chi2.sf(forms["lr_statistic"], forms["df"]), rtol=1e-4, atol=1e-12)
    notes = B.notes_of(run_dir)
    assert (
        not notes["part"].isin(["β(s) figure", "hazard ratios per step", "landmark-effect likelihood-ratio test"]).any()
    )


def test_beta_bands_of_multiple_imputation_fits_are_pooled_by_rubins_rules(run_dir):
    """Rubin (1987), **from memory**: the pooled estimate is the mean over imputations and the total variance
    the mean within-imputation variance plus (1 + 1/m) times the between-imputation variance."""
    from types import SimpleNamespace

    from riskbench.models.landmark import LandmarkSupermodel
    from riskbench.workflow.model_effects import effect_bands

    stack = pd.read_parquet(run_dir / "data" / "landmark_stack.parquet")
    stack = stack.dropna(subset=["age_at_entry", "pack_years"])
    fits = [
        LandmarkSupermodel(["age_at_entry", "pack_years"], competing=False).fit(stack.sample(frac=0.9, random_state=k))
        for k in range(3)
    ]
    fits = [f for f in fits if np.array_equal(f.landmarks_, fits[0].landmarks_)]
    pooled = effect_bands(SimpleNamespace(models_=fits))
    single = [f.landmark_effect_bands(pooled["landmark_days"].unique()) for f in fits]
    coef = np.stack([b["coef"].to_numpy() for b in single])
    var = np.stack([b["se"].to_numpy() ** 2 for b in single])
    m = len(fits)
    np.testing.assert_allclose(pooled["coef"], coef.mean(axis=0), rtol=1e-12)
    np.testing.assert_allclose(pooled["se"] ** 2, var.mean(axis=0) + (1 + 1 / m) * coef.var(axis=0, ddof=1), rtol=1e-10)
    assert (pooled["lower"] < pooled["coef"]).all() and (pooled["coef"] < pooled["upper"]).all()
