"""Calibration term and honest uncertainty for the linear smoothers, and Welch-Satterthwaite bands.

References: a smoothing spline with its penalty fixed is linear in y, so its coefficient response is
checked against refits with scipy.interpolate.make_smoothing_spline (general-purpose library); node values
read by linear interpolation against numpy.interp; power-basis coefficients of an interpolating polynomial
against the inverse Vandermonde matrix (numpy.linalg); band factors against the Welch-Satterthwaite formula
(JCGM 100:2008, GUM, G.4.1) with Student t quantiles from scipy.stats.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import stats as scipy_stats
from scipy.interpolate import make_smoothing_spline

from tracedesk.science.calibration_covariance import CalibrationFactor
from tracedesk.science.errors import ScienceInputError
from tracedesk.science.fit_interpolation import fit_interpolation
from tracedesk.science.fitting import fit_model

FloatArray = np.ndarray


def _factor(rng: np.random.Generator, count: int, *, columns: int = 6, dof: float = math.inf) -> CalibrationFactor:
    """A made-up calibration factor: smooth columns, like the refits of a few clicks give."""
    ramp = np.linspace(-1.0, 1.0, count)[:, None]
    x_part = 0.01 * rng.normal(size=(1, columns)) * (1.0 + ramp)
    y_part = 0.05 * rng.normal(size=(1, columns)) + 0.03 * rng.normal(size=(1, columns)) * ramp
    return CalibrationFactor(x_part, y_part, 0.4, "control_point_residuals", dof=dof)


def _slope(function: object, x: FloatArray, step: float) -> FloatArray:
    evaluate = function  # a callable of x
    return (evaluate(x + step) - evaluate(x)) / step  # type: ignore[operator,no-any-return]


def test_spline_calibration_term_equals_refits_with_the_smoothing_held() -> None:
    rng = np.random.default_rng(3)
    x = np.sort(rng.uniform(0.0, 10.0, 120))
    y = np.sin(x) + rng.normal(0.0, 0.05, x.size)
    sigma = np.full(x.size, 0.05)
    factor = _factor(rng, x.size)
    plain = fit_model(x, y, family="spline", sigma=sigma)
    fit = fit_model(x, y, family="spline", sigma=sigma, calibration=factor)
    lam = float(plain.options["smoothing"])
    base = make_smoothing_spline(x, y, w=1.0 / sigma**2, lam=lam)
    step = 1e-6 * (x[-1] - x[0])
    shifts = factor.y - _slope(base, x, step)[:, None] * factor.x
    epsilon = 1e-3
    moved = np.column_stack(
        [
            (make_smoothing_spline(x, y + epsilon * column, w=1.0 / sigma**2, lam=lam).c - base.c) / epsilon
            for column in shifts.T
        ]
    )
    assert fit.calibration_covariance is not None
    assert_allclose(fit.calibration_covariance, moved @ moved.T, rtol=1e-5, atol=1e-12)
    assert plain.covariance is not None and fit.covariance is not None
    assert_allclose(fit.covariance, plain.covariance + moved @ moved.T, rtol=1e-5, atol=1e-12)
    errors = fit.standard_errors
    assert isinstance(errors, dict)
    assert_allclose(errors["coefficients"], np.sqrt(np.diag(fit.covariance)), rtol=1e-12)
    share = fit.stats["calibration_share"]
    assert isinstance(share, float) and 0.0 < share < 1.0


def test_interpolation_sigma_reaches_node_values_and_coefficients() -> None:
    x = np.arange(6.0)
    y = np.array([1.0, 2.5, 2.0, 3.5, 5.0, 4.0])
    sigma = np.array([0.1, 0.2, 0.1, 0.3, 0.1, 0.2])
    fit = fit_interpolation(x, y, sigma=sigma)
    errors = fit.standard_errors
    assert isinstance(errors, dict)
    assert_allclose(errors["values"], sigma, rtol=1e-12)
    inverse_vandermonde = np.linalg.inv(np.vander(x, increasing=True))
    expected = inverse_vandermonde @ np.diag(sigma**2) @ inverse_vandermonde.T
    assert fit.covariance is not None
    assert_allclose(fit.covariance, expected, rtol=1e-8, atol=1e-14)
    assert_allclose(errors["coefficients"], np.sqrt(np.diag(expected)), rtol=1e-8)
    # Given uncertainties are known (not estimated): the band uses the normal quantile.
    band = fit.confidence_band(np.array([2.5]))
    gradient = np.array([[2.5**k for k in range(6)]])
    half = scipy_stats.norm.ppf(0.975) * math.sqrt(float((gradient @ expected @ gradient.T)[0, 0]))
    assert float(band.upper[0] - band.fitted[0]) == pytest.approx(half, rel=1e-7)


def test_interpolation_without_sigma_has_no_band() -> None:
    fit = fit_interpolation(np.arange(4.0), np.array([0.0, 1.0, 0.0, 2.0]))
    with pytest.raises(ScienceInputError, match="no residual degrees of freedom"):
        fit.confidence_band(np.array([1.5]))


def test_node_values_read_from_a_trace_carry_the_reading() -> None:
    rng = np.random.default_rng(5)
    x = np.sort(rng.uniform(0.0, 12.0, 40))
    y = np.cos(x / 3.0)
    sigma = rng.uniform(0.01, 0.05, x.size)
    fit = fit_interpolation(x, y, degree=4, sigma=sigma)
    nodes = np.linspace(x[0], x[-1], 5)
    reading = np.column_stack([np.interp(nodes, x, unit) for unit in np.eye(x.size)])
    errors = fit.standard_errors
    assert isinstance(errors, dict)
    assert_allclose(errors["values"], np.sqrt(np.diag(reading @ np.diag(sigma**2) @ reading.T)), rtol=1e-10)


def test_interpolation_calibration_term_is_the_reading_of_the_shifts() -> None:
    rng = np.random.default_rng(8)
    x = np.linspace(0.0, 5.0, 6)
    y = 0.2 * x**2 - x + 1.0
    sigma = np.full(x.size, 0.01)
    factor = _factor(rng, x.size, dof=4.0)
    fit = fit_model(x, y, family="interpolation", sigma=sigma, calibration=factor)
    polynomial = np.polynomial.Polynomial.fit(x, y, 5)
    shifts = factor.y - _slope(polynomial, x, 1e-6 * 5.0)[:, None] * factor.x
    assert fit.calibration_covariance is not None
    assert_allclose(fit.calibration_covariance, shifts @ shifts.T, rtol=1e-5, atol=1e-12)
    assert fit.stats["calibration_dof"] == 4.0
    assert fit.calibration_dof == 4.0


@pytest.mark.parametrize("calibration_dof", [3.0, math.inf])
def test_band_factor_is_student_t_with_welch_satterthwaite_dof(calibration_dof: float) -> None:
    rng = np.random.default_rng(13)
    x = np.linspace(0.0, 10.0, 200)
    y = 1.0 + 0.3 * x + rng.normal(0.0, 0.01, x.size)
    factor = _factor(rng, x.size, dof=calibration_dof)
    fit = fit_model(x, y, family="polynomial", degree=1, calibration=factor)
    at = np.array([0.0, 5.0, 10.0])
    band = fit.confidence_band(at)
    gradient = fit.model.parameter_gradient(at)
    covariance = fit.model.internal_covariance
    assert covariance is not None and fit.calibration_covariance is not None
    total = np.einsum("ij,jk,ik->i", gradient, covariance, gradient)
    calibration = np.einsum("ij,jk,ik->i", gradient, fit.calibration_covariance, gradient)
    residual_dof = float(fit.stats["dof"])  # type: ignore[arg-type]
    effective = total**2 / ((total - calibration) ** 2 / residual_dof + calibration**2 / calibration_dof)
    expected = scipy_stats.t.ppf(0.975, effective) * np.sqrt(total)
    assert_allclose(band.upper - band.fitted, expected, rtol=1e-9)
    if math.isfinite(calibration_dof):
        assert np.all(effective < 20.0)  # the few-point calibration dominates: clearly wider than 1.96
