"""The joint model's part of the model sheet: both submodels with every estimate, how a risk is computed, and a
worked example a reader can repeat.

A joint model's risk is not a formula of the covariates: it integrates the cumulative incidence over the
posterior of the patient's random effects given the measurements and survival to the landmark (Rizopoulos 2011,
Biometrics 67:819-829), which riskbench does by Monte Carlo (:mod:`riskbench.models.joint_prediction`). The
worked example therefore computes, for an invented patient with invented measurements, the two steps that are
hand computations: the empirical-Bayes random effects (posterior mean given the measurements, closed form) and
the risk conditional on them (the product-integral of the cause-specific hazards over the prediction window, one
row per step); beside it stands the model's risk as riskbench computes it.

Every number is printed at ``repr`` precision; tables a program may read back are tagged
``<!-- table: ... -->`` (:func:`riskbench.report.model_sheet.read_sheet_table`).
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from riskbench.models.joint_data import History, fixed_design, marker_sums
from riskbench.models.joint_family import SharedTrajectoryModel
from riskbench.models.joint_likelihood import marker_posterior
from riskbench.models.joint_prediction import PredictionRows, risk_given_draws
from riskbench.models.joint_quadrature import piece_index
from riskbench.models.joint_structure import JointStructure
from riskbench.models.joint_window import step_edges, step_factors
from riskbench.report.markdown_text import md_table, md_text
from riskbench.report.sheet_text import example_patient_table, full_number, table_tag
from riskbench.time_units import DAYS_PER_YEAR

__all__ = ["CAUSES", "example_measurements", "joint_sections"]

#: Cause labels in the order of the model's hazards.
CAUSES = ("outcome", "competing")
_TERM_TEXT = {"value": "current true marker value m(t)", "slope": "current true marker slope m′(t), per year"}


def _se(part: SharedTrajectoryModel) -> np.ndarray:
    return np.sqrt(np.clip(np.diag(part.model_.covariance_), 0.0, None))


def _marker_section(part: SharedTrajectoryModel, labels: dict[str, str]) -> list[str]:
    jm = part.model_
    s = jm.structure_
    theta, se = jm.theta_, _se(part)
    basis = s.basis
    time_terms = (
        "β_time·t" if not basis.knots else " + ".join(f"β_spline{j + 1}·N{j + 1}(t)" for j in range(basis.n_columns))
    )
    lines = [
        "### The marker submodel (linear mixed model)",
        "",
        f"The marker `{md_text(jm.marker)}` measured at time t (years since entry) is y(t) = m(t) + ε with "
        "ε ~ Normal(0, σ²), and its true value is",
        "",
        f"m(t) = β₀ + {time_terms} + Σ βx·(x − x̄) + b₀ + b₁·t",
        "",
        "where x are the baseline covariates below (x̄ their development means) and (b₀, b₁) the patient's "
        "random intercept and slope, Normal(0, D) across patients.",
        "",
    ]
    if basis.knots:
        lines += [
            "Time enters as a natural cubic spline with the knots ξ1 < ... < ξK below, years (Hastie, Tibshirani & "
            "Friedman 2009, eqs. 5.4-5.5): N1(t) = t and N(k+1)(t) = dk(t) − d(K−1)(t) for k = 1..K−2, with "
            "dk(t) = ((t − ξk)₊³ − (t − ξK)₊³) / (ξK − ξk); its slope uses dk′(t) = 3((t − ξk)₊² − (t − ξK)₊²) / "
            "(ξK − ξk).",
            "",
            table_tag("marker time knots"),
            *md_table(["knot", "years"], [[str(k + 1), full_number(v)] for k, v in enumerate(basis.knots)]),
            "",
        ]
    time_meaning = (
        ["time since entry t (years)"] if not basis.knots else [f"N{j + 1}(t)" for j in range(basis.n_columns)]
    )
    names = ["intercept β₀ (at the covariate means)", *time_meaning]
    names += [md_text(labels.get(c, c)) for c in s.marker_covariates]
    terms = ["(intercept)", *basis.names(), *s.marker_covariates]
    centring = ["", *([""] * basis.n_columns), *(full_number(m) for m in s.marker_means)]
    rows = [
        [md_text(t), n, full_number(theta[k]), full_number(se[k]), c]
        for k, (t, n, c) in enumerate(zip(terms, names, centring))
    ]
    lines += [table_tag("marker fixed effects")]
    lines += md_table(["term", "meaning", "estimate β", "standard error", "centring value x̄"], rows)
    _, sigma, chol = s.layout.marker_parts(theta)
    d = chol @ chol.T
    components = {n: (v, e) for n, v, e in zip(*_variance_rows(part))}
    lines += ["", "Residual and random effects (D = L·Lᵀ, estimated through its Cholesky factor L):", ""]
    lines += [table_tag("marker variance")]
    lines += md_table(
        ["quantity", "symbol", "estimate", "standard error"],
        [
            ["residual SD", "σ", full_number(sigma), components["marker: residual SD"][1]],
            ["random-intercept SD", "sd_b0", *components["marker: random-intercept SD"]],
            ["random-slope SD, per year", "sd_b1", *components["marker: random-slope SD per year"]],
            [
                "random intercept-slope correlation",
                "corr_b0_b1",
                *components["marker: random intercept-slope correlation"],
            ],
            ["var(b₀)", "D11", full_number(d[0, 0]), ""],
            ["cov(b₀, b₁)", "D21", full_number(d[1, 0]), ""],
            ["var(b₁)", "D22", full_number(d[1, 1]), ""],
        ],
    )
    return lines + [""]


def _variance_rows(part: SharedTrajectoryModel) -> tuple[list[str], list[str], list[str]]:
    """Names, estimates and delta-method standard errors of σ, the random-effects SDs and their correlation."""
    table = part.model_.summary()
    derived = table[
        table["parameter"].isin(
            [
                "marker: residual SD",
                "marker: random-intercept SD",
                "marker: random-slope SD per year",
                "marker: random intercept-slope correlation",
            ]
        )
    ]
    return (
        list(derived["parameter"]),
        [full_number(v) for v in derived["estimate"]],
        [full_number(v) for v in derived["std_error"]],
    )


def _hazard_section(part: SharedTrajectoryModel, labels: dict[str, str]) -> list[str]:
    jm = part.model_
    s = jm.structure_
    theta, se = jm.theta_, _se(part)
    n_causes = len(s.cause_terms)
    lines = [
        "### The hazard submodels (proportional hazards, piecewise-constant baseline)",
        "",
        "For cause c (" + (" and ".join(CAUSES[:n_causes])) + ") the hazard at time t (years since entry) is",
        "",
        "h_c(t) = h_c,k(t) · exp(Σ γc·(w − w̄) + Σ αc·(marker term at t))",
        "",
        "with h_c,k the baseline hazard rate (per year) of the piece k holding t (a piece covers (from, to]; "
        "the last is open), w the baseline covariates (w̄ their development means) and the marker terms the "
        "current true value m(t) or slope m′(t) = β_time·(dN/dt) + b₁ of the marker submodel above.",
        "",
    ]
    if n_causes == 1:
        lines += ["No competing-event hazard was fitted: competing events count as censoring, the risk is 1 − S.", ""]
    upper = [*s.knots[1:].tolist(), np.inf]
    for c in range(n_causes):
        cause = CAUSES[c]
        sl_h, sl_g, sl_a = s.layout.cause_slices(c)
        rows = []
        for k, (lo, hi) in enumerate(zip(s.knots.tolist(), upper)):
            j = sl_h.start + k
            rows.append(
                [
                    str(k + 1),
                    full_number(lo * DAYS_PER_YEAR),
                    "∞" if not np.isfinite(hi) else full_number(hi * DAYS_PER_YEAR),
                    full_number(lo),
                    "∞" if not np.isfinite(hi) else full_number(hi),
                    full_number(theta[j]),
                    full_number(np.exp(theta[j])),
                    full_number(se[j]),
                ]
            )
        lines += [f"Baseline hazard of the {cause}:", "", table_tag(f"baseline hazard {cause}")]
        lines += md_table(
            [
                "piece",
                "from (days)",
                "to (days)",
                "from (years)",
                "to (years)",
                "log rate",
                "rate per year",
                "standard error of the log rate",
            ],
            rows,
        )
        coefficients = [
            [md_text(name), md_text(labels.get(name, name)), full_number(theta[j]), full_number(se[j]), full_number(m)]
            for name, j, m in zip(s.cause_covariates[c], range(sl_g.start, sl_g.stop), s.cause_means[c])
        ]
        coefficients += [
            [f"association_{term}", _TERM_TEXT[term], full_number(theta[j]), full_number(se[j]), ""]
            for term, j in zip(s.cause_terms[c], range(sl_a.start, sl_a.stop))
        ]
        lines += ["", f"Coefficients of the {cause} hazard (γ, and α for the marker terms):", ""]
        lines += [table_tag(f"hazard coefficients {cause}")]
        lines += md_table(["term", "meaning", "estimate", "standard error", "centring value w̄"], coefficients)
        lines.append("")
    return lines


def _settings(part: SharedTrajectoryModel) -> list[str]:
    jm = part.model_
    rows = [
        ["association", md_text(jm.association)],
        ["prediction_draws (Monte Carlo draws K per row)", str(jm.prediction_draws)],
        ["grid_steps (steps per year of the product-integral)", str(jm.grid_steps)],
        ["random_state (seed of the draws)", str(jm.random_state)],
        ["legendre_points (Gauss–Legendre points per piece, cumulative hazards)", str(jm.legendre_points)],
        ["hermite_points (Gauss–Hermite points per random effect, fitting)", str(jm.hermite_points)],
        ["converged", str(bool(jm.converged_))],
        ["log-likelihood", full_number(jm.loglik_)],
    ]
    return ["Settings:", "", table_tag("prediction settings"), *md_table(["setting", "value"], rows), ""]


def _how(part: SharedTrajectoryModel) -> list[str]:
    jm = part.model_
    return [
        "## How to compute a risk",
        "",
        "The risk of the outcome in (s, s + w] for a patient still under surveillance at landmark s, with marker "
        "measurements y(s) taken up to s, is an integral over the patient's unknown random effects b (Rizopoulos "
        "2011, Biometrics 67:819-829):",
        "",
        "risk = ∫ F₁(s, s + w | b) · p(b | T > s, y(s)) db",
        "",
        "where F₁(s, s + w | b) is the cumulative incidence of the outcome given b and survival to s. The "
        "posterior p(b | T > s, y(s)) has no closed form, so **this is not a hand computation**. riskbench:",
        "",
        "1. computes the posterior of b given the measurements alone, Normal(b̂, Σ) with "
        "Σ = (D⁻¹ + ZᵀZ/σ²)⁻¹ and b̂ = Σ·Zᵀ(y − Xβ)/σ² (Z has rows (1, tj), X the fixed part's terms at each "
        "measurement time tj, years) -- the empirical-Bayes estimate b̂ of the mixed model;",
        f"2. draws K = {jm.prediction_draws} values of b from Normal(b̂, Σ) (seed {jm.random_state} with the "
        "row's landmark, covariates and measurements: each row has its own random stream, so its draws do not "
        "depend on the rows predicted with it) and weights each by its "
        "survival to s, exp(−H₁(s | b) − H₂(s | b)) (cumulative hazards by Gauss–Legendre quadrature on each "
        "piece), normalised to sum to 1 -- importance sampling of the posterior given survival too;",
        f"3. for each draw computes F₁ by the product-integral over steps from s to s + w that end at every "
        f"1/{jm.grid_steps} year since entry and at the baseline hazard's knots (the same steps whatever else is "
        "predicted in the same call): the hazards are taken at each step's midpoint, dAc = hc(midpoint) · width "
        "(years), dA = dA₁ + dA₂, S after a step = S before · exp(−dA), F₁ after = F₁ before + S before · "
        "dA₁ / dA · (1 − exp(−dA)) (exact for hazards constant over the step);",
        "4. averages F₁ over the draws with their weights.",
        "",
        "The worked example repeats steps 1 and 3 with b fixed at b̂: the risk *conditional on the "
        "empirical-Bayes random effects*, which a reader can recompute with a spreadsheet. It is not the "
        "model's risk, which averages over the posterior and accounts for having survived to s; both are shown.",
        "",
    ]


def example_measurements(part: SharedTrajectoryModel, first: float, landmark: float) -> pd.DataFrame:
    """Invented marker measurements of the worked example: at entry, half-way to the landmark and at the
    landmark (days), the value growing from ``first`` by a round step (a tenth of |first|, at least 0.1)."""
    times = [0.0] if landmark <= 0 else [0.0, landmark / 2, landmark]
    step = float(f"{max(abs(first) / 10, 0.1):.1g}")
    return pd.DataFrame(
        {
            "patient_id": "example",
            "time": times,
            part.model_.marker: [first + k * step for k in range(len(times))],
        }
    )


def _example_rows(
    part: SharedTrajectoryModel, baseline: dict[str, float], landmark: float, history: History
) -> PredictionRows:
    s = part.model_.structure_
    marker_x = np.array([[baseline[c] for c in s.marker_covariates]], dtype=float).reshape(1, -1) - s.marker_means
    cause_x = tuple(
        np.array([[baseline[c] for c in cs]], dtype=float).reshape(1, -1) - m
        for cs, m in zip(s.cause_covariates, s.cause_means)
    )
    return PredictionRows(np.array([landmark / DAYS_PER_YEAR]), history, marker_x, cause_x)


def _steps(
    s: JointStructure, theta: np.ndarray, rows: PredictionRows, b: np.ndarray, horizon_years: float, steps: int
) -> pd.DataFrame:
    """The product-integral of step 3 with b fixed, one row per step (what the sheet prints)."""
    edges = step_edges(rows.landmark[0], horizon_years, s.knots, steps)  # years since entry
    t, width = 0.5 * (edges[1:] + edges[:-1]), np.diff(edges)
    design, slope = fixed_design(s.basis, t, np.broadcast_to(rows.marker_x[0], (len(t), rows.marker_x.shape[1])))
    beta = theta[: s.layout.n_fixed]
    marker = {"value": design @ beta + b[0] + b[1] * t, "slope": slope @ beta + b[1]}
    out = pd.DataFrame({"from_days": edges[:-1] * DAYS_PER_YEAR, "to_days": edges[1:] * DAYS_PER_YEAR, "t_years": t})
    out["m"] = marker["value"]
    if any("slope" in terms for terms in s.cause_terms):
        out["m_slope"] = marker["slope"]
    out["piece"] = piece_index(s.knots, t) + 1
    increments = []
    for c, terms in enumerate(s.cause_terms):
        sl_h, sl_g, sl_a = s.layout.cause_slices(c)
        log_h = theta[sl_h][out["piece"].to_numpy() - 1] + float(rows.cause_x[c][0] @ theta[sl_g])
        for a, term in zip(theta[sl_a], terms):
            log_h = log_h + a * marker[term]
        out[f"h{c + 1}"] = np.exp(log_h)
        increments.append(out[f"h{c + 1}"].to_numpy() * width)
        out[f"dA{c + 1}"] = increments[-1]
    gain, factor = step_factors(increments)
    out["S_before"] = np.concatenate([[1.0], np.cumprod(factor)[:-1]])
    out["F1_after"] = np.cumsum(out["S_before"].to_numpy() * gain)
    return out


def _example(
    saved: Any, part: SharedTrajectoryModel, values: dict[str, float], s_days: float, w_days: float
) -> tuple[dict[str, float], pd.DataFrame, np.ndarray, np.ndarray, float, float, pd.DataFrame]:
    jm = part.model_
    st = jm.structure_
    theta = jm.theta_
    marker = jm.marker
    baseline = {c: values[c] for c in saved.covariates if c != marker}
    measured = example_measurements(part, values[marker], s_days)
    history = History(
        np.zeros(len(measured), dtype=int),
        measured["time"].to_numpy(float) / DAYS_PER_YEAR,
        measured[marker].to_numpy(float),
    )
    rows = _example_rows(part, baseline, s_days, history)
    fixed, _ = fixed_design(st.basis, history.time, rows.marker_x[history.patient])
    beta, sigma, chol = st.layout.marker_parts(theta)
    mean, cov = marker_posterior(marker_sums(history, fixed, 1), beta, sigma, chol)
    conditional = float(
        risk_given_draws(
            st, theta, rows, mean[:, None, :], np.ones((1, 1)), np.array([w_days / DAYS_PER_YEAR]), jm.grid_steps
        )[0, 0]
    )
    row = pd.DataFrame([{**baseline, marker: values[marker], "patient_id": "example", "landmark": s_days}])
    full = float(part.with_history(measured).predict_risk(row, w_days)[0])
    steps = _steps(st, theta, rows, mean[0], w_days / DAYS_PER_YEAR, jm.grid_steps)
    return baseline, measured, mean[0], cov[0], conditional, full, steps


def _worked_example(saved: Any, part: SharedTrajectoryModel, values: dict[str, float], s: float, w: float) -> list[str]:
    baseline, measured, b, cov, conditional, full, steps = _example(saved, part, values, s, w)
    marker = part.model_.marker
    lines = [
        "## Worked example (an invented patient)",
        "",
        "An invented patient, not a patient of the development cohort, with these baseline covariates:",
        "",
        *example_patient_table(baseline, s, w),
    ]
    lines += ["", f"and these invented measurements of `{md_text(marker)}`:", "", table_tag("example measurements")]
    lines += md_table(
        ["time (days)", "time (years)", "value"],
        [
            [full_number(t), full_number(t / DAYS_PER_YEAR), full_number(v)]
            for t, v in zip(measured["time"], measured[marker])
        ],
    )
    lines += [
        "",
        "**Step 1.** The empirical-Bayes random effects (posterior mean and covariance given the measurements, "
        "with β, σ and D from the tables above):",
        "",
        table_tag("example random effects"),
    ]
    lines += md_table(
        ["symbol", "value"],
        [
            ["b̂0", full_number(b[0])],
            ["b̂1", full_number(b[1])],
            ["Σ11", full_number(cov[0, 0])],
            ["Σ21", full_number(cov[1, 0])],
            ["Σ22", full_number(cov[1, 1])],
        ],
    )
    header = ["from (days after entry)", "to (days after entry)", "midpoint t (years)", "m(t)"]
    columns = ["from_days", "to_days", "t_years", "m"]
    if "m_slope" in steps.columns:
        header.append("m′(t)")
        columns.append("m_slope")
    header.append("piece")
    columns.append("piece")
    for c in range(len(part.model_.structure_.cause_terms)):
        header += [f"h{c + 1} (per year)", f"dA{c + 1}"]
        columns += [f"h{c + 1}", f"dA{c + 1}"]
    header += ["S before", "F1 after"]
    columns += ["S_before", "F1_after"]
    body = [
        [str(int(v)) if col == "piece" else full_number(v) for col, v in zip(columns, record)]
        for record in steps[columns].itertuples(index=False)
    ]
    lines += [
        "",
        f"**Step 3 with b = b̂.** The {len(steps)} steps of (s, s + w] = ({s:g}, {s + w:g}] days after entry "
        "(times in the formulas in years since entry):",
        "",
        table_tag("example steps"),
    ]
    lines += md_table(header, body)
    lines += [
        "",
        table_tag("example risks"),
        *md_table(
            ["quantity", "value"],
            [
                ["risk given b = b̂ (the last F1 above, as riskbench computes it)", full_number(conditional)],
                [f"risk of the model (posterior average over {part.model_.prediction_draws} draws)", full_number(full)],
            ],
        ),
        "",
        f"Risk of the outcome within {w:g} days of landmark {s:g} days conditional on b̂: **{full_number(conditional)}**"
        f" ({100 * conditional:.2f}%); the model's risk for this patient, as riskbench computes it: "
        f"**{full_number(full)}** ({100 * full:.2f}%).",
        "",
    ]
    return lines


def joint_sections(saved: Any, values: dict[str, float], landmark: float, horizon: float) -> list[str]:
    """The sheet's sections for a joint model: equations with every estimate, settings, how a risk is computed
    and the worked example for the invented patient ``values`` at ``landmark`` and ``horizon`` (days)."""
    part = saved.parts[0]
    labels = dict(saved.labels)
    lines = ["## The equations", ""]
    lines += _marker_section(part, labels) + _hazard_section(part, labels) + _settings(part)
    return lines + _how(part) + _worked_example(saved, part, values, landmark, horizon)
