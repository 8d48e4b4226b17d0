"""Basis functions of the Fourier series ``a0 + sum_k a_k cos(2 pi k x / P) + b_k sin(2 pi k x / P)``."""

from __future__ import annotations

import math
from typing import Any, Final, TypeVar

import numpy as np
from numpy.typing import NDArray

from tracedesk.science.fit_inputs import FloatArray

FloatT = TypeVar("FloatT", bound=np.floating[Any])

TWO_PI_EXTENDED: Final = 2 * np.arccos(np.longdouble(-1.0))


def fourier_parameter_names(degree: int) -> tuple[str, ...]:
    """``("a0", "a1", "b1", ..., "an", "bn", "period")``."""
    names = ["a0"]
    for k in range(1, degree + 1):
        names += [f"a{k}", f"b{k}"]
    return (*names, "period")


def fourier_design(
    x: NDArray[FloatT], *, degree: int, period: float, out: NDArray[FloatT] | None = None
) -> NDArray[FloatT]:
    """Columns ``1, cos(theta), sin(theta), ..., cos(n theta), sin(n theta)``, ``theta = 2 pi x / P``.

    Higher harmonics come from the angle-addition recurrence (rounding grows like ``k * eps``, far
    below the uncertainty of traced data for the degrees allowed). ``out`` may be a Fortran column
    block to fill. Works in float64 and in ``numpy.longdouble`` (with an extended-precision pi).
    """
    two_pi = TWO_PI_EXTENDED if x.dtype == np.longdouble else 2.0 * math.pi
    design = np.empty((x.size, 2 * degree + 1), dtype=x.dtype, order="F") if out is None else out
    design[:, 0] = 1
    if degree == 0:
        return design
    # Straight into the columns, theta in the sine's: no temporaries (fresh large arrays cost page faults).
    theta = np.multiply(x, two_pi / x.dtype.type(period), out=design[:, 2])
    cosine = np.cos(theta, out=design[:, 1])
    sine = np.sin(theta, out=design[:, 2])
    scratch = np.empty_like(theta) if degree >= 2 else theta
    for k in range(2, degree + 1):
        previous_cos, previous_sin = design[:, 2 * k - 3], design[:, 2 * k - 2]
        cos_k, sin_k = design[:, 2 * k - 1], design[:, 2 * k]
        np.multiply(previous_cos, cosine, out=cos_k)
        cos_k -= np.multiply(previous_sin, sine, out=scratch)
        np.multiply(previous_sin, cosine, out=sin_k)
        sin_k += np.multiply(previous_cos, sine, out=scratch)
    return design


def period_derivative(x: FloatArray, coefficients: FloatArray, *, period: float) -> FloatArray:
    """``d f / d P`` of the series with ``coefficients`` (a0, a1, b1, ...) at ``x`` (``y`` per ``x`` unit).

    With ``theta = 2 pi x / P``, ``d theta / d P = -theta / P``, so
    ``d f / d P = sum_k k (a_k sin(k theta) - b_k cos(k theta)) theta / P``.
    """
    degree = (coefficients.size - 1) // 2
    design = fourier_design(x, degree=degree, period=period)
    derivative = np.zeros_like(x)
    for k in range(1, degree + 1):
        a_k, b_k = coefficients[2 * k - 1], coefficients[2 * k]
        derivative += k * (a_k * design[:, 2 * k] - b_k * design[:, 2 * k - 1])
    result: FloatArray = derivative * (2.0 * math.pi * x / period**2)
    return result
