"""Per-sample value uncertainty propagated from pixel uncertainty through the calibration's Jacobian."""

from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose

from tracedesk.science.axes import LinearScale, Log10Scale
from tracedesk.science.calibration import CartesianCalibration, calibrate_cartesian
from tracedesk.science.circular import CircularCalibration, RadiusLaw
from tracedesk.science.errors import ScienceInputError
from tracedesk.science.registration import MatrixTransform
from tracedesk.science.uncertainty import pixel_sigma, value_uncertainty, value_uncertainty_for, values_jacobian


def test_pixel_sigma_combines_calibration_and_line_width_in_quadrature() -> None:
    """Rectangular distribution over the line width: w / sqrt(12) (JCGM 100:2008 4.3.7, from memory);
    2-D RMS 0.5 px -> 0.5 / sqrt(2) per axis. 0.125 + 9 / 12 = 0.875."""
    assert pixel_sigma(calibration_rms_px=0.5, line_width_px=3.0) == pytest.approx(math.sqrt(0.875), rel=1e-15)
    assert pixel_sigma(calibration_rms_px=0.0, line_width_px=1.0) == pytest.approx(1.0 / math.sqrt(12.0), rel=1e-15)
    with pytest.raises(ScienceInputError, match="line_width_px: must be a finite number >= 0"):
        pixel_sigma(calibration_rms_px=0.5, line_width_px=-1.0)
    with pytest.raises(ScienceInputError, match="calibration_rms_px"):
        pixel_sigma(calibration_rms_px=math.nan, line_width_px=1.0)


def _affine_calibration(y_axis: LinearScale | Log10Scale) -> CartesianCalibration:
    pixels = np.array([[100.0, 900.0], [1100.0, 900.0], [100.0, 100.0], [1100.0, 120.0], [600.0, 500.0]])
    y = [1.0, 1.0, 100.0, 100.0, 10.0] if isinstance(y_axis, Log10Scale) else [0.0, 0.0, 8.0, 8.0, 4.0]
    values = np.column_stack([[0.0, 10.0, 0.0, 10.0, 5.0], y])
    return calibrate_cartesian(pixels, values, x_axis=LinearScale(), y_axis=y_axis, transform="affine")


def test_affine_jacobian_is_the_transform_matrix() -> None:
    """For an affine map the Jacobian is its constant linear part: sigma_x = sigma * |row 0|."""
    calibration = _affine_calibration(LinearScale())
    assert isinstance(calibration.transform, MatrixTransform)
    linear = calibration.transform.forward_matrix[:2, :2]
    pixels = np.array([[300.0, 400.0], [900.5, 222.25]])
    assert_allclose(values_jacobian(calibration, pixels), np.stack([linear, linear]), rtol=1e-8, atol=1e-12)
    sigma = value_uncertainty(calibration, pixels, calibration_rms_px=0.4, line_width_px=2.0)
    expected = pixel_sigma(calibration_rms_px=0.4, line_width_px=2.0) * np.hypot(linear[:, 0], linear[:, 1])
    assert_allclose(sigma, np.stack([expected, expected]), rtol=1e-8)


def test_log_axis_uncertainty_grows_with_the_value() -> None:
    """y = 10**c with c linear in v: dy/dv = ln(10) * y * dc/dv (calculus), so sigma_y / y is constant."""
    calibration = _affine_calibration(Log10Scale())
    pixels = np.array([[600.0, 850.0], [600.0, 150.0]])
    y = calibration.pixels_to_values(pixels)[:, 1]
    assert isinstance(calibration.transform, MatrixTransform)
    dc_dv = calibration.transform.forward_matrix[1, :2]
    sigma = value_uncertainty(calibration, pixels, calibration_rms_px=0.0, line_width_px=1.0)
    expected = math.log(10.0) * y * float(np.hypot(*dc_dv)) / math.sqrt(12.0)
    assert_allclose(sigma[:, 1], expected, rtol=1e-7)


def test_circular_time_uncertainty_is_arc_length_over_radius_across_the_wrap() -> None:
    """Radial chart: dt = P / (2 pi) * ds / r along the ring; dvalue = range / radial span * dr."""
    calibration = CircularCalibration(
        centre=(500.0, 500.0),
        radius_law=RadiusLaw(LinearScale(), 0.0, 80.0, 100.0, 500.0),
        period_hours=24.0,
        time_zero_pixel=(500.0, 0.0),
        time_direction="clockwise",
    )
    pixels = np.array([[500.0, 200.0], [500.001, 200.0], [800.0, 500.0]])  # the first two straddle time zero
    sigma = value_uncertainty(calibration, pixels, calibration_rms_px=0.0, line_width_px=math.sqrt(12.0))
    radius = np.array([300.0, 300.0, 300.0])
    assert_allclose(sigma[:, 0], 24.0 / (2.0 * math.pi) / radius, rtol=1e-6)
    assert_allclose(sigma[:, 1], 80.0 / 400.0, rtol=1e-9)


def test_uncertainty_for_uses_the_leave_one_out_rms() -> None:
    calibration = _affine_calibration(LinearScale())
    report = calibration.residual_report
    assert report.loo_rms_px is not None
    pixels = np.array([[300.0, 400.0]])
    expected = value_uncertainty(calibration, pixels, calibration_rms_px=report.loo_rms_px, line_width_px=1.5)
    assert_allclose(value_uncertainty_for(calibration, pixels, line_width_px=1.5), expected, rtol=1e-15)


def test_bad_step_raises() -> None:
    calibration = _affine_calibration(LinearScale())
    with pytest.raises(ScienceInputError, match="step_px"):
        values_jacobian(calibration, [[1.0, 2.0]], step_px=0.0)
