"""Per-period summaries of a trace and plausibility of successive values.

Time is elapsed hours (float). The trace is the piecewise-linear curve through its samples, as drawn
between the digitized vertices; spans longer than ``max_gap`` and spans touching a NaN value are
gaps and contribute nothing. For each period ``[start, end)`` the summary gives the time-weighted
mean (trapezoid rule over the covered part), the minimum and maximum of the curve with their
times, the integral (value x hours), the time spent above and below a threshold (exact crossing
times of the linear pieces), the number of samples and the fraction of the period covered.

The plausibility check compares successive values with the largest change allowed over their time
step, e.g. the WMO limits below.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Final

import numpy as np
from numpy.typing import ArrayLike, NDArray

from tracedesk.science.errors import ScienceInputError
from tracedesk.science.fit_inputs import BoolArray, FloatArray, as_finite_vector

# Largest plausible change between successive values over a span (hours -> change), WMO (1993)
# guidance as used by the dataresqc R package (see REFERENCES.md, "Data rescue practice").
WMO_AIR_TEMPERATURE_STEP_LIMITS: Final[Mapping[float, float]] = {1.0: 4.0, 2.0: 7.0, 3.0: 9.0, 6.0: 15.0, 12.0: 25.0}
WMO_PRESSURE_STEP_LIMITS: Final[Mapping[float, float]] = {1.0: 3.0, 2.0: 6.0, 3.0: 9.0, 6.0: 18.0, 12.0: 36.0}
MAX_PERIODS: Final = 1_000_000


@dataclass(frozen=True)
class PeriodSummary:
    """Summary of the trace over ``[start, end)`` (hours); value fields are None when nothing is covered.

    ``integral`` is in ``integral_unit`` (the value unit times hours); ``time_above`` and
    ``time_below`` are hours strictly above/below the threshold (None without a threshold);
    ``coverage`` is the covered fraction of the period (0 to 1).
    """

    start: float
    end: float
    mean: float | None
    minimum: float | None
    minimum_time: float | None
    maximum: float | None
    maximum_time: float | None
    integral: float | None
    integral_unit: str
    time_above: float | None
    time_below: float | None
    sample_count: int
    coverage: float


def period_edges(*, start: float, stop: float, span_hours: float, origin: float = 0.0) -> FloatArray:
    """Edges of consecutive periods of ``span_hours`` aligned to ``origin`` that cover ``[start, stop]``.

    E.g. ``span_hours=24, origin=0`` gives day boundaries of elapsed time; ``origin=6`` days from 06:00.
    """
    if not (math.isfinite(span_hours) and span_hours > 0.0):
        raise ScienceInputError(f"span_hours must be positive, got {span_hours:g}")
    if not (math.isfinite(start) and math.isfinite(stop) and math.isfinite(origin) and stop >= start):
        raise ScienceInputError("period edges need finite start <= stop and origin")
    first = math.floor((start - origin) / span_hours)
    last = max(math.ceil((stop - origin) / span_hours), first + 1)
    if last - first > MAX_PERIODS:
        raise ScienceInputError(f"more than {MAX_PERIODS} periods requested; use a longer span")
    edges: FloatArray = origin + span_hours * np.arange(first, last + 1, dtype=np.float64)
    return edges


def _prepared_trace(time_hours: ArrayLike, values: ArrayLike) -> tuple[FloatArray, FloatArray]:
    """Sorted times (duplicates averaged) and values; NaN values are allowed and mark gaps."""
    times = as_finite_vector(time_hours, field="time")
    try:
        y = np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError) as error:
        raise ScienceInputError("values must be numbers (NaN allowed for gaps)") from error
    if y.shape != times.shape:
        raise ScienceInputError(f"time and values have different lengths ({times.size} and {y.size})")
    if bool(np.any(np.isinf(y))):
        raise ScienceInputError("values contain infinity")
    steps = np.diff(times)
    if bool(np.any(steps < 0)):
        raise ScienceInputError(
            f"samples must be sorted by time; time decreases after index {int(np.argmax(steps < 0))}"
        )
    if bool(np.all(steps > 0)):
        return times, y
    starts = np.flatnonzero(np.r_[True, steps != 0])
    counts = np.diff(np.r_[starts, times.size])
    return times[starts], np.add.reduceat(y, starts) / counts


@dataclass(frozen=True)
class _Pieces:
    """The trace cut at every sample and period edge: linear pieces, each inside one period."""

    period: NDArray[np.intp]
    t0: FloatArray
    t1: FloatArray
    v0: FloatArray
    v1: FloatArray


def _pieces(times: FloatArray, y: FloatArray, edges: FloatArray, *, max_gap: float | None) -> _Pieces:
    inner_edges = edges[(edges > times[0]) & (edges < times[-1])]
    cuts = np.unique(np.concatenate([times, inner_edges]))
    left, right = cuts[:-1], cuts[1:]
    segment = np.clip(np.searchsorted(times, left, side="right") - 1, 0, times.size - 2)
    x0, x1, y0, y1 = times[segment], times[segment + 1], y[segment], y[segment + 1]
    valid: BoolArray = np.isfinite(y0) & np.isfinite(y1)
    if max_gap is not None:
        valid &= (x1 - x0) <= max_gap
    slope = (y1 - y0) / (x1 - x0)
    period = np.searchsorted(edges, left, side="right") - 1
    keep = valid & (period >= 0) & (period < edges.size - 1)
    return _Pieces(
        period[keep],
        left[keep],
        right[keep],
        (y0 + slope * (left - x0))[keep],
        (y0 + slope * (right - x0))[keep],
    )


def _time_beyond(pieces: _Pieces, threshold: float, *, above: bool) -> FloatArray:
    """Duration of each linear piece strictly above (or below) ``threshold``."""
    sign = 1.0 if above else -1.0
    a, b = sign * (pieces.v0 - threshold), sign * (pieces.v1 - threshold)
    duration = pieces.t1 - pieces.t0
    with np.errstate(invalid="ignore", divide="ignore"):
        # Fraction of the piece on the positive side of the crossing of a linear function.
        fraction = np.where(a > 0, np.where(b > 0, 1.0, a / (a - b)), np.where(b > 0, b / (b - a), 0.0))
    result: FloatArray = duration * fraction
    return result


def summarise_periods(
    time_hours: ArrayLike,
    values: ArrayLike,
    *,
    edges: ArrayLike | None = None,
    span_hours: float | None = None,
    origin: float = 0.0,
    threshold: float | None = None,
    unit: str = "",
    max_gap: float | None = None,
) -> list[PeriodSummary]:
    """Summaries of a trace per period.

    Parameters
    ----------
    time_hours, values : array_like
        Samples sorted by time (hours; value units); NaN values mark gaps; repeated times are averaged.
    edges : array_like, optional
        Explicit increasing period edges (hours). Otherwise ``span_hours`` (and ``origin``) define
        periods covering the trace.
    span_hours : float, optional
        Period length (hours), e.g. 1 or 24.
    origin : float
        An edge of the periods (hours), default 0.
    threshold : float, optional
        Value for ``time_above`` / ``time_below`` (value units).
    unit : str
        Unit of the values; the integral is in ``unit*h``.
    max_gap : float, optional
        Longest span between successive samples treated as traced (hours).
    """
    times, y = _prepared_trace(time_hours, values)
    if times.size < 1:
        raise ScienceInputError("the trace has no samples")
    period_bounds = _period_bounds(times, edges=edges, span_hours=span_hours, origin=origin)
    if max_gap is not None and not (math.isfinite(max_gap) and max_gap > 0):
        raise ScienceInputError(f"max_gap must be positive, got {max_gap:g}")
    count = period_bounds.size - 1
    if times.size < 2:
        pieces = _Pieces(np.zeros(0, np.intp), *(np.zeros(0) for _ in range(4)))
    else:
        pieces = _pieces(times, y, period_bounds, max_gap=max_gap)
    totals = _period_totals(pieces, count, threshold=threshold)
    sample_period = np.searchsorted(period_bounds, times[np.isfinite(y)], side="right") - 1
    samples = np.bincount(sample_period[(sample_period >= 0) & (sample_period < count)], minlength=count)
    minimum, minimum_time = _extreme(pieces, count, largest=False)
    maximum, maximum_time = _extreme(pieces, count, largest=True)
    return [
        PeriodSummary(
            start=float(period_bounds[k]),
            end=float(period_bounds[k + 1]),
            mean=float(totals.integral[k] / totals.covered[k]) if totals.covered[k] > 0 else None,
            minimum=minimum[k],
            minimum_time=minimum_time[k],
            maximum=maximum[k],
            maximum_time=maximum_time[k],
            integral=float(totals.integral[k]) if totals.covered[k] > 0 else None,
            integral_unit=f"{unit}*h" if unit else "h",
            time_above=None if totals.above is None else float(totals.above[k]),
            time_below=None if totals.below is None else float(totals.below[k]),
            sample_count=int(samples[k]),
            coverage=float(totals.covered[k] / (period_bounds[k + 1] - period_bounds[k])),
        )
        for k in range(count)
    ]


@dataclass(frozen=True)
class _Totals:
    """Per-period sums over the linear pieces (hours, value x hours)."""

    covered: FloatArray
    integral: FloatArray
    above: FloatArray | None
    below: FloatArray | None


def _period_totals(pieces: _Pieces, count: int, *, threshold: float | None) -> _Totals:
    def per_period(weights: FloatArray) -> FloatArray:
        return np.bincount(pieces.period, weights=weights, minlength=count).astype(np.float64)

    duration = pieces.t1 - pieces.t0
    # Trapezoid rule: exact for the piecewise-linear trace.
    covered, integral = per_period(duration), per_period(duration * (pieces.v0 + pieces.v1) / 2.0)
    if threshold is None:
        return _Totals(covered, integral, None, None)
    above = per_period(_time_beyond(pieces, threshold, above=True))
    return _Totals(covered, integral, above, per_period(_time_beyond(pieces, threshold, above=False)))


def _period_bounds(
    times: FloatArray, *, edges: ArrayLike | None, span_hours: float | None, origin: float
) -> FloatArray:
    if (edges is None) == (span_hours is None):
        raise ScienceInputError("give either explicit period edges or span_hours")
    if edges is None:
        assert span_hours is not None
        return period_edges(start=float(times[0]), stop=float(times[-1]), span_hours=span_hours, origin=origin)
    bounds = as_finite_vector(edges, field="edges")
    if bounds.size < 2 or bool(np.any(np.diff(bounds) <= 0)):
        raise ScienceInputError("period edges must be at least two strictly increasing times")
    return bounds


def _extreme(pieces: _Pieces, count: int, *, largest: bool) -> tuple[list[float | None], list[float | None]]:
    """Per period, the smallest (or largest) value on the curve and its earliest time."""
    periods = np.concatenate([pieces.period, pieces.period])
    times = np.concatenate([pieces.t0, pieces.t1])
    values = np.concatenate([pieces.v0, pieces.v1])
    order = np.lexsort((times, -values if largest else values, periods))
    first = np.r_[True, np.diff(periods[order]) != 0]
    chosen = order[first]
    result_values: list[float | None] = [None] * count
    result_times: list[float | None] = [None] * count
    for index in chosen:
        result_values[int(periods[index])] = float(values[index])
        result_times[int(periods[index])] = float(times[index])
    return result_values, result_times


@dataclass(frozen=True)
class StepFlag:
    """Successive samples ``index`` and ``next_index`` whose change exceeds the limit for their time step.

    ``next_index`` is ``index + 1`` unless NaN values in between were skipped.
    """

    index: int
    next_index: int
    start_time: float
    end_time: float
    change: float
    limit: float
    limit_span_hours: float


def check_successive_changes(
    time_hours: ArrayLike, values: ArrayLike, *, limits: Mapping[float, float]
) -> list[StepFlag]:
    """Flag successive values that change more than plausible over their time step.

    Parameters
    ----------
    time_hours, values : array_like
        Samples sorted by time (hours; value units). NaN values are skipped.
    limits : mapping
        Span (hours) -> largest plausible absolute change over that span (value units), e.g.
        :data:`WMO_AIR_TEMPERATURE_STEP_LIMITS`. A pair ``dt`` hours apart is held to the limit of the
        shortest listed span ``>= dt``; pairs further apart than the longest span are not checked.
    """
    times = as_finite_vector(time_hours, field="time")
    y = np.asarray(values, dtype=np.float64)
    if y.shape != times.shape:
        raise ScienceInputError(f"time and values have different lengths ({times.size} and {y.size})")
    if not limits or any(not (span > 0 and change >= 0) for span, change in limits.items()):
        raise ScienceInputError("limits must map positive spans (hours) to non-negative changes")
    if bool(np.any(np.diff(times) < 0)):
        raise ScienceInputError("samples must be sorted by time")
    finite = np.flatnonzero(np.isfinite(y))
    spans = np.array(sorted(limits))
    allowed = np.array([limits[span] for span in spans])
    step = np.diff(times[finite])
    change = np.diff(y[finite])
    which = np.searchsorted(spans, step, side="left")
    checked = which < spans.size
    flags = []
    for pair in np.flatnonzero(checked & (np.abs(change) > allowed[np.minimum(which, spans.size - 1)])):
        first, second = int(finite[pair]), int(finite[pair + 1])
        flags.append(
            StepFlag(
                first,
                second,
                float(times[first]),
                float(times[second]),
                float(change[pair]),
                float(allowed[which[pair]]),
                float(spans[which[pair]]),
            )
        )
    return flags
