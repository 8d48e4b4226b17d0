"""The calibration's share of a fit's coefficient covariance, added to the residual-based one.

The residual-based covariance (:mod:`tracedesk.science.fit_covariance`) cannot see an error the
calibration puts on every sample at once. Given its covariance factor ``L`` (``Cov_cal(y) = L L^T``, see
:mod:`tracedesk.science.calibration_covariance`), the coefficients move by ``B L`` where ``B`` is the
fit's linear map from ``y`` to its coefficients: ``B = (J^T W^2 J)^-1 J^T W^2`` with ``J`` the model's
parameter gradient at the samples (the design matrix of a linear family; the Jacobian at the solution of
a nonlinear one, i.e. the Gauss-Newton linearisation) and ``W`` the fit weights ``1 / sigma``. So
``Cov_cal = (B L)(B L)^T`` (JCGM 100:2008, GUM, 5.2), in the internal parametrisation, then carried to
the reported one by the fit's ``parameter_map``; the total is the residual-based covariance plus it.

A calibration error in x moves a sample along the curve: to first order it reads as a y error of
``-f'(x) dx``, so the y factor used is ``L_y - f'(x) L_x`` (``f'`` by forward differences).

A smoothing spline with its smoothing held fixed and an exact interpolation are linear in ``y`` too, though
not least-squares maps: ``B`` is then the spline of each column (the penalty shrinks it) or the reading of the
node values from the samples.

The stats gain ``calibration_share``, the largest fraction of a reported coefficient's variance that
comes from the calibration (0 to 1), ``calibration_click_sigma_px`` (``s``), ``calibration_dof`` (the
degrees of freedom ``s`` was estimated with; None when it is a judged floor) and
``calibration_exact_inputs`` (spec fields held exact, e.g. a typed pen arm). The calibration part is also
kept apart so bands can use the Welch-Satterthwaite degrees of freedom (:class:`FitResult`).
"""

from __future__ import annotations

import dataclasses
import math
from typing import Any, Final

import numpy as np
from numpy.typing import ArrayLike

from tracedesk.science.calibration_covariance import CalibrationFactor
from tracedesk.science.errors import ScienceInputError
from tracedesk.science.fit_inputs import FloatArray
from tracedesk.science.fit_interpolation import interpolation_response
from tracedesk.science.fit_result import FitResult, Parameters
from tracedesk.science.fit_spline import spline_response

CALIBRATED_FAMILIES: Final = frozenset(
    {"polynomial", "fourier", "exponential", "power", "logarithmic", "spline", "interpolation"}
)
# Forward-difference step for the slope, as a fraction of the traced range.
SLOPE_STEP_FRACTION: Final = 1e-6


def calibration_coefficient_covariance(
    result: FitResult, x: FloatArray, weights: FloatArray, factor: CalibrationFactor
) -> tuple[FloatArray, FloatArray]:
    """``Cov_cal`` of the internal parameters and of the reported ones.

    Parameters
    ----------
    result : FitResult
        A least-squares fit of samples at ``x``.
    x : ndarray, shape (n,)
        Sample abscissae (chart units), in the rows' order of ``factor``.
    weights : ndarray, shape (n,)
        Fit weights ``1 / sigma`` (ones for an unweighted fit).
    factor : CalibrationFactor
        The samples' calibration covariance factor.
    """
    y_factor = factor.y - _slope(result, x)[:, None] * factor.x
    moved = coefficient_response(result, x, weights, y_factor)
    internal: FloatArray = moved @ moved.T
    mapping = result.parameter_map
    if mapping is None:
        reported_size = len(result.parameter_names)
        mapping = np.eye(reported_size, internal.shape[0])
    reported: FloatArray = mapping @ internal @ mapping.T
    return internal, reported


def coefficient_response(result: FitResult, x: FloatArray, weights: FloatArray, shifts: FloatArray) -> FloatArray:
    """``B @ shifts``: the internal parameters' shift per column of sample ``y`` shifts (rows in the order of ``x``)."""
    if result.family == "spline":
        return spline_response(x, weights, shifts, smoothing=float(result.options["smoothing"]))
    if result.family == "interpolation":
        return interpolation_response(x, weights, shifts, node_count=int(result.options["degree"]) + 1)
    gradient = result.model.parameter_gradient(x)
    moved = np.linalg.lstsq(gradient * weights[:, None], shifts * weights[:, None], rcond=None)[0]
    return np.asarray(moved, dtype=np.float64)


