"""β(s) of the landmark super-model with pointwise bands by the delta method, checked by hand."""

from __future__ import annotations

import numpy as np
import pytest

from riskbench.models.landmark import LandmarkSupermodel
from riskbench.models.risk_contract import ModelInputError


def test_default_landmark_effect_is_linear(make_stack) -> None:
    """The parsimonious default: one landmark interaction per covariate (issue 12 item 4)."""
    model = LandmarkSupermodel(["x1", "x2"]).fit(make_stack(n_patients=150, seed=3))
    assert model.landmark_effects == "linear"
    assert model.design_columns_[:4] == ["x1", "x2", "x1:s", "x2:s"]
    assert np.isfinite(model.outcome_.loglik) and model.outcome_.loglik > model.outcome_.loglik_null


@pytest.mark.parametrize("form", ["linear", "quadratic"])
def test_band_equals_delta_method_by_hand(make_stack, form) -> None:
    """At s = 0, S/2 and S: β̂(s) = Σ β̂ₖ (s/S)ᵏ and SE² = gᵀVg with g = (1, s/S, (s/S)²) written out term by
    term from the robust covariance (delta method for a linear combination: the variance of aᵀβ̂ is aᵀVa,
    any statistics textbook, **from memory**); the 95% band is β̂(s) ± 1.959964·SE."""
    stack = make_stack(n_patients=400, beta_slope=(0.5, 0.0), seed=4)
    model = LandmarkSupermodel(["x1", "x2"], landmark_effects=form).fit(stack)
    S = model.landmark_scale_
    bands = model.landmark_effect_bands([0.0, S / 2, S])
    cols = model.design_columns_
    V, b = model.robust_var_, model.coef_
    for covariate in ("x1", "x2"):
        rows = bands[bands["covariate"] == covariate].reset_index(drop=True)
        i0, i1 = cols.index(covariate), cols.index(f"{covariate}:s")
        i2 = cols.index(f"{covariate}:s2") if form == "quadratic" else None
        for k, r in enumerate([0.0, 0.5, 1.0]):
            coef = b[i0] + r * b[i1] + (r * r * b[i2] if i2 is not None else 0.0)
            var = V[i0, i0] + r * r * V[i1, i1] + 2 * r * V[i0, i1]
            if i2 is not None:
                var += r**4 * V[i2, i2] + 2 * r * r * V[i0, i2] + 2 * r**3 * V[i1, i2]
            assert rows.loc[k, "coef"] == pytest.approx(coef, abs=1e-12)
            assert rows.loc[k, "se"] == pytest.approx(np.sqrt(var), rel=1e-10)
            assert rows.loc[k, "lower"] == pytest.approx(coef - 1.959963984540054 * np.sqrt(var), rel=1e-9)
            assert rows.loc[k, "upper"] == pytest.approx(coef + 1.959963984540054 * np.sqrt(var), rel=1e-9)
    # at s = 0 the band is the main term's Wald interval
    summary = model.summary()
    main = summary[summary["cause"] == "outcome"].set_index("term").loc["x1"]
    first = bands[(bands["covariate"] == "x1") & (bands["landmark_days"] == 0.0)].iloc[0]
    assert np.exp(first["lower"]) == pytest.approx(main["hr_lower_95"], rel=1e-9)


def test_constant_effect_band_is_flat_and_errors_are_clear(make_stack) -> None:
    model = LandmarkSupermodel(["x1"], landmark_effects="none").fit(make_stack(n_patients=150, seed=5))
    bands = model.landmark_effect_bands([0.0, 100.0, 365.25])
    assert np.ptp(bands["coef"]) == 0 and np.ptp(bands["se"]) == 0
    with pytest.raises(ModelInputError, match="level"):
        model.landmark_effect_bands([0.0], level=1.5)
    with pytest.raises(ModelInputError, match="no fitted model for cause 'competing'"):
        LandmarkSupermodel(["x1"], competing=False).fit(make_stack(n_patients=150, seed=5)).landmark_effect_bands(
            [0.0], cause="competing"
        )
