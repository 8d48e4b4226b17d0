"""Per-sample uncertainty of digitized values from pixel-level uncertainty.

Two pixel-level sources, independent, combined in quadrature per image axis:

* the calibration: its residual RMS (px), which is the RMS of 2-D distances, so each image axis gets
  ``rms / sqrt(2)``; the leave-one-out RMS is the more honest (out-of-sample) figure when available;
* the pen line: where in its width the pen's true centre lies is uniformly uncertain, so a line of width
  w contributes ``w / sqrt(12)`` (standard uncertainty of a rectangular distribution of half-width
  a = w / 2 is a / sqrt(3): JCGM 100:2008 (GUM) 4.3.7, from memory).

The pixel uncertainty ``sigma_px`` (isotropic) goes through the local Jacobian J of ``pixels_to_values``
(central finite differences, vectorised): ``sigma_x = sigma_px * sqrt(J_xu^2 + J_xv^2)`` and likewise
for y, i.e. the diagonal of ``J (sigma_px^2 I) J^T`` (first-order propagation, GUM 5.1.2).
"""

from __future__ import annotations

import math
from typing import Final

import numpy as np
from numpy.typing import ArrayLike, NDArray

from tracedesk.science.calibration import ChartMapping
from tracedesk.science.errors import ScienceInputError
from tracedesk.science.registration import as_point_array

FloatArray = NDArray[np.float64]

DEFAULT_STEP_PX: Final = 0.01


def pixel_sigma(*, calibration_rms_px: float, line_width_px: float) -> float:
    """Standard uncertainty (px) of one image coordinate of a traced point.

    Parameters
    ----------
    calibration_rms_px : float
        Calibration residual RMS (px), 2-D: sqrt(sum(du^2 + dv^2) / n).
    line_width_px : float
        Width of the pen line (px).

    Returns
    -------
    float
        ``sqrt(rms^2 / 2 + w^2 / 12)`` (px).
    """
    for name, value in (("calibration_rms_px", calibration_rms_px), ("line_width_px", line_width_px)):
        if not math.isfinite(value) or value < 0.0:
            raise ScienceInputError(f"{name}: must be a finite number >= 0, got {value!r}")
    return math.sqrt(calibration_rms_px**2 / 2.0 + line_width_px**2 / 12.0)


def values_jacobian(mapping: ChartMapping, pixels: ArrayLike, *, step_px: float = DEFAULT_STEP_PX) -> FloatArray:
    """Jacobian of ``pixels_to_values`` at each pixel by central differences.

    Parameters
    ----------
    mapping : ChartMapping
        The calibration.
    pixels : array_like, shape (n, 2)
        Pixels (px).
    step_px : float
        Difference step (px), > 0.

    Returns
    -------
    ndarray, shape (n, 2, 2)
        ``J[k, i, j] = d value_i / d pixel_j`` (value units per px); differences of a cyclic x
        (circular charts) are taken across the wrap. NaN where the calibration has no value.
    """
    if not math.isfinite(step_px) or step_px <= 0.0:
        raise ScienceInputError(f"step_px: must be a finite number > 0, got {step_px!r}")
    uv = as_point_array(pixels, field="pixels")
    n = uv.shape[0]
    offsets = np.array([[step_px, 0.0], [-step_px, 0.0], [0.0, step_px], [0.0, -step_px]])
    probes = (uv[None, :, :] + offsets[:, None, :]).reshape(-1, 2)
    values = mapping.pixels_to_values(probes).reshape(4, n, 2)
    du = values[0] - values[1]
    dv = values[2] - values[3]
    period = mapping.x_period_hours
    if period is not None:
        du[:, 0] = np.mod(du[:, 0] + 0.5 * period, period) - 0.5 * period
        dv[:, 0] = np.mod(dv[:, 0] + 0.5 * period, period) - 0.5 * period
    return np.stack([du, dv], axis=2) / (2.0 * step_px)


def value_uncertainty(
    mapping: ChartMapping,
    pixels: ArrayLike,
    *,
    calibration_rms_px: float,
    line_width_px: float,
    step_px: float = DEFAULT_STEP_PX,
) -> FloatArray:
    """Standard uncertainty of the values read at each pixel.

    Parameters
    ----------
    mapping : ChartMapping
        The calibration.
    pixels : array_like, shape (n, 2)
        Traced pixels (px).
    calibration_rms_px : float
        Calibration residual RMS (px); pass ``residual_report.loo_rms_px`` when available.
    line_width_px : float
        Pen line width (px).
    step_px : float
        Finite-difference step (px).

    Returns
    -------
    ndarray, shape (n, 2)
        ``(sigma_x, sigma_y)`` in value units (x: hours on time axes); NaN where there is no value.
    """
    sigma = pixel_sigma(calibration_rms_px=calibration_rms_px, line_width_px=line_width_px)
    jacobian = values_jacobian(mapping, pixels, step_px=step_px)
    return np.asarray(sigma * np.sqrt(np.sum(jacobian**2, axis=2)), dtype=np.float64)


def value_uncertainty_for(
    mapping: ChartMapping, pixels: ArrayLike, *, line_width_px: float, step_px: float = DEFAULT_STEP_PX
) -> FloatArray:
    """:func:`value_uncertainty` with the calibration's own RMS: leave-one-out if known, else fit RMS, else 0."""
    report = mapping.residual_report
    rms = report.loo_rms_px if report.loo_rms_px is not None else report.rms_px
    return value_uncertainty(
        mapping, pixels, calibration_rms_px=rms or 0.0, line_width_px=line_width_px, step_px=step_px
    )
