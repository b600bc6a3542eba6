"""The model sheet: a Markdown page that lets a reader recompute a saved model's risk without riskbench.

It gives the caution, the cohort rules that build the covariates, the full equation with every number at full
precision (``repr`` of each float: reading it back gives the same number) -- coefficients and centring values,
the landmark terms of landmark-varying effects, the baseline hazard (increments per landmark stratum for a
landmark super-model, the cumulative hazard at a grid for a time-varying Cox model), the competing-event model
-- and a worked example on an invented patient. A forest has no equation: the sheet gives its settings and
variable importance. A joint model's sheet (:mod:`riskbench.report.joint_sheet`) gives both submodels with every
estimate and explains why its risk needs the posterior of the random effects.

Every table a program may read back is preceded by an HTML comment ``<!-- table: <what> -->`` (invisible when
rendered). Every user string (names, labels, units, codes) is escaped with
:func:`riskbench.report.markdown_text.md_text`.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from riskbench.models.cox_model import CoxModel
from riskbench.models.joint_family import SharedTrajectoryModel
from riskbench.models.landmark import LandmarkSupermodel
from riskbench.models.risk_contract import step_function_at
from riskbench.report.joint_sheet import joint_sections
from riskbench.report.markdown_text import md_table, md_text
from riskbench.report.outputs import atomic_write_text
from riskbench.report.sheet_text import days_text as _days
from riskbench.report.sheet_text import example_patient_table
from riskbench.report.sheet_text import full_number as _num
from riskbench.report.sheet_text import table_tag as _marker
from riskbench.time_units import DAYS_PER_MONTH, DAYS_PER_YEAR

__all__ = ["CAUTION", "example_patient", "model_sheet", "read_sheet_table", "write_model_sheet"]

#: The caution every saved model carries (sheet, bundle, scoring output).
CAUTION = (
    "Research software, not a medical device. This model must not be used for clinical decisions "
    "without proper validation in the population where it would be used; any use on patient data must "
    "follow local ethics approval, data-protection rules and clinical governance."
)


def _range(low: float | None, high: float | None) -> str:
    if low is None and high is None:
        return "any value"
    if high is None:
        return f"at least {low:g}"
    if low is None:
        return f"at most {high:g}"
    return f"{low:g} to {high:g}"


def example_patient(saved: Any) -> dict[str, float]:
    """Covariate values of an invented example patient: a round value inside each development range
    (two fifths of the way from the minimum to the maximum, to two significant digits; 1 for a 0/1 covariate),
    not a patient of the cohort."""
    out: dict[str, float] = {}
    for name in saved.covariates:
        entry = saved.development_ranges.get(name) or {}
        low, high = entry.get("min"), entry.get("max")
        if entry.get("values") is not None:
            out[name] = float(max(entry["values"]))
        elif low is None or high is None:
            out[name] = 0.0
        else:
            value = float(low) + 0.4 * (float(high) - float(low))
            out[name] = float(f"{value:.2g}") if value != 0 else 0.0
            out[name] = min(max(out[name], float(low)), float(high))
    return out


def example_point(saved: Any) -> tuple[float, float]:
    """The worked example's landmark and horizon (days): the second landmark (or the only one) and the
    prediction window, shortened to the longest follow-up a landmark model saw."""
    marks = saved.landmarks_days
    s = float(marks[min(1, len(marks) - 1)])
    w = float(saved.prediction_window_days)
    for part in saved.parts:
        if isinstance(part, LandmarkSupermodel):
            w = min(w, float(part.max_time_))
    return s, w


# --------------------------------------------------------------------------------------------------
# sections


def _caution(saved: Any) -> list[str]:
    return ["> **Caution.** " + md_text(CAUTION), ""]


def _label(saved: Any, column: str) -> str:
    return md_text(saved.labels.get(column, column))


def _question(saved: Any) -> list[str]:
    marks = ", ".join(f"{s:g}" for s in saved.landmarks_days)
    return [
        "## What the model predicts",
        "",
        f"Family: {md_text(saved.family)}. For a patient still under surveillance at a landmark *s* (days since "
        "entry), the probability of the outcome in (*s*, *s* + *w*], given everything known up to *s*. Prediction "
        f"window *w* = {_days(saved.prediction_window_days)}; landmarks fitted: {marks} days. Time is counted in "
        f"days (1 year = {DAYS_PER_YEAR} days).",
        "",
    ]


def _rules(saved: Any) -> list[str]:
    spec = saved.cohort_spec()
    carry = "no limit" if spec.max_carry_days is None else _days(spec.max_carry_days)
    lines = [
        "## Cohort rules that build the covariates",
        "",
        f"- A value dated day *d* is known from day *d* on and is carried forward for at most {carry}; "
        "after that the covariate is missing.",
        f"- Values dated up to {_days(spec.lookback_days)} before entry count as history at entry.",
        f"- Several values of one variable on one day: {md_text(spec.same_day_rule)}.",
        "",
    ]
    rows = []
    for v in spec.variables:
        conversions = ", ".join(f"{md_text(u)} × {_num(f)}" for u, f in v.conversions.items()) or "none"
        derived = [
            name
            for flag, name in (
                (v.change, "change from first"),
                (v.slope, f"slope per year over {v.slope_window_days:g} days"),
                (v.previous, "previous value"),
            )
            if flag
        ]
        rows.append(
            [
                md_text(v.name),
                md_text(v.column),
                md_text(v.unit),
                conversions,
                _range(v.plausible_min, v.plausible_max),
                md_text(v.transform),
                "; ".join(derived) or "none",
            ]
        )
    lines += md_table(
        ["variable", "column", "unit", "other units (factor to the unit)", "plausible range", "transform", "derived"],
        rows,
    )
    lines.append("")
    static_rows = []
    for s in spec.static_specs:
        codes = ", ".join(f"{md_text(c)} → {md_text(level)}" for c, level in s.codes.items())
        static_rows.append(
            [
                md_text(s.name),
                md_text(s.kind),
                codes or _range(s.lower_bound, s.plausible_max),
                md_text(s.reference or ""),
                ", ".join(md_text(c) for c in s.output_columns),
            ]
        )
    if static_rows:
        lines += md_table(["static", "kind", "codes or plausible range", "reference", "columns"], static_rows)
        lines.append("")
    clocks = []
    if spec.exam_variables:
        clocks.append(
            "`days_since_exam` (days since the last exam of "
            f"{', '.join(md_text(v) for v in spec.exam_variables)}) and `n_exams`"
        )
    if spec.current_age:
        clocks.append("`age` (years at the landmark)")
    if clocks:
        lines += ["Clock covariates: " + "; ".join(clocks) + ".", ""]
    return lines


def _covariates(saved: Any) -> list[str]:
    rows = []
    for c in saved.covariates:
        entry = saved.development_ranges.get(c) or {}
        rows.append([md_text(c), _label(saved, c), str(entry.get("min")), str(entry.get("max"))])
    lines = ["## Covariates and their development range", ""]
    lines += md_table(["column", "meaning", "smallest in development", "largest in development"], rows)
    md = saved.missing_data
    lines.append("")
    if md is None and isinstance(saved.parts[0], SharedTrajectoryModel):
        lines.append(
            f"Missing values: the marker {md_text(saved.parts[0].model_.marker)} may be missing at a landmark (the "
            "model reads all of the patient's measurements up to it, none for a patient not yet measured); a row "
            "with another covariate missing cannot be predicted."
        )
    elif md is None:
        lines.append("Missing values: none handled; a row with a missing covariate cannot be predicted.")
    elif md["method"] == "missing_indicator":
        med = ", ".join(f"{md_text(k)} = {_num(v)}" for k, v in md["medians"].items())
        lines.append(
            "Missing values: **missing indicator**. A missing value is set to its development median "
            f"({med}); each covariate listed among the terms as `<covariate>_missing` is 1 when the value "
            "was missing, else 0."
        )
    elif md["method"] == "complete_cases":
        lines.append("Missing values: **complete cases**. A row with a missing covariate gets no risk.")
    else:
        m, parts = md["imputations"], len(saved.parts)
        fitted = (
            f"the model is {parts} fitted models, one per imputed data set, and the risk is the mean of their "
            f"risks (parts 1 to {parts} below)"
            if parts > 1
            else "no covariate was missing in development, so one model was fitted"
        )
        lines.append(
            f"Missing values: **multiple imputation** with {m} imputations: {fitted}. A row to predict "
            f"with a missing covariate is completed {m} times by the saved imputer (chained equations) and "
            "the risks are averaged; that step cannot be done by hand."
        )
    return lines + [""]


def _landmark_terms(part: LandmarkSupermodel) -> dict[str, str]:
    meanings = {}
    for column in part.design_columns_:
        base, _, power = column.partition(":")
        if column == "landmark_s":
            meanings[column] = "s/S"
        elif column == "landmark_s2":
            meanings[column] = "(s/S)²"
        elif power == "s":
            meanings[column] = f"{md_text(base)} × s/S"
        elif power:
            meanings[column] = f"{md_text(base)} × (s/S)^{md_text(power[1:])}"
        else:
            meanings[column] = md_text(base)
    return meanings


def _landmark_part(saved: Any, part: LandmarkSupermodel, k: int, horizon: float) -> list[str]:
    meanings = _landmark_terms(part)
    lines = [
        f"S = {_num(part.landmark_scale_)} days (the largest fitted landmark). "
        f"Baseline: {md_text(part.baseline)}"
        + (
            " (one baseline hazard per fitted landmark)."
            if part.baseline == "stratified"
            else " (one pooled baseline; the landmark enters through the terms s/S and (s/S)²)."
        ),
        "",
    ]
    fits = [("outcome", part.outcome_), ("competing", part.competing_)]
    for cause, fit in fits:
        if fit is None:
            lines += [
                "No competing-event model (the development cohort had no competing events, or it was "
                "switched off): the risk is the outcome model's alone.",
                "",
            ]
            continue
        lines += [f"Cause-specific Cox model of the {cause} (part {k}):", "", _marker(f"coefficients {cause} {k}")]
        rows = [
            [md_text(t), meanings[t], _num(b), _num(m)] for t, b, m in zip(part.design_columns_, fit.coef, fit.means)
        ]
        lines += md_table(["term", "value of the term", "coefficient β", "centring value m"], rows)
        lines.append("")
    lines += [f"Baseline hazard increments (days from the landmark, up to {horizon:g} days), part {k}:", ""]
    for stratum in sorted(part.outcome_.baseline):
        grid, increments = _landmark_increments(part, stratum, horizon)
        where = f"landmark {stratum:g} days" if part.baseline == "stratified" else "all landmarks"
        lines += [f"Stratum: {where}.", "", _marker(f"baseline {k} stratum {_num(stratum)}")]
        rows = [[_num(t), *(_num(v) for v in inc)] for t, inc in zip(grid, increments.T)]
        header = ["time from landmark (days)", "outcome dΛ₁"] + (["competing dΛ₂"] if len(increments) > 1 else [])
        lines += md_table(header, rows)
        lines.append("")
    return lines


def _landmark_increments(part: LandmarkSupermodel, stratum: float, horizon: float) -> tuple[np.ndarray, np.ndarray]:
    """The common jump grid (days) of both causes in a stratum up to ``horizon`` and each cause's increments."""
    fits = [part.outcome_] + ([part.competing_] if part.competing_ is not None else [])
    empty = (np.empty(0), np.empty(0))
    bases = [fit.baseline.get(stratum, empty) for fit in fits]
    grid = np.unique(np.concatenate([b[0] for b in bases]))
    grid = grid[grid <= horizon]
    out = np.zeros((len(fits), len(grid)))
    for i, (times, inc) in enumerate(bases):
        keep = times <= horizon
        out[i, np.searchsorted(grid, times[keep])] = inc[keep]
    return grid, out


