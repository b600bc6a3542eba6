"""The joint model's sheet: its worked example recomputed here from the numbers the sheet prints.

The recomputation is written from the published equations, not with riskbench's functions: the empirical-Bayes
random effects of a linear mixed model, b̂ = Σ Zᵀ(y − Xβ)/σ² with Σ = (D⁻¹ + ZᵀZ/σ²)⁻¹ (Laird & Ware 1982,
Biometrics 38:963-974; Rizopoulos 2012, *Joint Models for Longitudinal and Time-to-Event Data*, section 2.2),
the natural cubic spline basis of Hastie, Tibshirani & Friedman (2009, eqs. 5.4-5.5), and the cumulative
incidence as the product-integral of cause-specific hazards constant over each step (Aalen & Johansen 1978;
Kalbfleisch & Prentice 2002, section 8.2) on the steps the sheet prints. The sheet's "risk given b = b̂" is the
library's number (it is computed by the prediction code); agreement to 1e-10 checks the sheet's parameters and
the library against each other.
"""

from __future__ import annotations

import numpy as np
import pytest

from riskbench.report.model_sheet import read_sheet_table
from riskbench.workflow.model_bundle import load_model, save_run_model

DAYS = 365.25  # days per year, the library's convention (docs: DEVELOPERS.md, shared conventions)


@pytest.fixture(scope="module")
def demo():
    from riskbench.cohort import build_cohort
    from riskbench.demo import generate_cohort
    from riskbench.demo.cohort_spec import demo_cohort_spec

    data = generate_cohort(300, 3, n_risk_paths=0)
    spec = demo_cohort_spec()
    return spec, build_cohort(data.patients, data.measurements, data.outcomes, spec).counting_process


@pytest.fixture(
    scope="module",
    params=[{}, {"time_knots": 2, "association": "value_slope", "competing": False}],
    ids=["line_value_competing", "spline_value_slope_alone"],
)
def sheet(request, demo, tmp_path_factory) -> str:
    from riskbench.models.joint_family import SharedTrajectoryModel

    spec, cp = demo
    settings = {"prediction_draws": 25, "baseline_pieces": 3, "hermite_points": 3, **request.param}
    model = SharedTrajectoryModel(["log_nodule_volume", "age_at_entry", "sex_male"], **settings).fit(cp)
    bundle = save_run_model(
        tmp_path_factory.mktemp("sheet"),
        "joint",
        "shared_trajectory_joint",
        model,
        cohort_rules=spec,
        development=cp,
        landmarks_days=[0.0, 365.25, 730.5],
        prediction_window_days=730.5,
        horizons_days=[365.25, 730.5],
    )
    return load_model(bundle).bundle_path.with_suffix("").with_suffix(".md").read_text()


def _numbers(text: str, what: str, column: int) -> list[float]:
    return [float("inf") if row[column] == "∞" else float(row[column]) for row in read_sheet_table(text, what)]


def _by_key(text: str, what: str, key: int = 0, value: int = 1) -> dict[str, str]:
    return {row[key].replace("\\", ""): row[value] for row in read_sheet_table(text, what)}


def _spline(t: np.ndarray, knots: list[float]) -> tuple[np.ndarray, np.ndarray]:
    """Natural cubic spline basis N1..N(K-1) and its derivative (Hastie, Tibshirani & Friedman 2009, 5.4-5.5)."""
    xi = np.asarray(knots)
    last = xi[-1]

    def d(power: int, scale: float) -> np.ndarray:
        return np.stack(
            [
                scale * (np.clip(t - k, 0, None) ** power - np.clip(t - last, 0, None) ** power) / (last - k)
                for k in xi[:-1]
            ],
            axis=-1,
        )

    cubic, square = d(3, 1.0), d(2, 3.0)
    values = np.column_stack([t, cubic[:, :-1] - cubic[:, -1:]])
    slopes = np.column_stack([np.ones_like(t), square[:, :-1] - square[:, -1:]])
    return values, slopes


