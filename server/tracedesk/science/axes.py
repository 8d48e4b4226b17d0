"""Axis scales of printed charts: value <-> linear chart coordinate, and time on the time axis.

A printed scale places a value at a distance along the paper that is linear in its *chart coordinate*:
the value itself on linear and time scales, ``log10(value)`` on logarithmic scales and ``sqrt(value)``
on square-root scales. Registration then only has to find a geometric mapping between pixels and chart
coordinates, and the axis turns chart coordinates back into values.

Time on a chart is elapsed hours since the chart's time zero (a float). When the moment the chart
started is known it is an ISO 8601 date-time with an explicit UTC offset, and the functions here
convert between the two. Strip charts move at a known chart speed, which with the scan resolution
gives the time scale in pixels per hour.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import Final, Protocol

import numpy as np
from numpy.typing import ArrayLike, NDArray

from tracedesk.science.errors import ScienceInputError

FloatArray = NDArray[np.float64]

SCALE_NAMES: Final = ("linear", "log10", "sqrt", "time")
MM_PER_INCH: Final = 25.4


class AxisScale(Protocol):
    """A printed axis scale: values (axis units) <-> linear chart coordinates."""

    @property
    def name(self) -> str:
        """Scale name, one of :data:`SCALE_NAMES`."""
        ...

    def values_to_chart(self, values: ArrayLike, *, field: str = "value") -> FloatArray:
        """Chart coordinates of values; raises ScienceInputError for values the scale cannot show."""
        ...

    def chart_to_values(self, chart: ArrayLike) -> FloatArray:
        """Values at chart coordinates; NaN where the scale has no value."""
        ...


def _as_float_array(values: ArrayLike, *, field: str) -> FloatArray:
    try:
        array = np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError) as error:
        raise ScienceInputError(f"{field}: expected numbers") from error
    return array


@dataclass(frozen=True)
class LinearScale:
    """Linear scale: the chart coordinate is the value itself."""

    @property
    def name(self) -> str:
        """``"linear"``."""
        return "linear"

    def values_to_chart(self, values: ArrayLike, *, field: str = "value") -> FloatArray:
        """Chart coordinates (axis units) of ``values`` (axis units)."""
        return _as_float_array(values, field=field).copy()

    def chart_to_values(self, chart: ArrayLike) -> FloatArray:
        """Values (axis units) at chart coordinates (axis units)."""
        return _as_float_array(chart, field="chart coordinate").copy()


@dataclass(frozen=True)
class Log10Scale:
    """Logarithmic scale: the chart coordinate is ``log10(value)``; values must be positive."""

    @property
    def name(self) -> str:
        """``"log10"``."""
        return "log10"

    def values_to_chart(self, values: ArrayLike, *, field: str = "value") -> FloatArray:
        """``log10`` of ``values`` (axis units, > 0); NaN passes through as NaN.

        Raises
        ------
        ScienceInputError
            If a finite value is zero or negative: a logarithmic scale cannot show it.
        """
        array = _as_float_array(values, field=field)
        if np.any(array <= 0.0):
            worst = float(np.min(array[~np.isnan(array)]))
            raise ScienceInputError(f"{field}: a log10 axis needs values > 0, got {worst:g}")
        with np.errstate(invalid="ignore"):
            return np.log10(array)

    def chart_to_values(self, chart: ArrayLike) -> FloatArray:
        """Values ``10**chart`` (axis units) at chart coordinates (decades)."""
        with np.errstate(over="ignore"):
            return np.power(10.0, _as_float_array(chart, field="chart coordinate"))


@dataclass(frozen=True)
class SqrtScale:
    """Square-root scale: the chart coordinate is ``sqrt(value)``; values must be >= 0."""

    @property
    def name(self) -> str:
        """``"sqrt"``."""
        return "sqrt"

    def values_to_chart(self, values: ArrayLike, *, field: str = "value") -> FloatArray:
        """``sqrt`` of ``values`` (axis units, >= 0); NaN passes through as NaN.

        Raises
        ------
        ScienceInputError
            If a finite value is negative: a square-root scale cannot show it.
        """
        array = _as_float_array(values, field=field)
        if np.any(array < 0.0):
            worst = float(np.min(array[~np.isnan(array)]))
            raise ScienceInputError(f"{field}: a sqrt axis needs values >= 0, got {worst:g}")
        return np.sqrt(array)

    def chart_to_values(self, chart: ArrayLike) -> FloatArray:
        """Values ``chart**2`` (axis units); NaN below the scale's zero, where no value exists."""
        array = _as_float_array(chart, field="chart coordinate")
        return np.where(array >= 0.0, array * array, np.nan)