def _slope(result: FitResult, x: FloatArray) -> FloatArray:
    """``f'(x)`` (y units per x unit) by forward differences."""
    step = SLOPE_STEP_FRACTION * max(result.domain[1] - result.domain[0], 1e-300)
    with np.errstate(invalid="ignore", over="ignore"):
        slope: FloatArray = (result.model.evaluate(x + step) - result.model.evaluate(x)) / step
    return np.where(np.isfinite(slope), slope, 0.0)


def with_calibration_covariance(
    result: FitResult, x: ArrayLike, sigma: ArrayLike | None, factor: CalibrationFactor
) -> FitResult:
    """``result`` with the calibration's covariance added to its covariance, errors and bands.

    ``x`` and ``sigma`` are those the fit was given, in the rows' order of ``factor``. Families outside
    :data:`CALIBRATED_FAMILIES`, fits without a covariance and factors with non-finite entries are
    returned with ``calibration_share`` None (nothing added).
    """
    abscissae = np.asarray(x, dtype=np.float64)
    if factor.y.shape[0] != abscissae.size:
        raise ScienceInputError(f"the calibration factor has {factor.y.shape[0]} rows for {abscissae.size} samples")
    stats: dict[str, Any] = dict(result.stats)
    stats.update(
        calibration_share=None,
        calibration_click_sigma_px=factor.click_sigma_px,
        calibration_dof=factor.dof if math.isfinite(factor.dof) else None,
        calibration_exact_inputs=list(factor.exact_inputs),
    )
    usable = bool(np.all(np.isfinite(factor.x)) and np.all(np.isfinite(factor.y)))
    internal_total = result.model.internal_covariance
    if result.family not in CALIBRATED_FAMILIES or result.covariance is None or internal_total is None or not usable:
        return dataclasses.replace(result, stats=stats)
    weights = np.ones_like(abscissae) if sigma is None else 1.0 / np.asarray(sigma, dtype=np.float64)
    internal, reported = calibration_coefficient_covariance(result, abscissae, weights, factor)
    total = result.covariance + reported
    stats["calibration_share"] = _largest_share(reported, total)
    model = dataclasses.replace(result.model, internal_covariance=internal_total + internal)  # type: ignore[type-var]
    return dataclasses.replace(
        result,
        covariance=total,
        standard_errors=_errors_like(result, total, internal_total + internal),
        stats=stats,
        model=model,
        calibration_covariance=internal,
        calibration_dof=factor.dof,
    )


def _largest_share(calibration: FloatArray, total: FloatArray) -> float:
    """Largest ``Var_cal / Var_total`` over the reported parameters (0 where the total is 0)."""
    variance = np.diag(total)
    usable = variance > 0.0
    if not bool(usable.any()):
        return 0.0
    return float(np.max(np.diag(calibration)[usable] / variance[usable]))


def _errors_like(result: FitResult, covariance: FloatArray, internal: FloatArray) -> Parameters:
    """Standard errors from ``covariance`` (reported) and ``internal`` in the shape of ``result.standard_errors``."""
    errors = np.sqrt(np.maximum(np.diag(covariance), 0.0))
    if result.family in ("spline", "interpolation") and isinstance(result.standard_errors, dict):
        # Lists under names: the spline's coefficients; the interpolation's node values and coefficients.
        shaped: dict[str, float | list[float]] = dict(result.standard_errors)
        shaped["coefficients"] = [float(value) for value in errors]
        if result.family == "interpolation":
            shaped["values"] = [float(value) for value in np.sqrt(np.maximum(np.diag(internal), 0.0))]
        return shaped
    if isinstance(result.standard_errors, list):
        return [float(value) for value in errors]
    updated: dict[str, float | list[float]] = dict(result.standard_errors)
    for name, value in zip(result.parameter_names, errors, strict=True):
        updated[name] = float(value)
    return updated