def test_the_worked_example_recomputes_from_the_printed_numbers(sheet: str) -> None:
    fixed = read_sheet_table(sheet, "marker fixed effects")
    beta = np.array([float(r[2]) for r in fixed])
    variance = _by_key(sheet, "marker variance", key=1, value=2)
    sigma = float(variance["σ"])
    d = np.array([[float(variance["D11"]), float(variance["D21"])], [float(variance["D21"]), float(variance["D22"])]])
    patient = {k: float(v) for k, v in _by_key(sheet, "example patient").items()}
    s, w = patient.pop("landmark (days)") / DAYS, patient.pop("horizon (days)") / DAYS
    covariate_rows = [r for r in fixed if r[4] != ""]
    x = np.array([patient[r[0].replace("\\", "")] - float(r[4]) for r in covariate_rows])
    knots = _numbers(sheet, "marker time knots", 1) if "<!-- table: marker time knots -->" in sheet else []

    def basis(t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        if not knots:
            return t[:, None], np.ones((len(t), 1))
        return _spline(t, knots)

    def fixed_part(t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        f, df = basis(t)
        design = np.column_stack([np.ones_like(t), f, np.tile(x, (len(t), 1))])
        slope = np.column_stack([np.zeros_like(t), df, np.zeros((len(t), len(x)))])
        return design @ beta, slope @ beta

    # step 1: empirical-Bayes random effects of the mixed model
    measured = read_sheet_table(sheet, "example measurements")
    tj = np.array([float(r[1]) for r in measured])
    y = np.array([float(r[2]) for r in measured])
    z = np.column_stack([np.ones_like(tj), tj])
    cov = np.linalg.inv(np.linalg.inv(d) + z.T @ z / sigma**2)
    b = cov @ z.T @ (y - fixed_part(tj)[0]) / sigma**2
    printed = {k: float(v) for k, v in _by_key(sheet, "example random effects").items()}
    np.testing.assert_allclose([printed["b̂0"], printed["b̂1"]], b, rtol=0, atol=1e-10)
    np.testing.assert_allclose([printed["Σ11"], printed["Σ21"], printed["Σ22"]], cov[[0, 1, 1], [0, 0, 1]], atol=1e-12)

    # step 3: product-integral of the cause-specific hazards with b = b̂ over the printed steps, which must tile
    # (s, s + w], be at most 1/grid_steps year long and keep each baseline hazard constant (the sheet's rule)
    per_year = int(_by_key(sheet, "prediction settings")["grid_steps (steps per year of the product-integral)"])
    printed_steps = read_sheet_table(sheet, "example steps")
    edges = np.array([float(r[0]) for r in printed_steps] + [float(printed_steps[-1][1])]) / DAYS
    np.testing.assert_allclose([float(r[1]) for r in printed_steps[:-1]], [float(r[0]) for r in printed_steps[1:]])
    assert edges[0] == pytest.approx(s, abs=1e-12) and edges[-1] == pytest.approx(s + w, abs=1e-12)
    width = np.diff(edges)
    assert np.all(width > 0) and width.max() <= 1 / per_year + 1e-12
    t = 0.5 * (edges[1:] + edges[:-1])
    mean, slope = fixed_part(t)
    marker = {"value": mean + b[0] + b[1] * t, "slope": slope + b[1]}
    increments = []
    for cause in ("outcome", "competing"):
        if f"<!-- table: baseline hazard {cause} -->" not in sheet:
            continue
        low = np.array(_numbers(sheet, f"baseline hazard {cause}", 3))
        high = np.array(_numbers(sheet, f"baseline hazard {cause}", 4))
        log_rate = np.array(_numbers(sheet, f"baseline hazard {cause}", 5))
        piece = [int(np.flatnonzero((low < ti) & (ti <= high))[0]) for ti in t]  # pieces cover (from, to]
        eta = log_rate[piece].copy()
        for row in read_sheet_table(sheet, f"hazard coefficients {cause}"):
            term, estimate = row[0].replace("\\", ""), float(row[2])
            if term.startswith("association_"):
                eta += estimate * marker[term.removeprefix("association_")]
            else:
                eta += estimate * (patient[term] - float(row[4]))
        inside = (low > s) & (low < s + w)  # knots inside the window are step edges
        assert np.all(np.min(np.abs(low[inside][:, None] - edges[None, :]), axis=1) < 1e-9)
        increments.append(np.exp(eta) * width)
    # hazards constant over each step: S falls by exp(-dA), F1 gains S dA1/dA (1 - exp(-dA)) (piecewise
    # exponential competing risks; Kalbfleisch & Prentice 2002, The Statistical Analysis of Failure Time Data, 8.2)
    total = sum(increments)
    survival_before = np.concatenate([[1.0], np.cumprod(np.exp(-total))[:-1]])
    risk = float(np.sum(survival_before * increments[0] / total * (1.0 - np.exp(-total))))
    risks = _by_key(sheet, "example risks")
    library = float(next(v for k, v in risks.items() if k.startswith("risk given b = b̂")))
    assert risk == pytest.approx(library, abs=1e-10)
    assert float(read_sheet_table(sheet, "example steps")[-1][-1]) == pytest.approx(risk, abs=1e-10)
    assert 0.001 < risk < 0.9  # a real risk, so the comparison can fail
    model_risk = float(next(v for k, v in risks.items() if k.startswith("risk of the model")))
    assert 0 < model_risk < 1 and model_risk != library


def test_the_sheet_gives_every_estimate_the_rules_and_says_why_a_hand_computation_is_not_enough(sheet: str) -> None:
    assert "Research software, not a medical device" in sheet
    assert "## Cohort rules that build the covariates" in sheet
    assert "this is not a hand computation" in sheet and "Rizopoulos 2011" in sheet
    variance = _by_key(sheet, "marker variance", key=1, value=2)
    assert {"σ", "sd_b0", "sd_b1", "corr_b0_b1", "D11", "D21", "D22"} <= set(variance)
    sd0, sd1, rho = (float(variance[k]) for k in ("sd_b0", "sd_b1", "corr_b0_b1"))
    assert float(variance["D21"]) == pytest.approx(rho * sd0 * sd1, rel=1e-9)
    hazards = read_sheet_table(sheet, "baseline hazard outcome")
    assert float(hazards[0][1]) == 0.0 and hazards[-1][2] == "∞"
    for row in hazards:  # days and years columns agree, rate = exp(log rate)
        assert float(row[1]) == pytest.approx(float(row[3]) * DAYS, rel=1e-12)
        assert float(row[6]) == pytest.approx(np.exp(float(row[5])), rel=1e-12)
    assert any(r[0].startswith("association") for r in read_sheet_table(sheet, "hazard coefficients outcome"))