@dataclass(frozen=True)
class TimeScale:
    """Time scale in elapsed hours since the chart's time zero (linear in hours).

    Parameters
    ----------
    start : datetime or None
        The moment of time zero, timezone-aware, when it is known; used only to convert elapsed hours
        to and from absolute date-times (:meth:`hours_to_iso`, :meth:`iso_to_hours`).
    """

    start: datetime | None = None

    def __post_init__(self) -> None:
        if self.start is not None and self.start.utcoffset() is None:
            raise ScienceInputError("start: a chart start time needs an explicit UTC offset")

    @property
    def name(self) -> str:
        """``"time"``."""
        return "time"

    def values_to_chart(self, values: ArrayLike, *, field: str = "value") -> FloatArray:
        """Chart coordinates (hours) of elapsed times (hours)."""
        return _as_float_array(values, field=field).copy()

    def chart_to_values(self, chart: ArrayLike) -> FloatArray:
        """Elapsed times (hours) at chart coordinates (hours)."""
        return _as_float_array(chart, field="chart coordinate").copy()

    def iso_to_hours(self, texts: Sequence[str], *, field: str = "time") -> FloatArray:
        """Elapsed hours since :attr:`start` of ISO 8601 date-times with UTC offsets."""
        if self.start is None:
            raise ScienceInputError(f"{field}: date-times need the chart start time")
        return datetimes_to_elapsed_hours([parse_iso_datetime(t, field=field) for t in texts], start=self.start)

    def hours_to_iso(self, hours: ArrayLike) -> list[str | None]:
        """ISO 8601 date-times (offset of :attr:`start`) of elapsed hours; None where hours are NaN."""
        if self.start is None:
            raise ScienceInputError("start: converting hours to date-times needs the chart start time")
        return elapsed_hours_to_iso(hours, start=self.start)


def scale_from_name(name: str, *, start: datetime | None = None, field: str = "scale") -> AxisScale:
    """The axis scale called ``name`` (one of :data:`SCALE_NAMES`); ``start`` applies to time scales."""
    if name == "linear":
        return LinearScale()
    if name == "log10":
        return Log10Scale()
    if name == "sqrt":
        return SqrtScale()
    if name == "time":
        return TimeScale(start=start)
    raise ScienceInputError(f"{field}: unknown scale {name!r}; expected one of {', '.join(SCALE_NAMES)}")


def parse_iso_datetime(text: str, *, field: str = "time") -> datetime:
    """Parse an ISO 8601 date-time that carries an explicit UTC offset (``Z`` or ``+hh:mm``).

    Raises
    ------
    ScienceInputError
        If the text is not an ISO 8601 date-time or has no offset (local times are ambiguous).
    """
    if not isinstance(text, str):
        raise ScienceInputError(f"{field}: expected an ISO 8601 date-time string")
    try:
        moment = datetime.fromisoformat(text)
    except ValueError as error:
        raise ScienceInputError(f"{field}: {text!r} is not an ISO 8601 date-time") from error
    if moment.utcoffset() is None:
        raise ScienceInputError(f"{field}: {text!r} has no UTC offset (add e.g. 'Z' or '+01:00')")
    return moment


def datetimes_to_elapsed_hours(moments: Sequence[datetime], *, start: datetime) -> FloatArray:
    """Elapsed hours from ``start`` to each timezone-aware moment (negative before the start)."""
    seconds = [(moment - start) / timedelta(seconds=1) for moment in moments]
    return np.asarray(seconds, dtype=np.float64) / 3600.0


def elapsed_hours_to_iso(hours: ArrayLike, *, start: datetime) -> list[str | None]:
    """ISO 8601 date-times, in the UTC offset of ``start``, of elapsed ``hours``; None for NaN.

    Resolution is one microsecond (the resolution of :class:`datetime.datetime`).
    """
    array = np.asarray(hours, dtype=np.float64).ravel()
    texts: list[str | None] = []
    for value in array.tolist():
        if not math.isfinite(value):
            texts.append(None)
            continue
        try:
            texts.append((start + timedelta(hours=value)).isoformat())
        except OverflowError as error:
            raise ScienceInputError(f"hours: {value:g} h from the start is outside the calendar") from error
    return texts


def pixels_per_hour_from_chart_speed(*, chart_speed_mm_per_hour: float, scan_dpi: float) -> float:
    """Time scale of a scanned strip chart in pixels per hour.

    Parameters
    ----------
    chart_speed_mm_per_hour : float
        Paper speed of the recorder (mm/h), e.g. 20 mm/h.
    scan_dpi : float
        Scan resolution (pixels per inch, 25.4 mm).

    Returns
    -------
    float
        Pixels of scan per hour of record: ``speed * dpi / 25.4``.
    """
    for name, value in (("chart_speed_mm_per_hour", chart_speed_mm_per_hour), ("scan_dpi", scan_dpi)):
        if not math.isfinite(value) or value <= 0.0:
            raise ScienceInputError(f"{name}: must be a finite number > 0, got {value!r}")
    rate = chart_speed_mm_per_hour * scan_dpi / MM_PER_INCH
    if not 1e-100 < rate < 1e100:
        raise ScienceInputError("chart_speed_mm_per_hour, scan_dpi: they give no usable time scale")
    return rate
