"""Printed geometry of a chart spec: where the grid lines are, in axis values, and in which colours.

A *chart spec* describes the paper, not a scan: the values of the outermost printed lines (the frame),
the major and minor grid lines of each axis with the axis scale, the grid colour and the pen colours to
expect. Automatic registration (:mod:`tracedesk.science.grid_registration`) finds these lines on a scan;
circle detection (:mod:`tracedesk.science.circle_detection`) finds the rings of a circular chart.

Grid lines of an axis
    ``linear``, ``sqrt`` and ``time`` axes: a line every ``minor_step`` (axis units; hours on time
    axes) from ``frame[0]`` to ``frame[1]``; a line is *major* when its value is a whole multiple of
    ``major_step``. On a sqrt axis the lines are equally spaced in value, so unequally on paper.
    ``log10`` axes: in every decade a line at each mantissa of ``decade_lines`` (default 1, 2, ..., 9),
    major at the mantissas of ``decade_major`` (default 1), between ``frame[0]`` and ``frame[1]``.
    Both frame values must be lines of the axis.

Orientation
    On an upright sheet x grows to the right and y upwards, unless ``increases`` says otherwise
    (``"left"`` for x, ``"down"`` for y). Registration reports a sheet turned by 90 or 180 degrees.

JSON shapes (``?`` marks optional fields; colours are ``"#rrggbb"``)::

    axis grid  {"scale": "linear" | "log10" | "sqrt" | "time", "frame": [first, last],
                "minor_step"?: s, "major_step"?: S,          linear, sqrt, time (minor_step required)
                "decade_lines"?: [m, ...], "decade_major"?: [m, ...],        log10 (mantissas in [1, 10))
                "start"?: ISO 8601 with offset (time axes), "increases"?: "right" | "left" (x) or
                "up" | "down" (y)}
    cartesian  {"kind": "cartesian", "x_axis": axis grid, "y_axis": axis grid, "grid_colour": colour,
                "pen_colours"?: [colour, ...], "colour_tolerance"?: dE (default 30)}
    circular   {"kind": "circular", "value_axis": axis grid (linear, sqrt or log10; no "increases"),
                "ring_radii_mm": [radius of the frame[0] ring, radius of the frame[1] ring],
                "period_hours": P, "time_line_hours"?: h, "time_major_hours"?: H,
                "time_lines"?: "radial" | "arcs", "arc_radius_mm"?: L (arcs: the pen arm length),
                "pivot_distance_mm"?: D (arcs: pen pivot to chart centre; default L, arcs through the centre),
                "time_zero_angle_deg"?: a, "time_direction"?: "clockwise" | "counterclockwise",
                "grid_colour": colour, "pen_colours"?: [colour, ...], "colour_tolerance"?: dE}

``time_zero_angle_deg`` is the spec's reference line: the image angle (degrees, clockwise on the screen
from 3 o'clock) at which the time-zero line meets the ring of ``value_axis.frame[1]`` on an upright
sheet. With ``time_line_hours`` and ``time_direction`` it lets a batch run place time zero on a scan
(:mod:`tracedesk.science.time_lines`).

``colour_tolerance`` is the largest CIELAB distance (CIE76) of a pixel from the paper-to-grid colour
line that still counts as grid ink. Errors are :class:`~tracedesk.science.errors.ScienceInputError`
whose message starts with the path of the offending field (``x_axis.frame[1]: ...``).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any, Final

import numpy as np
from numpy.typing import NDArray

from tracedesk.science.axes import AxisScale, parse_iso_datetime, scale_from_name
from tracedesk.science.colour import parse_hex_colour
from tracedesk.science.errors import ScienceInputError

FloatArray = NDArray[np.float64]
BoolArray = NDArray[np.bool_]

AXIS_SCALES: Final = ("linear", "log10", "sqrt", "time")
RING_SCALES: Final = ("linear", "log10", "sqrt")
X_DIRECTIONS: Final = ("right", "left")
Y_DIRECTIONS: Final = ("up", "down")
TIME_LINE_SHAPES: Final = ("radial", "arcs")
TIME_DIRECTIONS: Final = ("clockwise", "counterclockwise")
OPTIONAL_CIRCULAR_FIELDS: Final = (
    "time_line_hours",
    "time_major_hours",
    "arc_radius_mm",
    "pivot_distance_mm",
    "time_zero_angle_deg",
    "time_direction",
)
DEFAULT_COLOUR_TOLERANCE: Final = 30.0
DEFAULT_DECADE_LINES: Final = (1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0, 8.0, 9.0)
# More lines than this on one axis is not a printed chart but a mistake in the spec.
MAX_LINES_PER_AXIS: Final = 5000
# Relative slack when deciding whether a value sits on a step (floating-point steps like 0.1).
STEP_TOLERANCE: Final = 1e-6


@dataclass(frozen=True)
class AxisGridSpec:
    """Printed grid lines of one axis.

    Attributes
    ----------
    scale : str
        ``"linear"``, ``"log10"``, ``"sqrt"`` or ``"time"``.
    frame : tuple of float
        Values (axis units; hours on time axes) of the first and last printed line, first < last.
    minor_step, major_step : float or None
        Line spacing and major-line spacing (axis units) of linear, sqrt and time axes.
    decade_lines, decade_major : tuple of float
        Mantissas in [1, 10) of the lines, and of the major lines, in each decade (log10 axes).
    start : str or None
        ISO 8601 moment of time zero (time axes), passed on to the calibration.
    increases : str or None
        Direction on an upright sheet in which values grow (None: right for x, up for y).
    """

    scale: str
    frame: tuple[float, float]
    minor_step: float | None = None
    major_step: float | None = None
    decade_lines: tuple[float, ...] = DEFAULT_DECADE_LINES
    decade_major: tuple[float, ...] = (1.0,)
    start: str | None = None
    increases: str | None = None

    def axis_scale(self) -> AxisScale:
        """The :class:`~tracedesk.science.axes.AxisScale` of this axis (time axes without a start)."""
        return scale_from_name(self.scale)

    def line_values(self) -> tuple[FloatArray, BoolArray]:
        """Values (axis units) of the printed lines, ascending, and which of them are major."""
        if self.scale == "log10":
            return _log_lines(self)
        return _stepped_lines(self)

    def line_chart_coordinates(self) -> tuple[FloatArray, BoolArray]:
        """Linear chart coordinates of the printed lines (value, log10 or sqrt), and the major flags."""
        values, major = self.line_values()
        return self.axis_scale().values_to_chart(values), major

    def to_dict(self) -> dict[str, Any]:
        """JSON shape ``axis grid`` of the module docstring."""
        out: dict[str, Any] = {"scale": self.scale, "frame": list(self.frame)}
        if self.scale == "log10":
            out["decade_lines"] = list(self.decade_lines)
            out["decade_major"] = list(self.decade_major)
        else:
            out["minor_step"] = self.minor_step
            if self.major_step is not None:
                out["major_step"] = self.major_step
        if self.start is not None:
            out["start"] = self.start
        if self.increases is not None:
            out["increases"] = self.increases
        return out

    def calibration_axis(self) -> dict[str, Any]:
        """The axis as :func:`~tracedesk.science.calibration.build_calibration` reads it."""
        out: dict[str, Any] = {"scale": self.scale}
        if self.start is not None:
            out["start"] = self.start
        return out


def _on_step(value: float, step: float) -> bool:
    ratio = value / step
    return abs(ratio - round(ratio)) <= STEP_TOLERANCE * max(1.0, abs(ratio))


def _stepped_lines(axis: AxisGridSpec) -> tuple[FloatArray, BoolArray]:
    assert axis.minor_step is not None
    first, last = axis.frame
    count = round((last - first) / axis.minor_step)
    values = first + axis.minor_step * np.arange(count + 1, dtype=np.float64)
    values[-1] = last
    if axis.major_step is None:
        return values, np.zeros(values.shape, dtype=bool)
    major_step = axis.major_step
    return values, np.array([_on_step(float(v), major_step) for v in values], dtype=bool)


def _log_lines(axis: AxisGridSpec) -> tuple[FloatArray, BoolArray]:
    first, last = axis.frame
    values: list[float] = []
    major: list[bool] = []
    for exponent in range(math.floor(math.log10(first)) - 1, math.ceil(math.log10(last)) + 1):
        for mantissa in axis.decade_lines:
            value = mantissa * 10.0**exponent
            if first * (1 - STEP_TOLERANCE) <= value <= last * (1 + STEP_TOLERANCE):
                values.append(value)
                major.append(any(abs(mantissa - m) <= STEP_TOLERANCE * m for m in axis.decade_major))
    return np.array(values, dtype=np.float64), np.array(major, dtype=bool)


@dataclass(frozen=True)
class CartesianGridSpec:
    """Printed geometry of a cartesian (strip or rectangular) chart.

    Attributes
    ----------
    x_axis, y_axis : AxisGridSpec
        Grid lines of the x axis (lines of constant x, upright: vertical) and of the y axis.
    grid_colour : str
        Colour of the printed grid, ``"#rrggbb"``.
    pen_colours : tuple of str
        Pen colours expected on the chart (not grid ink).
    colour_tolerance : float
        Largest CIELAB distance (CIE76) from the paper-to-grid colour line that still counts as grid ink.
    """

    x_axis: AxisGridSpec
    y_axis: AxisGridSpec
    grid_colour: str
    pen_colours: tuple[str, ...] = ()
    colour_tolerance: float = DEFAULT_COLOUR_TOLERANCE

    @property
    def kind(self) -> str:
        """``"cartesian"``."""
        return "cartesian"

    def to_dict(self) -> dict[str, Any]:
        """JSON shape ``cartesian`` of the module docstring."""
        return {
            "kind": "cartesian",
            "x_axis": self.x_axis.to_dict(),
            "y_axis": self.y_axis.to_dict(),
            "grid_colour": self.grid_colour,
            "pen_colours": list(self.pen_colours),
            "colour_tolerance": self.colour_tolerance,
        }


@dataclass(frozen=True)
class CircularChartSpec:
    """Printed geometry of a circular chart.

    Attributes
    ----------
    value_axis : AxisGridSpec
        The rings: one per printed value line (scale linear, sqrt or log10).
    ring_radii_mm : tuple of float
        Radii (mm on the paper) of the rings of ``value_axis.frame[0]`` and ``frame[1]``; rings between
        lie linearly in chart coordinate between them. Only their ratio matters to detection.
    period_hours : float
        Time for one turn of the chart (h).
    time_line_hours, time_major_hours : float or None
        Spacing of the printed time lines and of the major ones (h).
    time_lines : str
        ``"radial"`` (straight lines through the centre) or ``"arcs"`` (drawn by the pen arm).
    arc_radius_mm : float or None
        Radius of the time arcs (the pen arm length, mm).
    pivot_distance_mm : float or None
        Distance (mm) of the pen arm's pivot from the chart centre (None: ``arc_radius_mm``, so the
        time arcs pass through the centre).
    time_zero_angle_deg : float or None
        Image angle (degrees, clockwise on the screen from +u) where the time-zero line meets the ring
        of ``value_axis.frame[1]`` on an upright sheet.
    time_direction : str or None
        ``"clockwise"`` or ``"counterclockwise"``: the side on which later times lie, as seen on the image.
    grid_colour : str
        Colour of the rings and time lines, ``"#rrggbb"``.
    pen_colours : tuple of str
        Pen colours expected on the chart.
    colour_tolerance : float
        As in :class:`CartesianGridSpec`.
    """

    value_axis: AxisGridSpec
    ring_radii_mm: tuple[float, float]
    period_hours: float
    grid_colour: str
    time_line_hours: float | None = None
    time_major_hours: float | None = None
    time_lines: str = "radial"
    arc_radius_mm: float | None = None
    pivot_distance_mm: float | None = None
    time_zero_angle_deg: float | None = None
    time_direction: str | None = None
    pen_colours: tuple[str, ...] = ()
    colour_tolerance: float = DEFAULT_COLOUR_TOLERANCE

    @property
    def kind(self) -> str:
        """``"circular"``."""
        return "circular"

    def pivot_distance(self) -> float | None:
        """Distance (mm) of the pen pivot from the centre for arc-shaped time lines (None for radial lines)."""
        if self.time_lines != "arcs" or self.arc_radius_mm is None:
            return None
        return self.pivot_distance_mm if self.pivot_distance_mm is not None else self.arc_radius_mm

    def ring_radii_of(self, chart: FloatArray) -> FloatArray:
        """Printed radii (mm) of rings at linear chart coordinates ``chart`` of the value axis."""
        ends = self.value_axis.axis_scale().values_to_chart(np.array(self.value_axis.frame))
        fraction = (np.asarray(chart, dtype=np.float64) - ends[0]) / (ends[1] - ends[0])
        radii = self.ring_radii_mm[0] + fraction * (self.ring_radii_mm[1] - self.ring_radii_mm[0])
        return np.asarray(radii, dtype=np.float64)

    def to_dict(self) -> dict[str, Any]:
        """JSON shape ``circular`` of the module docstring."""
        out: dict[str, Any] = {
            "kind": "circular",
            "value_axis": self.value_axis.to_dict(),
            "ring_radii_mm": list(self.ring_radii_mm),
            "period_hours": self.period_hours,
            "time_lines": self.time_lines,
            "grid_colour": self.grid_colour,
            "pen_colours": list(self.pen_colours),
            "colour_tolerance": self.colour_tolerance,
        }
        for key in OPTIONAL_CIRCULAR_FIELDS:
            if getattr(self, key) is not None:
                out[key] = getattr(self, key)
        return out


# --- Reading specs from plain (JSON) dictionaries -----------------------------------------------------


def _mapping(obj: Any, *, field: str) -> Mapping[str, Any]:
    if not isinstance(obj, Mapping):
        raise ScienceInputError(f"{field}: expected an object")
    return obj


def _number(obj: Any, *, field: str, positive: bool = False) -> float:
    if isinstance(obj, bool) or not isinstance(obj, int | float) or not math.isfinite(float(obj)):
        raise ScienceInputError(f"{field}: expected a finite number, got {obj!r}")
    if positive and obj <= 0:
        raise ScienceInputError(f"{field}: must be > 0, got {obj!r}")
    return float(obj)


def _optional_number(spec: Mapping[str, Any], key: str, *, prefix: str) -> float | None:
    value = spec.get(key)
    return None if value is None else _number(value, field=f"{prefix}{key}", positive=True)


def _option(obj: Any, *, field: str, options: Sequence[str]) -> str:
    if not isinstance(obj, str) or obj not in options:
        raise ScienceInputError(f"{field}: expected one of {', '.join(options)}, got {obj!r}")
    return obj


def _numbers(obj: Any, *, field: str, length: int | None = None) -> tuple[float, ...]:
    if isinstance(obj, str | bytes) or not isinstance(obj, Sequence) or not obj:
        raise ScienceInputError(f"{field}: expected a list of numbers")
    if length is not None and len(obj) != length:
        raise ScienceInputError(f"{field}: expected {length} numbers, got {len(obj)}")
    return tuple(_number(item, field=f"{field}[{index}]") for index, item in enumerate(obj))


def _colour(obj: Any, *, field: str) -> str:
    if not isinstance(obj, str):
        raise ScienceInputError(f"{field}: expected a colour '#rrggbb'")
    try:
        parse_hex_colour(obj)
    except ScienceInputError as error:
        raise ScienceInputError(f"{field}: {error}") from error
    return obj.strip().lower()


def _check_frame(scale: str, frame: tuple[float, ...], *, field: str) -> tuple[float, float]:
    first, last = frame
    if not first < last:
        raise ScienceInputError(f"{field}: the first frame value must be below the last, got {first:g}, {last:g}")
    if scale == "log10" and first <= 0:
        raise ScienceInputError(f"{field}[0]: a log10 axis needs values > 0, got {first:g}")
    if scale == "sqrt" and first < 0:
        raise ScienceInputError(f"{field}[0]: a sqrt axis needs values >= 0, got {first:g}")
    return first, last


def _check_steps(axis: AxisGridSpec, *, prefix: str) -> None:
    if axis.minor_step is None:
        raise ScienceInputError(f"{prefix}minor_step: missing (needed on a {axis.scale} axis)")
    span = (axis.frame[1] - axis.frame[0]) / axis.minor_step
    if abs(span - round(span)) > STEP_TOLERANCE * max(1.0, span):
        raise ScienceInputError(
            f"{prefix}frame: the frame spans {span:.4g} minor steps; both frame values must be grid lines"
        )
    if round(span) + 1 > MAX_LINES_PER_AXIS:
        raise ScienceInputError(f"{prefix}minor_step: {round(span) + 1} lines; at most {MAX_LINES_PER_AXIS}")
    if axis.major_step is not None and not _on_step(axis.major_step, axis.minor_step):
        raise ScienceInputError(f"{prefix}major_step: must be a whole multiple of minor_step")


def _check_log_lines(axis: AxisGridSpec, *, prefix: str) -> None:
    for key, mantissas in (("decade_lines", axis.decade_lines), ("decade_major", axis.decade_major)):
        if any(not 1.0 <= m < 10.0 for m in mantissas):
            raise ScienceInputError(f"{prefix}{key}: mantissas must lie in [1, 10)")
    values, _ = _log_lines(axis)
    if len(values) > MAX_LINES_PER_AXIS:
        raise ScienceInputError(f"{prefix}decade_lines: {len(values)} lines; at most {MAX_LINES_PER_AXIS}")
    for index, end in enumerate(axis.frame):
        if values.size == 0 or float(np.min(np.abs(values - end))) > STEP_TOLERANCE * end:
            raise ScienceInputError(f"{prefix}frame[{index}]: {end:g} is not one of the axis' printed lines")


def axis_grid_from_dict(spec: Any, *, field: str, scales: Sequence[str], directions: Sequence[str]) -> AxisGridSpec:
    """Read an ``axis grid`` (module docstring) and check that it describes printable lines.

    Parameters
    ----------
    spec : mapping
        The JSON object.
    field : str
        Its path, for error messages (``"x_axis"``).
    scales : sequence of str
        Scales allowed here.
    directions : sequence of str
        Values allowed for ``increases`` (empty: the field is not allowed).
    """
    axis = _mapping(spec, field=field)
    prefix = f"{field}."
    scale = _option(axis.get("scale"), field=f"{prefix}scale", options=scales)
    frame = _check_frame(scale, _numbers(axis.get("frame"), field=f"{prefix}frame", length=2), field=f"{prefix}frame")
    increases = axis.get("increases")
    if increases is not None:
        if not directions:
            raise ScienceInputError(f"{prefix}increases: not allowed here")
        increases = _option(increases, field=f"{prefix}increases", options=directions)
    start = axis.get("start")
    if start is not None and (scale != "time" or not isinstance(start, str)):
        raise ScienceInputError(f"{prefix}start: only a time axis takes a start (an ISO 8601 string)")
    result = AxisGridSpec(
        scale=scale,
        frame=frame,
        minor_step=_optional_number(axis, "minor_step", prefix=prefix),
        major_step=_optional_number(axis, "major_step", prefix=prefix),
        decade_lines=_numbers(axis.get("decade_lines", DEFAULT_DECADE_LINES), field=f"{prefix}decade_lines"),
        decade_major=_numbers(axis.get("decade_major", (1.0,)), field=f"{prefix}decade_major"),
        start=start,
        increases=increases,
    )
    if scale == "log10":
        _check_log_lines(result, prefix=prefix)
    else:
        _check_steps(result, prefix=prefix)
    if start is not None:
        parse_iso_datetime(start, field=f"{prefix}start")  # kept as text: the calibration reads it again
    return result


def _common_colours(spec: Mapping[str, Any]) -> tuple[str, tuple[str, ...], float]:
    grid = _colour(spec.get("grid_colour"), field="grid_colour")
    pens_obj = spec.get("pen_colours", [])
    if isinstance(pens_obj, str | bytes) or not isinstance(pens_obj, Sequence):
        raise ScienceInputError("pen_colours: expected a list of colours")
    pens = tuple(_colour(item, field=f"pen_colours[{index}]") for index, item in enumerate(pens_obj))
    tolerance = spec.get("colour_tolerance", DEFAULT_COLOUR_TOLERANCE)
    tolerance = _number(tolerance, field="colour_tolerance", positive=True)
    if tolerance > 100.0:
        raise ScienceInputError(f"colour_tolerance: must be at most 100, got {tolerance:g}")
    return grid, pens, tolerance


def _cartesian_from_dict(spec: Mapping[str, Any]) -> CartesianGridSpec:
    grid, pens, tolerance = _common_colours(spec)
    return CartesianGridSpec(
        x_axis=axis_grid_from_dict(spec.get("x_axis"), field="x_axis", scales=AXIS_SCALES, directions=X_DIRECTIONS),
        y_axis=axis_grid_from_dict(spec.get("y_axis"), field="y_axis", scales=AXIS_SCALES, directions=Y_DIRECTIONS),
        grid_colour=grid,
        pen_colours=pens,
        colour_tolerance=tolerance,
    )


def _circular_from_dict(spec: Mapping[str, Any]) -> CircularChartSpec:
    grid, pens, tolerance = _common_colours(spec)
    radii = _numbers(spec.get("ring_radii_mm"), field="ring_radii_mm", length=2)
    if min(radii) <= 0 or radii[0] == radii[1]:
        raise ScienceInputError("ring_radii_mm: two different radii > 0 are needed")
    time_lines = _option(spec.get("time_lines", "radial"), field="time_lines", options=TIME_LINE_SHAPES)
    direction = spec.get("time_direction")
    if direction is not None:
        direction = _option(direction, field="time_direction", options=TIME_DIRECTIONS)
    zero_angle = spec.get("time_zero_angle_deg")
    return CircularChartSpec(
        value_axis=axis_grid_from_dict(spec.get("value_axis"), field="value_axis", scales=RING_SCALES, directions=()),
        ring_radii_mm=(radii[0], radii[1]),
        period_hours=_number(spec.get("period_hours"), field="period_hours", positive=True),
        grid_colour=grid,
        time_line_hours=_optional_number(spec, "time_line_hours", prefix=""),
        time_major_hours=_optional_number(spec, "time_major_hours", prefix=""),
        time_lines=time_lines,
        arc_radius_mm=_optional_number(spec, "arc_radius_mm", prefix=""),
        pivot_distance_mm=_optional_number(spec, "pivot_distance_mm", prefix=""),
        time_zero_angle_deg=None if zero_angle is None else _number(zero_angle, field="time_zero_angle_deg"),
        time_direction=direction,
        pen_colours=pens,
        colour_tolerance=tolerance,
    )


def grid_spec_from_dict(spec: Any) -> CartesianGridSpec | CircularChartSpec:
    """Read a chart spec's printed geometry from its JSON form (module docstring).

    Raises
    ------
    ScienceInputError
        For a missing or bad field; the message starts with the field's path.
    """
    top = _mapping(spec, field="spec")
    kind = _option(top.get("kind"), field="kind", options=("cartesian", "circular"))
    return _cartesian_from_dict(top) if kind == "cartesian" else _circular_from_dict(top)