def _cox_grid(saved: Any) -> np.ndarray:
    marks = np.asarray(saved.landmarks_days, float)
    horizons = np.asarray(saved.horizons_days, float)
    top = float(marks.max() + horizons.max())
    monthly = np.arange(0.0, top + DAYS_PER_MONTH, DAYS_PER_MONTH)
    return np.unique(np.round(np.r_[monthly[monthly <= top], marks, (marks[:, None] + horizons[None, :]).ravel()], 6))


def _cox_part(saved: Any, part: CoxModel, k: int) -> list[str]:
    lines = [_marker(f"coefficients outcome {k}")]
    rows = [
        [md_text(t), _label(saved, t), _num(b), _num(c)]
        for t, b, c in zip(part.coef_.index, part.coef_.to_numpy(), part.center_.to_numpy())
    ]
    lines += md_table(["term", "meaning", "coefficient β", "centring value m"], rows)
    origin = "since entry" if part.time_scale_ == "since_entry" else "since the landmark"
    lines += [
        "",
        f"Baseline cumulative hazard H₀(t), t in days {origin} (a step function: its value at t is the "
        f"last value at or before t), part {k}:",
        "",
        _marker(f"cumulative hazard {k}"),
    ]
    grid = _cox_grid(saved)
    strata = list(part._curves)
    columns = []
    for level in strata:
        times, cumhaz = part._curves[level]
        columns.append(step_function_at(times, cumhaz, grid))
    header = ["t (days)"] + [
        ("H₀(t)" if part.strata is None else f"H₀(t), {md_text(part.strata)} = {md_text(s)}") for s in strata
    ]
    lines += md_table(header, [[_num(t), *(_num(c[i]) for c in columns)] for i, t in enumerate(grid)])
    return lines + [""]


