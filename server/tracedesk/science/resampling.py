"""Resampling traces onto uniform grids without inventing values.

A trace is a list of samples ``(x, y)`` sorted by ``x`` (usually elapsed hours). Resampling reads it
at the points of a uniform grid, by linear or PCHIP interpolation of the samples, or by evaluating a
fitted model. Grid points inside a gap -- a span between successive samples longer than
``max_gap`` -- or outside the sampled range get NaN and a flag, never a made-up value. PCHIP
(piecewise cubic Hermite, Fritsch & Carlson, SIAM J. Numer. Anal. 17(2), 1980) is shape
preserving: it does not overshoot between samples, so it never creates extremes the pen did not
draw. Interpolation runs separately on each stretch between gaps, so samples beyond a gap cannot
bend the curve before it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Final

import numpy as np
from numpy.typing import ArrayLike
from scipy.interpolate import PchipInterpolator

from tracedesk.science.errors import ScienceInputError
from tracedesk.science.fit_inputs import BoolArray, FloatArray, as_finite_vector
from tracedesk.science.fit_result import FitResult

METHODS: Final = ("linear", "pchip")
DUPLICATE_POLICIES: Final = ("average", "refuse")
MAX_GRID_POINTS: Final = 10_000_000


@dataclass(frozen=True, eq=False)
class ResampledSeries:
    """Values on a grid with explicit flags.

    Attributes
    ----------
    x : ndarray
        Grid points (``x`` units).
    y : ndarray
        Values (``y`` units); NaN where ``gap`` or ``outside`` is set.
    gap : ndarray of bool
        Inside a span between successive samples longer than ``max_gap``.
    outside : ndarray of bool
        Outside the sampled (or fitted) range.
    method : str
        ``"linear"``, ``"pchip"`` or ``"fit"``.
    """

    x: FloatArray
    y: FloatArray
    gap: BoolArray
    outside: BoolArray
    method: str


def uniform_grid(*, start: float, stop: float, step: float | None = None, count: int | None = None) -> FloatArray:
    """Uniform grid over ``[start, stop]`` by ``step`` (``x`` units) or by point ``count``.

    With ``step`` the points are ``start + k * step`` up to ``stop`` (``stop`` included when it lies on
    the grid to within rounding); with ``count`` they are ``count`` points including both ends.
    """
    if not (math.isfinite(start) and math.isfinite(stop) and stop >= start):
        raise ScienceInputError(f"the grid needs finite start <= stop, got {start:g} and {stop:g}")
    if (step is None) == (count is None):
        raise ScienceInputError("give exactly one of step or count for the grid")
    if count is not None:
        if isinstance(count, bool) or not isinstance(count, int) or count < 1 or count > MAX_GRID_POINTS:
            raise ScienceInputError(f"count must be a whole number from 1 to {MAX_GRID_POINTS}, got {count!r}")
        return np.linspace(start, stop, count) if count > 1 else np.array([float(start)])
    assert step is not None
    if not (math.isfinite(step) and step > 0.0):
        raise ScienceInputError(f"step must be positive, got {step:g}")
    intervals = (stop - start) / step
    if intervals >= MAX_GRID_POINTS:
        raise ScienceInputError(f"the grid would have more than {MAX_GRID_POINTS} points; use a larger step")
    # A stop that is a whole number of steps away, up to rounding, is part of the grid.
    points = math.floor(intervals + 1e-9 * max(1.0, intervals)) + 1
    grid = np.asarray(start + step * np.arange(points), dtype=np.float64)
    grid[-1] = min(grid[-1], stop)
    return grid


def prepare_trace(x: ArrayLike, y: ArrayLike, *, duplicates: str = "average") -> tuple[FloatArray, FloatArray]:
    """Check a trace: finite, same length, sorted by ``x``; samples at the same ``x`` averaged or refused."""
    x_values = as_finite_vector(x, field="x")
    y_values = as_finite_vector(y, field="y")
    if x_values.size != y_values.size:
        raise ScienceInputError(f"x and y have different lengths ({x_values.size} and {y_values.size})")
    if duplicates not in DUPLICATE_POLICIES:
        raise ScienceInputError(f"duplicates must be one of {', '.join(DUPLICATE_POLICIES)}, got {duplicates!r}")
    steps = np.diff(x_values)
    backwards = np.flatnonzero(steps < 0)
    if backwards.size:
        raise ScienceInputError(f"samples must be sorted by x; x decreases after index {int(backwards[0])}")
    repeated = np.flatnonzero(steps == 0)
    if repeated.size == 0:
        return x_values, y_values
    if duplicates == "refuse":
        raise ScienceInputError(f"x repeats at index {int(repeated[0]) + 1} (x = {x_values[repeated[0]]:g})")
    starts = np.flatnonzero(np.r_[True, steps != 0])
    counts = np.diff(np.r_[starts, x_values.size])
    return x_values[starts], np.add.reduceat(y_values, starts) / counts


def gap_flags(sample_x: FloatArray, grid: FloatArray, *, max_gap: float | None) -> tuple[BoolArray, BoolArray]:
    """``(gap, outside)`` flags of grid points against sorted sample positions.

    A grid point is in a gap when it lies strictly inside a span between successive samples longer
    than ``max_gap``; points exactly on a sample are never in a gap.
    """
    outside: BoolArray = (grid < sample_x[0]) | (grid > sample_x[-1])
    gap = np.zeros(grid.shape, dtype=bool)
    if max_gap is None or sample_x.size < 2:
        return gap, outside
    if not (math.isfinite(max_gap) and max_gap > 0.0):
        raise ScienceInputError(f"max_gap must be positive, got {max_gap:g}")
    right = np.clip(np.searchsorted(sample_x, grid, side="left"), 1, sample_x.size - 1)
    span = sample_x[right] - sample_x[right - 1]
    strictly_inside = (grid > sample_x[right - 1]) & (grid < sample_x[right])
    gap = strictly_inside & (span > max_gap) & ~outside
    return gap, outside


def resample_samples(
    x: ArrayLike,
    y: ArrayLike,
    *,
    grid: ArrayLike,
    method: str = "linear",
    max_gap: float | None = None,
    duplicates: str = "average",
) -> ResampledSeries:
    """Read a trace at ``grid`` by ``"linear"`` or ``"pchip"`` interpolation of its samples.

    Parameters
    ----------
    x, y : array_like
        Samples sorted by ``x`` (``x`` and ``y`` units).
    grid : array_like
        Where to read the trace (``x`` units), e.g. from :func:`uniform_grid`.
    method : str
        ``"linear"`` or ``"pchip"``.
    max_gap : float, optional
        Longest span between successive samples bridged by interpolation (``x`` units); longer spans
        are gaps. None bridges every span.
    duplicates : str
        ``"average"`` samples sharing an ``x``, or ``"refuse"`` them.
    """
    if method not in METHODS:
        raise ScienceInputError(f"method must be one of {', '.join(METHODS)}, got {method!r}")
    x_values, y_values = prepare_trace(x, y, duplicates=duplicates)
    if x_values.size == 0:
        raise ScienceInputError("the trace has no samples")
    points = as_finite_vector(grid, field="grid")
    gap, outside = gap_flags(x_values, points, max_gap=max_gap)
    values = np.full(points.shape, np.nan)
    for first, last in _stretches(x_values, max_gap=max_gap):
        inside = (points >= x_values[first]) & (points <= x_values[last]) & ~gap
        values[inside] = _interpolate(x_values[first : last + 1], y_values[first : last + 1], points[inside], method)
    return ResampledSeries(points, values, gap, outside, method)


def _stretches(x: FloatArray, *, max_gap: float | None) -> list[tuple[int, int]]:
    """Index ranges ``(first, last)`` of runs of samples with no gap between neighbours."""
    if max_gap is None:
        return [(0, x.size - 1)]
    breaks = np.flatnonzero(np.diff(x) > max_gap)
    firsts = np.r_[0, breaks + 1]
    lasts = np.r_[breaks, x.size - 1]
    return [(int(a), int(b)) for a, b in zip(firsts, lasts, strict=True)]


def _interpolate(x: FloatArray, y: FloatArray, points: FloatArray, method: str) -> FloatArray:
    if x.size == 1 or method == "linear":
        values: FloatArray = np.interp(points, x, y)
        return values
    # SciPy's slope harmonic mean overflows harmlessly (to a zero slope) for subnormal differences.
    with np.errstate(over="ignore"):
        interpolated: FloatArray = PchipInterpolator(x, y, extrapolate=False)(points)
    return interpolated


def resample_fit(
    fit: FitResult, *, grid: ArrayLike, sample_x: ArrayLike | None = None, max_gap: float | None = None
) -> ResampledSeries:
    """Evaluate a fitted model at ``grid``, NaN outside its domain and inside gaps of the samples.

    Parameters
    ----------
    fit : FitResult
        The fitted model.
    grid : array_like
        Where to evaluate (``x`` units).
    sample_x : array_like, optional
        Sorted ``x`` of the samples the model was fitted to; needed to honour ``max_gap``.
    max_gap : float, optional
        As for :func:`resample_samples`.
    """
    points = as_finite_vector(grid, field="grid")
    if sample_x is None:
        if max_gap is not None:
            raise ScienceInputError("max_gap needs the sample x positions (sample_x)")
        positions = np.array(fit.domain, dtype=np.float64)
    else:
        positions, _ = prepare_trace(sample_x, np.zeros(np.size(sample_x)), duplicates="average")
    gap, outside = gap_flags(positions, points, max_gap=max_gap)
    outside = outside | fit.outside_domain(points)
    values = fit.predict(points)
    values[gap | outside] = np.nan
    return ResampledSeries(points, values, gap, outside, "fit")
