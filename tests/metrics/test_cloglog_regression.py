"""The cloglog pseudo-observation regression against statsmodels' GEE.

:func:`fit_cloglog` solves the generalised estimating equation with working independence, binomial variance
and the cloglog link (Liang & Zeger 1986, Biometrika 73:13-22), with the sandwich covariance built on the
expected information. statsmodels' ``GEE(..., Binomial(CLogLog()), Independence())`` with ``cov_type="robust"``
solves the same equation and gives the same sandwich: one row per group for the row-wise sandwich, the patient
for the cluster-summed one. (statsmodels' ``GLM`` robust covariance is built on the observed Hessian instead,
which differs by a few per cent for a non-canonical link.)
"""

import numpy as np
import pytest
import statsmodels.api as sm

from riskbench.metrics.cloglog_regression import fit_cloglog


@pytest.fixture
def binary_rows():
    rng = np.random.default_rng(11)
    n = 3_000
    x = np.column_stack([np.ones(n), rng.normal(-2.0, 0.8, n), rng.normal(0, 1, n)])
    y = (rng.random(n) < -np.expm1(-np.exp(x @ np.array([0.3, 0.9, -0.4])))).astype(float)
    return x, y, rng.integers(0, 700, n)


def _gee(x, y, groups, offset=None):
    family = sm.families.Binomial(link=sm.families.links.CLogLog())
    model = sm.GEE(y, x, groups=groups, family=family, cov_struct=sm.cov_struct.Independence(), offset=offset)
    return model.fit(cov_type="robust", maxiter=100, ctol=1e-12)


@pytest.mark.parametrize("clustered", [False, True])
def test_coefficients_and_sandwich_equal_statsmodels_gee(binary_rows, clustered):
    x, y, patient = binary_rows
    ours = fit_cloglog(x, y, cluster=patient if clustered else None, tol=1e-20)  # to double precision
    ref = _gee(x, y, patient if clustered else np.arange(y.size))
    np.testing.assert_allclose(ours.coef, ref.params, rtol=1e-9)
    np.testing.assert_allclose(ours.cov, ref.cov_params(), rtol=1e-8)


def test_offset_equals_statsmodels_gee(binary_rows):
    x, y, patient = binary_rows
    offset = 0.1 * x[:, 2]
    ours = fit_cloglog(x[:, :2], y, offset=offset, cluster=patient, tol=1e-20)
    ref = _gee(x[:, :2], y, patient, offset=offset)
    np.testing.assert_allclose(ours.coef, ref.params, rtol=1e-9)
    np.testing.assert_allclose(ours.cov, ref.cov_params(), rtol=1e-8)


def test_the_default_tolerance_is_within_a_small_fraction_of_a_standard_error(binary_rows):
    x, y, _ = binary_rows
    exact, default = fit_cloglog(x, y, tol=1e-20), fit_cloglog(x, y)
    assert np.all(np.abs(default.coef - exact.coef) <= 1e-4 * np.sqrt(np.diag(exact.cov)))


def test_the_point_estimate_alone_is_the_same_fit(binary_rows):
    x, y, _ = binary_rows
    full, alone = fit_cloglog(x, y), fit_cloglog(x, y, covariance=False)
    np.testing.assert_array_equal(alone.coef, full.coef)
    assert np.isnan(alone.cov).all()