def _equation(saved: Any, horizon: float) -> list[str]:
    first = saved.parts[0]
    lines = ["## The equation", ""]
    if isinstance(first, LandmarkSupermodel):
        lines += [
            "For a patient at landmark *s* with covariates *x* (as known at *s*): build each term *z* of the table "
            "below (a covariate, a covariate times s/S or (s/S)², or s/S itself), then for each cause "
            "c (1 = outcome, 2 = competing event) the linear predictor ηc = Σ βc·(z − mc) and the score "
            "rc = exp(ηc). With the baseline increments dΛc(tj) of the patient's stratum at the times tj "
            "(days from the landmark), the risk of the outcome by horizon *h* is",
            "",
            "risk = Σ over tj ≤ h of S(tj−1) · r1·dΛ1(tj), with S(t0) = 1 and S(tj) = S(tj−1) · (1 − r1·dΛ1(tj) − "
            "r2·dΛ2(tj))",
            "",
            "(the Aalen–Johansen cumulative incidence; without a competing model r2·dΛ2 = 0. If "
            "r1·dΛ1 + r2·dΛ2 exceeds 1 at some tj, both are divided by their sum there.)",
            "",
        ]
    elif isinstance(first, CoxModel):
        lines += [
            "For a patient at landmark *s* with covariates *x* (as known at *s*): η = Σ β·(x − m), and the risk of "
            "the outcome by horizon *h* is",
            "",
            "risk = 1 − exp(−(H₀(s + h) − H₀(s)) · exp(η))",
            "",
            "with H₀ read from the table below (a time-varying Cox model predicts with the covariates frozen at "
            "*s*; it ignores competing events, so this is the cause-specific risk).",
            "",
        ]
    for k, part in enumerate(saved.parts, start=1):
        if len(saved.parts) > 1:
            lines += [f"### Part {k} of {len(saved.parts)}", ""]
        if isinstance(part, LandmarkSupermodel):
            lines += _landmark_part(saved, part, k, max(horizon, max(saved.horizons_days)))
        elif isinstance(part, CoxModel):
            lines += _cox_part(saved, part, k)
    return lines


