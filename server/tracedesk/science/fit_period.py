"""Estimating the period of a Fourier series from the samples.

A least-squares periodogram: for each trial frequency on a grid, the residual sum of squares of the
best degree-``n`` Fourier series (all harmonics, not just the fundamental, so skewed daily shapes
are still found); then the best grid period is refined together with all coefficients by
nonlinear least squares (``scipy.optimize.least_squares``). The grid is uniform in frequency with
spacing ``1 / (5 * span)``, five times finer than the width of a periodogram peak (the classic
oversampling of Lomb-Scargle periodograms; VanderPlas, ApJS 236:16, 2018, sec. 7.1; from memory).
"""

from __future__ import annotations

import math
from typing import Final

import numpy as np
from scipy import optimize

from tracedesk.science.errors import ScienceInputError
from tracedesk.science.fit_fourier_basis import fourier_design, period_derivative
from tracedesk.science.fit_inputs import FloatArray, Samples

MAX_CYCLES: Final = 100
OVERSAMPLING: Final = 5
# The grid search runs on at most this many x bins; the refinement always uses every sample.
GRID_SAMPLE_LIMIT: Final = 2048
BATCH_ELEMENTS: Final = 2_000_000


def default_period_bounds(samples: Samples, *, degree: int) -> tuple[float, float]:
    """Search range for the period (``x`` units): from what the sample spacing can resolve to the span.

    The shortest period lets the highest harmonic keep four samples per cycle (typical spacing is the
    median step between sorted samples) and allows at most 100 cycles over the traced range.
    """
    ordered = np.sort(samples.x)
    span = float(ordered[-1] - ordered[0])
    steps = np.diff(ordered)
    positive = steps[steps > 0]
    spacing = float(np.median(positive)) if positive.size else span
    return max(span / MAX_CYCLES, 4.0 * degree * spacing), span


def estimate_period(samples: Samples, *, degree: int, bounds: tuple[float, float] | None) -> float:
    """Best-fitting period (``x`` units) of a degree-``degree`` Fourier series through the samples."""
    if degree < 1:
        raise ScienceInputError("estimating a period needs a Fourier degree of at least 1")
    low, high = _checked_bounds(samples, degree=degree, bounds=bounds)
    grid_x, grid_y, grid_w = _binned(samples)
    span = float(samples.x.max() - samples.x.min())
    frequencies = np.arange(1.0 / high, 1.0 / low, 1.0 / (OVERSAMPLING * span))
    frequencies = np.append(frequencies, 1.0 / low)
    rss = _periodogram(grid_x, grid_y, grid_w, frequencies=frequencies, degree=degree)
    start = 1.0 / float(frequencies[int(np.argmin(rss))])
    return _refine_period(samples, degree=degree, period=start, bounds=(low, high))


def _checked_bounds(samples: Samples, *, degree: int, bounds: tuple[float, float] | None) -> tuple[float, float]:
    if bounds is None:
        low, high = default_period_bounds(samples, degree=degree)
    else:
        try:
            low, high = (float(value) for value in bounds)
        except (TypeError, ValueError) as error:
            raise ScienceInputError("period_bounds must be two numbers [shortest, longest]") from error
    if not (math.isfinite(low) and math.isfinite(high) and 0.0 < low < high):
        raise ScienceInputError(
            f"cannot search for a period between {low:g} and {high:g}: the range must be positive "
            "and the samples must span enough x to resolve it"
        )
    return low, high


def _binned(samples: Samples) -> tuple[FloatArray, FloatArray, FloatArray]:
    """Samples averaged into at most GRID_SAMPLE_LIMIT equal-width x bins (weights combined)."""
    if samples.count <= GRID_SAMPLE_LIMIT:
        return samples.x, samples.y, samples.weights
    low, high = float(samples.x.min()), float(samples.x.max())
    index = np.minimum(((samples.x - low) / (high - low) * GRID_SAMPLE_LIMIT).astype(np.intp), GRID_SAMPLE_LIMIT - 1)
    weight_sum = np.bincount(index, weights=samples.weights**2, minlength=GRID_SAMPLE_LIMIT)
    used = weight_sum > 0
    x = np.bincount(index, weights=samples.weights**2 * samples.x, minlength=GRID_SAMPLE_LIMIT)[used]
    y = np.bincount(index, weights=samples.weights**2 * samples.y, minlength=GRID_SAMPLE_LIMIT)[used]
    return x / weight_sum[used], y / weight_sum[used], np.sqrt(weight_sum[used])


def _periodogram(
    x: FloatArray, y: FloatArray, weights: FloatArray, *, frequencies: FloatArray, degree: int
) -> FloatArray:
    """Weighted residual sum of squares of the best Fourier series at each trial frequency.

    Normal equations are fine here: only the location of the minimum matters, and with at least one
    traced cycle the columns are nearly orthogonal.
    """
    columns = 2 * degree + 1
    batch = max(1, BATCH_ELEMENTS // (x.size * columns))
    weighted_y = weights * y
    rss = np.empty(frequencies.size)
    for start in range(0, frequencies.size, batch):
        chunk = frequencies[start : start + batch]
        design = np.stack([fourier_design(x, degree=degree, period=1.0 / f) for f in chunk]) * weights[:, None]
        gram = np.swapaxes(design, 1, 2) @ design
        projection = np.swapaxes(design, 1, 2) @ weighted_y
        try:
            solved = np.linalg.solve(gram, projection[..., None])[..., 0]
        except np.linalg.LinAlgError:
            solved = np.stack([np.linalg.lstsq(g, b, rcond=None)[0] for g, b in zip(gram, projection, strict=True)])
        rss[start : start + batch] = weighted_y @ weighted_y - np.sum(projection * solved, axis=1)
    return rss


def _refine_period(samples: Samples, *, degree: int, period: float, bounds: tuple[float, float]) -> float:
    """Nonlinear least squares over all coefficients and the period, started at the grid optimum."""
    weights = samples.weights
    start_design = fourier_design(samples.x, degree=degree, period=period) * weights[:, None]
    coefficients = np.linalg.lstsq(start_design, weights * samples.y, rcond=None)[0]

    def residuals(theta: FloatArray) -> FloatArray:
        design = fourier_design(samples.x, degree=degree, period=float(theta[-1]))
        result: FloatArray = weights * (design @ theta[:-1] - samples.y)
        return result

    def jacobian(theta: FloatArray) -> FloatArray:
        current = float(theta[-1])
        design = fourier_design(samples.x, degree=degree, period=current)
        column = period_derivative(samples.x, theta[:-1], period=current)
        result: FloatArray = np.column_stack([design, column]) * weights[:, None]
        return result

    lower = np.full(coefficients.size + 1, -np.inf)
    upper = np.full(coefficients.size + 1, np.inf)
    lower[-1], upper[-1] = bounds
    initial = np.append(coefficients, np.clip(period, *bounds))
    solution = optimize.least_squares(
        residuals, initial, jac=jacobian, bounds=(lower, upper), x_scale="jac", method="trf"
    )
    return float(solution.x[-1])