def _forest(saved: Any) -> list[str]:
    part = saved.parts[0]
    params = part.get_params()
    lines = [
        "## The model",
        "",
        "A random survival forest has **no equation**: its risk is read from the survival curves stored in "
        "its trees' leaves. It is saved as a file (joblib) whose SHA-256 is recorded in the bundle and "
        "checked before loading. The forest treats the competing event as censoring (cause-specific risk).",
        "",
        "Settings:",
        "",
    ]
    lines += md_table(["setting", "value"], [[md_text(k), md_text(v)] for k, v in sorted(params.items())])
    lines.append("")
    importance = pd.DataFrame(saved.variable_importance or [], columns=["covariate", "importance"])
    if len(importance):
        lines += [
            "Variable importance (drop in Harrell's C at the prediction window when the covariate's values "
            "are permuted across the development rows; larger = more important):",
            "",
        ]
        lines += md_table(
            ["covariate", "drop in C"], [[md_text(r.covariate), f"{r.importance:.4f}"] for r in importance.itertuples()]
        )
        lines.append("")
    return lines


def _reference_risks(saved: Any) -> list[str]:
    """Risk of a reference patient (every covariate at its development mean) at each landmark and horizon."""
    first = saved.parts[0]
    if isinstance(first, LandmarkSupermodel):
        means = first.outcome_.means[: len(saved.covariates)]
        horizons = [h for h in saved.horizons_days if h <= first.max_time_]
    elif isinstance(first, CoxModel):
        means = first.center_.to_numpy()
        horizons = list(saved.horizons_days)
    else:
        return []
    rows = pd.DataFrame(
        [{**dict(zip(saved.covariates, means)), **_stratum(saved), "landmark": s} for s in saved.landmarks_days]
    )
    risks = {h: saved.model.predict_risk(rows, h) for h in horizons}
    table = [[f"{s:g}", *(f"{risks[h][i]:.4f}" for h in horizons)] for i, s in enumerate(saved.landmarks_days)]
    lines = [
        "## Baseline risk at each landmark and horizon",
        "",
        "Risk of a reference patient whose covariates all equal their development means (for orientation; "
        "rows are landmarks in days, columns horizons in days):",
        "",
    ]
    return lines + md_table(["landmark"] + [f"{h:g}" for h in horizons], table) + [""]


def _stratum(saved: Any) -> dict[str, Any]:
    """A stratified Cox model's strata column set to its first stratum (the reference and example patients)."""
    part = saved.parts[0]
    column = getattr(part, "strata", None) if isinstance(part, CoxModel) else None
    return {} if column is None else {column: next(iter(part._curves))}


def _example(saved: Any) -> list[str]:
    values = example_patient(saved)
    s, w = example_point(saved)
    row = pd.DataFrame([{**values, **_stratum(saved), "landmark": s}])
    lines = [
        "## Worked example (an invented patient)",
        "",
        "An invented patient, not a patient of the development cohort"
        + "".join(f" (in stratum {md_text(k)} = {md_text(v)})" for k, v in _stratum(saved).items())
        + ":",
        "",
        *example_patient_table(values, s, w),
        "",
    ]
    for k, part in enumerate(saved.parts, start=1):
        # the part's own columns: a missing-indicator column is 0 (the example's values are all observed)
        part_row = pd.DataFrame(
            [{**{c: values.get(c, 0.0) for c in part.covariates}, **_stratum(saved), "landmark": s}]
        )
        if isinstance(part, LandmarkSupermodel):
            x = np.array([[values.get(c, 0.0) for c in part.covariates]])
            design = part._design(x, np.array([s]))[0]
            etas = [float((design - f.means) @ f.coef) for f in (part.outcome_, part.competing_) if f is not None]
            names = ["η1 (outcome)", "η2 (competing)"][: len(etas)]
            scores = ", ".join(f"r{i} = exp(η{i}) = {_num(np.exp(e))}" for i, e in enumerate(etas, start=1))
            stratum = s if part.baseline == "stratified" else 0.0
            grid, _ = _landmark_increments(part, float(part.landmarks_[np.argmin(abs(part.landmarks_ - stratum))]), w)
            lines.append(
                f"Part {k}: terms z = {', '.join(_num(z) for z in design)}; "
                + "; ".join(f"{n} = {_num(e)}" for n, e in zip(names, etas))
                + f"; {scores}. The sum runs "
                f"over the {len(grid)} jump times tj ≤ {w:g} days of the stratum's table; risk of this "
                f"part: {_num(part.predict_risk(part_row, w)[0])}."
            )
        elif isinstance(part, CoxModel):
            x = np.array([values.get(c, 0.0) for c in part.coef_.index])
            eta = float((x - part.center_.to_numpy()) @ part.coef_.to_numpy())
            times, cumhaz = part._curves[next(iter(_stratum(saved).values()), next(iter(part._curves)))]
            at_s, at_end = step_function_at(times, cumhaz, [s, s + w])
            lines.append(
                f"Part {k}: η = {_num(eta)}, exp(η) = {_num(np.exp(eta))}; H₀({s:g}) = {_num(at_s)} and "
                f"H₀({s + w:g}) = {_num(at_end)} (the last table rows at or before those times), so the "
                f"risk is 1 − exp(−{_num(at_end - at_s)} × {_num(np.exp(eta))}) = "
                f"{_num(part.predict_risk(part_row, w)[0])}."
            )
    if len(saved.parts) > 1:
        lines += ["", "The risk is the mean of the parts' risks."]
    risk = float(saved.model.predict_risk(row, w)[0])
    lines += [
        "",
        f"Risk of the outcome within {w:g} days of landmark {s:g} days: **{_num(risk)}** "
        f"({100 * risk:.2f}%), as riskbench computes it.",
        "",
    ]
    return lines


def model_sheet(saved: Any) -> str:
    """The model sheet of a :class:`~riskbench.workflow.model_bundle.SavedModel` as Markdown text."""
    lines = [f"# Model sheet: {md_text(saved.name)}", ""]
    lines += _caution(saved) + _question(saved) + _rules(saved) + _covariates(saved)
    if isinstance(saved.parts[0], SharedTrajectoryModel):
        lines += joint_sections(saved, example_patient(saved), *example_point(saved))
    elif not isinstance(saved.parts[0], (LandmarkSupermodel, CoxModel)):
        lines += _forest(saved)
    else:
        lines += _equation(saved, example_point(saved)[1]) + _reference_risks(saved) + _example(saved)
    lines += [
        "## Files",
        "",
        f"The model files and their SHA-256 are listed in {md_text(saved.bundle_path.name)}; riskbench "
        "refuses a file whose SHA-256 differs. Versions that saved it: "
        + ", ".join(f"{md_text(k)} {md_text(v)}" for k, v in sorted(saved.versions.items()))
        + ".",
        "",
    ]
    return "\n".join(lines)


def write_model_sheet(saved: Any, path: str | Path) -> Path:
    """Write :func:`model_sheet` to ``path``; returns the path."""
    return atomic_write_text(Path(path), model_sheet(saved))


def read_sheet_table(text: str, what: str) -> list[list[str]]:
    """The body cells of the table after ``<!-- table: <what> -->`` in a sheet (for reading numbers back)."""
    lines = text.splitlines()
    try:
        start = lines.index(_marker(what))
    except ValueError:
        raise KeyError(f"no table {what!r} in the sheet") from None
    body = []
    for line in lines[start + 3 :]:
        if not line.startswith("|"):
            break
        body.append([cell.strip() for cell in line.strip().strip("|").split(" | ")])
    return body


def sheet_tables(text: str) -> Sequence[str]:
    """The names of the machine-readable tables of a sheet."""
    return [line[len("<!-- table: ") : -len(" -->")] for line in text.splitlines() if line.startswith("<!-- table: ")]
