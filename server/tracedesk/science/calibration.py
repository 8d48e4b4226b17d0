"""Calibrations of a sheet: axes + registration (or chart geometry) as one pixel <-> value mapping.

Every calibration implements :class:`ChartMapping`: ``pixels_to_values`` and its exact inverse
``values_to_pixels`` on arrays of shape (n, 2), plus a :class:`~tracedesk.science.registration.ResidualReport`.
Values are in axis units; time is elapsed hours since the chart's time zero.

Kinds, as built by :func:`build_calibration` from plain (JSON) dictionaries:

``cartesian``
    Control points registered by a similarity, affine, projective or polynomial2 transform
    (:func:`calibrate_cartesian`).
``curvilinear``
    A strip or drum chart whose pen swings on an arm, so time lines are arcs: control points are
    straightened along the time axis, then registered (:func:`calibrate_curvilinear`).
``strip_speed``
    A strip chart timed by its chart speed and scan resolution from one time-zero pixel, with the value
    scale from control points (:func:`calibrate_strip_speed`).
``circular``
    A circular chart from its geometry (:class:`~tracedesk.science.circular.CircularCalibration`).

JSON shapes (pixels ``[u, v]`` in px of the stored image; ``?`` marks optional fields)::

    axis        {"scale": "linear" | "log10" | "sqrt" | "time", "start"?: ISO 8601 with offset}
    point       {"pixel": [u, v], "value": [x, y]}   x or y may be an ISO 8601 date-time on a time
                                                     axis that has a start
    cartesian   {"kind": "cartesian", "x_axis": axis, "y_axis": axis, "control_points": [point, ...],
                 "transform"?: "auto" | "similarity" | "affine" | "projective" | "polynomial2"}
    pen_arc     {"pivot_pixel": [u, v], "length_px": L}   the arm as typed, e.g. from an instrument drawing
                or {"time_line_points": [[u, v], ...]}    3 or more pixels clicked along one printed time
                                                          line: the circle through them has the pivot as
                                                          its centre and the arm length L as its radius
                                                          (exactly one of the two forms)
    curvilinear cartesian fields with "kind": "curvilinear", plus
                 "pen_arc": pen_arc with "pivot_side": "later" | "earlier"
    strip_speed {"kind": "strip_speed", "y_axis": axis, "control_points": [{"pixel": [u, v], "value": y}],
                 "time_zero_pixel": [u, v], "time_direction": "right" | "left" | "down" | "up",
                 "chart_speed_mm_per_hour": s, "scan_dpi": d, "start"?: ISO 8601}
    circular    {"kind": "circular", "centre": [u, v],
                 "value_axis": {"scale": "linear" | "sqrt" | "log10", "min": v0, "max": v1,
                                "radius_min_px": r0, "radius_max_px": r1},
                 "period_hours": P, "time_zero_pixel": [u, v],
                 "time_direction": "clockwise" | "counterclockwise",
                 "pen_arc"?: pen_arc, "start"?: ISO 8601,
                 "check_points"?: [point, ...]}   (x = elapsed hours or ISO 8601, y = value)

Errors are :class:`~tracedesk.science.errors.ScienceInputError` whose message starts with the path of
the offending field (``control_points[2].pixel[1]: must be a finite number, got nan``).

A pen arm fitted from ``time_line_points`` carries their click uncertainty into every reading
(:mod:`~tracedesk.science.calibration_covariance` moves each point); a typed pivot and length are taken
as exact.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any, Final, Protocol

import numpy as np
from numpy.typing import ArrayLike, NDArray

from tracedesk.science.axes import (
    AxisScale,
    TimeScale,
    parse_iso_datetime,
    pixels_per_hour_from_chart_speed,
    scale_from_name,
)
from tracedesk.science.circular import (
    ArcStraightening,
    CircularCalibration,
    PenArm,
    RadiusLaw,
    pen_arm_from_time_line,
)
from tracedesk.science.errors import ScienceInputError
from tracedesk.science.homogeneous import invert_homogeneous_matrix
from tracedesk.science.registration import (
    MAX_MAGNITUDE,
    MatrixTransform,
    PlaneTransform,
    ResidualReport,
    TransformChoice,
    as_point_array,
    choose_transform,
    count_distinct_pixels,
    empty_residual_report,
    fit_transform,
    inspect_control_points,
    residual_report,
    root_mean_square,
    spread_ratio,
)

FloatArray = NDArray[np.float64]


def _quiet() -> np.errstate:
    """Mapping absurd pixels or values gives inf or NaN, never a floating-point warning."""
    return np.errstate(over="ignore", invalid="ignore", divide="ignore", under="ignore")


CALIBRATION_KINDS: Final = ("cartesian", "curvilinear", "strip_speed", "circular")
PIVOT_SIDES: Final = {"later": 1.0, "earlier": -1.0}
# A pen arm is typed (from an instrument drawing) with these fields, or clicked as "time_line_points".
PEN_ARC_TYPED_FIELDS: Final = ("pivot_pixel", "length_px")
IMAGE_DIRECTIONS: Final = {"right": (1.0, 0.0), "left": (-1.0, 0.0), "down": (0.0, 1.0), "up": (0.0, -1.0)}
# Value control points of a strip_speed calibration spreading less than this across their best line
# are treated as clicked along one time line (the value scale then fixes the time axis direction).
STRIP_SCALE_LINE_RATIO: Final = 0.05


class ChartMapping(Protocol):
    """What every calibration offers: pixels <-> values and how well it fits."""

    @property
    def kind(self) -> str:
        """Calibration kind, one of :data:`CALIBRATION_KINDS`."""
        ...

    @property
    def x_period_hours(self) -> float | None:
        """Period (h) after which x repeats (circular charts), else None."""
        ...

    @property
    def residual_report(self) -> ResidualReport:
        """Residuals at the control (or check) points."""
        ...

    def pixels_to_values(self, pixels: ArrayLike) -> FloatArray:
        """Values (axis units; x in elapsed hours for time) at pixels (px), shape (n, 2)."""
        ...

    def values_to_pixels(self, values: ArrayLike) -> FloatArray:
        """Pixels (px) of values (axis units), shape (n, 2)."""
        ...


@dataclass(frozen=True, eq=False)
class CartesianCalibration:
    """Axes plus a plane transform: pixels -> linear chart coordinates -> values, and back.

    Attributes
    ----------
    x_axis, y_axis : AxisScale
        Scales of the chart's x (usually time) and y axes.
    transform : PlaneTransform
        Fitted pixels <-> linear chart coordinates transform.
    residual_report : ResidualReport
        Residuals at the control points.
    """

    x_axis: AxisScale
    y_axis: AxisScale
    transform: PlaneTransform
    residual_report: ResidualReport

    @property
    def kind(self) -> str:
        """``"cartesian"``."""
        return "cartesian"

    @property
    def x_period_hours(self) -> float | None:
        """None: a cartesian x axis does not repeat."""
        return None

    def pixels_to_values(self, pixels: ArrayLike) -> FloatArray:
        """Values (axis units) at pixels (px), shape (n, 2); NaN where an axis has no value."""
        with _quiet():
            chart = self.transform.pixels_to_chart(as_point_array(pixels, field="pixels"))
            return np.column_stack([self.x_axis.chart_to_values(chart[:, 0]), self.y_axis.chart_to_values(chart[:, 1])])

    def values_to_pixels(self, values: ArrayLike) -> FloatArray:
        """Pixels (px) of values (axis units), shape (n, 2).

        Raises
        ------
        ScienceInputError
            For values an axis cannot show (<= 0 on log10, < 0 on sqrt); NaN passes through.
        """
        xy = as_point_array(values, field="values")
        chart = np.column_stack(
            [
                self.x_axis.values_to_chart(xy[:, 0], field="x value"),
                self.y_axis.values_to_chart(xy[:, 1], field="y value"),
            ]
        )
        with _quiet():
            return self.transform.chart_to_pixels(chart)


@dataclass(frozen=True, eq=False)
class CurvilinearStripCalibration:
    """Strip or drum chart written by a pen arm: arc straightening, then a cartesian calibration.

    Attributes
    ----------
    straightening : ArcStraightening
        Moves image pixels onto straight time lines (and back).
    straight : CartesianCalibration
        Calibration of the straightened pixels.
    residual_report : ResidualReport
        Residuals at the control points, in image pixels.
    """

    straightening: ArcStraightening
    straight: CartesianCalibration
    residual_report: ResidualReport

    @property
    def kind(self) -> str:
        """``"curvilinear"``."""
        return "curvilinear"

    @property
    def x_period_hours(self) -> float | None:
        """None: the time axis does not repeat."""
        return None

    def pixels_to_values(self, pixels: ArrayLike) -> FloatArray:
        """Values (axis units) at image pixels (px), shape (n, 2); NaN beyond the arm's reach."""
        with _quiet():
            straight = self.straightening.straighten(as_point_array(pixels, field="pixels"))
        return self.straight.pixels_to_values(straight)

    def values_to_pixels(self, values: ArrayLike) -> FloatArray:
        """Image pixels (px) of values (axis units), shape (n, 2)."""
        straight = self.straight.values_to_pixels(values)
        with _quiet():
            return self.straightening.unstraighten(straight)


def _control_arrays(
    pixels: ArrayLike, values: ArrayLike, *, x_axis: AxisScale, y_axis: AxisScale
) -> tuple[FloatArray, FloatArray, FloatArray]:
    """Validated control pixels, values and their linear chart coordinates."""
    uv = as_point_array(pixels, field="control_points pixel", finite=True)
    xy = as_point_array(values, field="control_points value", finite=True)
    if uv.shape != xy.shape:
        raise ScienceInputError("control_points: as many pixels as values are needed")
    chart = np.column_stack(
        [
            x_axis.values_to_chart(xy[:, 0], field="control_points x value"),
            y_axis.values_to_chart(xy[:, 1], field="control_points y value"),
        ]
    )
    return uv, xy, chart


def _cartesian_inverse_builder(pixels: FloatArray, chart: FloatArray, name: str) -> Any:
    return fit_transform(pixels, chart, name=name).chart_to_pixels


def calibrate_cartesian(
    pixels: ArrayLike,
    values: ArrayLike,
    *,
    x_axis: AxisScale,
    y_axis: AxisScale,
    transform: str = "auto",
) -> CartesianCalibration:
    """Register a sheet from control points.

    Parameters
    ----------
    pixels : array_like, shape (n, 2)
        Control point pixels (px).
    values : array_like, shape (n, 2)
        Their known values (axis units; elapsed hours on time axes).
    x_axis, y_axis : AxisScale
        Axis scales.
    transform : str
        ``"auto"`` (choice by leave-one-out error) or one of ``similarity``, ``affine``, ``projective``,
        ``polynomial2``.

    Raises
    ------
    ScienceInputError
        Too few or degenerate control points, or values an axis cannot show.
    """
    uv, xy, chart = _control_arrays(pixels, values, x_axis=x_axis, y_axis=y_axis)
    notes = tuple(inspect_control_points(uv, chart, transform=transform))
    choice = choose_transform(uv, chart, requested=transform, build_inverse=_cartesian_inverse_builder)
    fitted = fit_transform(uv, chart, name=choice.name)
    calibration = CartesianCalibration(x_axis, y_axis, fitted, residual_report=_placeholder_report())
    report = _report_for(calibration, uv, xy, choice=choice, warnings=notes)
    return dataclasses.replace(calibration, residual_report=report)


def _placeholder_report() -> ResidualReport:
    return empty_residual_report("pending")


def _report_for(
    mapping: ChartMapping,
    pixels: FloatArray,
    values: FloatArray,
    *,
    choice: TransformChoice,
    warnings: tuple[str, ...],
) -> ResidualReport:
    return residual_report(
        transform=choice.name,
        pixels=pixels,
        values=values,
        predicted_pixels=mapping.values_to_pixels(values),
        predicted_values=mapping.pixels_to_values(pixels),
        choice=choice,
        warnings=warnings,
        x_period_hours=mapping.x_period_hours,
    )


def _time_direction(pixels: FloatArray, chart: FloatArray) -> tuple[float, float]:
    """Unit image vector along which chart x grows, from a similarity or affine fit."""
    name = "affine" if count_distinct_pixels(pixels) >= 3 and spread_ratio(pixels) > 1e-3 else "similarity"
    fitted = fit_transform(pixels, chart, name=name)
    assert isinstance(fitted, MatrixTransform)
    column = fitted.inverse_matrix[:2, 0]
    length = float(np.hypot(*column))
    return float(column[0] / length), float(column[1] / length)


def _fit_straightening(
    pixels: FloatArray, chart: FloatArray, *, pen_arm: PenArm, pivot_side: float
) -> ArcStraightening:
    """Time direction and straightening found together: each straightening sharpens the direction."""
    direction = _time_direction(pixels, chart)
    straightening = ArcStraightening(pen_arm.pivot_pixel, pen_arm.length_px, direction, pivot_side)
    for _ in range(20):
        straight = straightening.straighten(pixels)
        bad = np.flatnonzero(~np.all(np.isfinite(straight), axis=1))
        if bad.size:
            raise ScienceInputError(f"control_points[{int(bad[0])}]: beyond the reach of the pen arm")
        updated = _time_direction(straight, chart)
        straightening = dataclasses.replace(straightening, time_direction=updated)
        if math.hypot(updated[0] - direction[0], updated[1] - direction[1]) < 1e-13:
            break
        direction = updated
    return straightening


def calibrate_curvilinear(
    pixels: ArrayLike,
    values: ArrayLike,
    *,
    x_axis: AxisScale,
    y_axis: AxisScale,
    pen_arm: PenArm,
    pivot_side: str,
    transform: str = "auto",
) -> CurvilinearStripCalibration:
    """Register a strip or drum chart whose time lines are arcs drawn by a pen arm.

    Parameters
    ----------
    pixels, values : array_like, shape (n, 2)
        Control points on the printed (curved) grid: pixels (px) and values (axis units). x is the
        axis along which the paper moves (time).
    x_axis, y_axis : AxisScale
        Axis scales.
    pen_arm : PenArm
        Pivot (px; its position across the time axis is the pivot height) and arm length (px).
    pivot_side : {"later", "earlier"}
        Side of the printed time arcs on which the pivot lies (the arcs' ends curl towards it).
    transform : str
        As in :func:`calibrate_cartesian`, applied to the straightened points.
    """
    if pivot_side not in PIVOT_SIDES:
        raise ScienceInputError("pen_arc.pivot_side: expected 'later' or 'earlier'")
    uv, xy, chart = _control_arrays(pixels, values, x_axis=x_axis, y_axis=y_axis)
    notes = tuple(inspect_control_points(uv, chart, transform=transform))
    straightening = _fit_straightening(uv, chart, pen_arm=pen_arm, pivot_side=PIVOT_SIDES[pivot_side])

    def build_inverse(train_pixels: FloatArray, train_chart: FloatArray, name: str) -> Any:
        fitted = fit_transform(straightening.straighten(train_pixels), train_chart, name=name)
        return lambda chart_points: straightening.unstraighten(fitted.chart_to_pixels(chart_points))

    choice = choose_transform(uv, chart, requested=transform, build_inverse=build_inverse)
    fitted = fit_transform(straightening.straighten(uv), chart, name=choice.name)
    straight = CartesianCalibration(x_axis, y_axis, fitted, residual_report=_placeholder_report())
    calibration = CurvilinearStripCalibration(straightening, straight, residual_report=_placeholder_report())
    report = _report_for(calibration, uv, xy, choice=choice, warnings=notes)
    return dataclasses.replace(calibration, residual_report=report)


@dataclass(frozen=True)
class StripTiming:
    """Timing of a strip chart by its speed.

    Attributes
    ----------
    time_zero_pixel : (float, float)
        A pixel (px) on the time-zero line.
    rough_direction : (float, float)
        Image direction in which later times lie, roughly (e.g. (1, 0) for "right").
    pixels_per_hour : float
        Chart speed times scan resolution (px/h).
    """

    time_zero_pixel: tuple[float, float]
    rough_direction: tuple[float, float]
    pixels_per_hour: float


def _value_gradient(pixels: FloatArray, chart_y: FloatArray) -> tuple[FloatArray, float]:
    """Least-squares ``y = y0 + g . p``: returns g (chart units per px) and y0.

    Points clicked along one line only fix g along that line, so the fit is then made along it.
    """
    centroid = pixels.mean(axis=0)
    centred = pixels - centroid
    if pixels.shape[0] == 2 or spread_ratio(pixels) < STRIP_SCALE_LINE_RATIO:
        _, _, right = np.linalg.svd(centred, full_matrices=False)
        along = centred @ right[0]
        slope = float(np.sum(along * (chart_y - chart_y.mean())) / np.sum(along * along))
        gradient = slope * right[0]
    else:
        gradient = np.linalg.lstsq(centred, chart_y - chart_y.mean(), rcond=None)[0]
    return gradient, float(chart_y.mean() - gradient @ centroid)


def _strip_speed_transform(pixels: FloatArray, chart_y: FloatArray, timing: StripTiming) -> MatrixTransform:
    """Rows of the pixels -> chart matrix: time along the chart (px / px per h), value across it."""
    gradient, offset = _value_gradient(pixels, chart_y)
    size = float(np.hypot(*gradient))
    if not size > 0.0 or not math.isfinite(size):
        raise ScienceInputError("control_points: the values do not change across the chart")
    along = np.array([gradient[1], -gradient[0]]) / size
    along = along if along @ np.array(timing.rough_direction) >= 0 else -along
    matrix = np.eye(3)
    matrix[0, :2] = along / timing.pixels_per_hour
    matrix[0, 2] = -(along @ np.array(timing.time_zero_pixel)) / timing.pixels_per_hour
    matrix[1, :2] = gradient
    matrix[1, 2] = offset
    if not np.all(np.isfinite(matrix)):
        raise ScienceInputError("chart_speed_mm_per_hour, scan_dpi: they give no usable time scale")
    return MatrixTransform("chart_speed", matrix, invert_homogeneous_matrix(matrix))


def _strip_leave_one_out(pixels: FloatArray, chart_y: FloatArray, timing: StripTiming) -> FloatArray | None:
    """Distance (px, across the value lines) of each point from its value line fitted without it."""
    if pixels.shape[0] < 3:
        return None
    errors = np.full(pixels.shape[0], np.inf)
    for index in range(pixels.shape[0]):
        keep = np.arange(pixels.shape[0]) != index
        if np.unique(chart_y[keep]).size < 2:
            continue
        try:
            fitted = _strip_speed_transform(pixels[keep], chart_y[keep], timing)
        except ScienceInputError:
            continue
        gradient = fitted.forward_matrix[1, :2]
        predicted = fitted.pixels_to_chart(pixels[index : index + 1])[0, 1]
        errors[index] = abs(predicted - chart_y[index]) / float(np.hypot(*gradient))
    return errors


def _strip_report(
    calibration: CartesianCalibration, pixels: FloatArray, y: FloatArray, chart_y: FloatArray, timing: StripTiming
) -> ResidualReport:
    """Residuals across the value lines (the time of a value point is not known)."""
    assert isinstance(calibration.transform, MatrixTransform)
    gradient = calibration.transform.forward_matrix[1, :2]
    fitted = calibration.transform.pixels_to_chart(pixels)[:, 1]
    shift = ((fitted - chart_y) / float(gradient @ gradient))[:, None] * gradient
    loo = _strip_leave_one_out(pixels, chart_y, timing)
    rms = {"chart_speed": root_mean_square(loo)} if loo is not None else {}
    notes = () if loo is not None else (f"{pixels.shape[0]} value points fit exactly: nothing checks them; add points",)
    return residual_report(
        transform="chart_speed",
        pixels=pixels,
        values=np.column_stack([np.full(y.shape, np.nan), y]),
        predicted_pixels=pixels - shift,
        predicted_values=calibration.pixels_to_values(pixels),
        choice=TransformChoice("chart_speed", loo, rms, notes),
    )


def calibrate_strip_speed(
    pixels: ArrayLike,
    values: ArrayLike,
    *,
    y_axis: AxisScale,
    time_zero_pixel: tuple[float, float],
    time_direction: str,
    chart_speed_mm_per_hour: float,
    scan_dpi: float,
    time_axis: TimeScale | None = None,
) -> CartesianCalibration:
    """Strip chart timed by its chart speed: time from distance along the chart, value from control points.

    Parameters
    ----------
    pixels : array_like, shape (n, 2)
        Pixels (px) of points on the printed value scale (at least two different values).
    values : array_like, shape (n,)
        Their values (y-axis units).
    y_axis : AxisScale
        Value scale.
    time_zero_pixel : (float, float)
        A pixel (px) on the time-zero line.
    time_direction : {"right", "left", "down", "up"}
        Image direction in which later times lie, roughly: the exact direction runs along the lines of
        equal value, which the control points fix.
    chart_speed_mm_per_hour, scan_dpi : float
        Paper speed (mm/h) and scan resolution (dpi).
    time_axis : TimeScale or None
        Time scale of x (carries the chart start time when known).

    Notes
    -----
    Value points clicked along one time line (spread across it < 5 % of the spread along it) fix the
    value gradient along that line only; the time axis is then perpendicular to that line. The residual
    report measures distances across the value lines; x value residuals are NaN (no time is known).
    """
    if time_direction not in IMAGE_DIRECTIONS:
        raise ScienceInputError("time_direction: expected 'right', 'left', 'down' or 'up'")
    rate = pixels_per_hour_from_chart_speed(chart_speed_mm_per_hour=chart_speed_mm_per_hour, scan_dpi=scan_dpi)
    zero = as_point_array(time_zero_pixel, field="time_zero_pixel", finite=True)[0]
    timing = StripTiming((float(zero[0]), float(zero[1])), IMAGE_DIRECTIONS[time_direction], rate)
    uv = as_point_array(pixels, field="control_points pixel", finite=True)
    y = np.asarray(values, dtype=np.float64).reshape(-1)
    if y.shape[0] != uv.shape[0] or not np.all(np.isfinite(y)):
        raise ScienceInputError("control_points: one finite value per pixel is needed")
    chart_y = y_axis.values_to_chart(y, field="control_points value")
    if np.unique(chart_y).size < 2 or count_distinct_pixels(uv) < 2:
        raise ScienceInputError("control_points: at least two points with different values are needed")
    transform = _strip_speed_transform(uv, chart_y, timing)
    calibration = CartesianCalibration(time_axis or TimeScale(), y_axis, transform, _placeholder_report())
    return dataclasses.replace(calibration, residual_report=_strip_report(calibration, uv, y, chart_y, timing))


# --- Building calibrations from plain (JSON) dictionaries -------------------------------------------


def _mapping(obj: Any, *, field: str) -> Mapping[str, Any]:
    if not isinstance(obj, Mapping):
        raise ScienceInputError(f"{field}: expected an object")
    return obj


def _required(spec: Mapping[str, Any], key: str, *, prefix: str = "") -> Any:
    if key not in spec or spec[key] is None:
        raise ScienceInputError(f"{prefix}{key}: missing")
    return spec[key]


def _number(obj: Any, *, field: str) -> float:
    if isinstance(obj, bool) or not isinstance(obj, int | float):
        raise ScienceInputError(f"{field}: expected a number, got {obj!r}")
    value = float(obj)
    if not abs(value) <= MAX_MAGNITUDE:
        raise ScienceInputError(f"{field}: must be a finite number, got {value!r}")
    return value


def _pair(obj: Any, *, field: str) -> tuple[float, float]:
    if isinstance(obj, str | bytes) or not isinstance(obj, Sequence) or len(obj) != 2:
        raise ScienceInputError(f"{field}: expected a pair [u, v]")
    return _number(obj[0], field=f"{field}[0]"), _number(obj[1], field=f"{field}[1]")


def _option(obj: Any, *, field: str, options: Sequence[str]) -> str:
    if not isinstance(obj, str) or obj not in options:
        raise ScienceInputError(f"{field}: expected one of {', '.join(options)}, got {obj!r}")
    return obj


def _items(obj: Any, *, field: str) -> Sequence[Any]:
    if isinstance(obj, str | bytes) or not isinstance(obj, Sequence):
        raise ScienceInputError(f"{field}: expected a list")
    return obj


def _start(spec: Mapping[str, Any], *, field: str) -> Any:
    text = spec.get("start")
    return None if text is None else parse_iso_datetime(text, field=field)


def axis_from_spec(spec: Any, *, field: str = "axis") -> AxisScale:
    """Axis scale from ``{"scale": "linear"|"log10"|"sqrt"|"time", "start"?: ISO 8601}``."""
    axis = _mapping(spec, field=field)
    name = _option(axis.get("scale"), field=f"{field}.scale", options=("linear", "log10", "sqrt", "time"))
    return scale_from_name(name, start=_start(axis, field=f"{field}.start"), field=f"{field}.scale")


def _axis_value(obj: Any, axis: AxisScale, *, field: str) -> float:
    """A value in axis units; time axes with a start also take ISO 8601 date-times."""
    if isinstance(obj, str):
        if isinstance(axis, TimeScale) and axis.start is not None:
            return float(axis.iso_to_hours([obj], field=field)[0])
        raise ScienceInputError(f"{field}: a date-time needs a time axis with a start; give hours instead")
    return _number(obj, field=field)


def _value_pairs(
    spec: Mapping[str, Any], key: str, *, x_axis: AxisScale, y_axis: AxisScale
) -> tuple[FloatArray, FloatArray]:
    """Pixels and values of ``[{"pixel": [u, v], "value": [x, y]}, ...]``."""
    pixels, values = [], []
    for index, item in enumerate(_items(_required(spec, key), field=key)):
        point = _mapping(item, field=f"{key}[{index}]")
        pixels.append(_pair(_required(point, "pixel", prefix=f"{key}[{index}]."), field=f"{key}[{index}].pixel"))
        value = _items(_required(point, "value", prefix=f"{key}[{index}]."), field=f"{key}[{index}].value")
        if len(value) != 2:
            raise ScienceInputError(f"{key}[{index}].value: expected a pair [x, y]")
        x = _axis_value(value[0], x_axis, field=f"{key}[{index}].value[0]")
        values.append((x, _axis_value(value[1], y_axis, field=f"{key}[{index}].value[1]")))
    return np.array(pixels, dtype=np.float64).reshape(-1, 2), np.array(values, dtype=np.float64).reshape(-1, 2)


def _transform_name(spec: Mapping[str, Any]) -> str:
    return _option(
        spec.get("transform", "auto"),
        field="transform",
        options=("auto", "similarity", "affine", "projective", "polynomial2"),
    )


def _cartesian_from_spec(spec: Mapping[str, Any]) -> ChartMapping:
    x_axis = axis_from_spec(_required(spec, "x_axis"), field="x_axis")
    y_axis = axis_from_spec(_required(spec, "y_axis"), field="y_axis")
    pixels, values = _value_pairs(spec, "control_points", x_axis=x_axis, y_axis=y_axis)
    return calibrate_cartesian(pixels, values, x_axis=x_axis, y_axis=y_axis, transform=_transform_name(spec))


def _pen_arm(spec: Any) -> PenArm:
    """The pen arm of ``pen_arc``: fitted to its clicked time-line points, or as typed (pivot and length)."""
    arc = _mapping(spec, field="pen_arc")
    clicked = arc.get("time_line_points") is not None
    typed = any(arc.get(key) is not None for key in PEN_ARC_TYPED_FIELDS)
    if clicked and typed:
        raise ScienceInputError("pen_arc: give time_line_points or pivot_pixel and length_px, not both")
    if not clicked and not typed:
        raise ScienceInputError(
            "pen_arc: give time_line_points (3 or more pixels clicked along one time line) or pivot_pixel and length_px"
        )
    if clicked:
        return _pen_arm_from_clicks(arc["time_line_points"])
    pivot = _pair(_required(arc, "pivot_pixel", prefix="pen_arc."), field="pen_arc.pivot_pixel")
    length = _number(_required(arc, "length_px", prefix="pen_arc."), field="pen_arc.length_px")
    if length <= 0.0:
        raise ScienceInputError(f"pen_arc.length_px: must be > 0, got {length:g}")
    return PenArm(pivot_pixel=pivot, length_px=length)


def _pen_arm_from_clicks(points: Any) -> PenArm:
    """The arm whose tip's circle passes through pixels clicked along one printed time line (px)."""
    field = "pen_arc.time_line_points"
    pixels = [_pair(point, field=f"{field}[{index}]") for index, point in enumerate(_items(points, field=field))]
    arm, _ = pen_arm_from_time_line(np.array(pixels, dtype=np.float64).reshape(-1, 2), field=field)
    return arm


def _curvilinear_from_spec(spec: Mapping[str, Any]) -> ChartMapping:
    x_axis = axis_from_spec(_required(spec, "x_axis"), field="x_axis")
    y_axis = axis_from_spec(_required(spec, "y_axis"), field="y_axis")
    pixels, values = _value_pairs(spec, "control_points", x_axis=x_axis, y_axis=y_axis)
    arc = _mapping(_required(spec, "pen_arc"), field="pen_arc")
    side = _option(arc.get("pivot_side"), field="pen_arc.pivot_side", options=tuple(PIVOT_SIDES))
    return calibrate_curvilinear(
        pixels,
        values,
        x_axis=x_axis,
        y_axis=y_axis,
        pen_arm=_pen_arm(arc),
        pivot_side=side,
        transform=_transform_name(spec),
    )


def _strip_speed_from_spec(spec: Mapping[str, Any]) -> ChartMapping:
    y_axis = axis_from_spec(_required(spec, "y_axis"), field="y_axis")
    pixels, values = [], []
    for index, item in enumerate(_items(_required(spec, "control_points"), field="control_points")):
        point = _mapping(item, field=f"control_points[{index}]")
        pixels.append(
            _pair(_required(point, "pixel", prefix=f"control_points[{index}]."), field=f"control_points[{index}].pixel")
        )
        values.append(
            _axis_value(
                _required(point, "value", prefix=f"control_points[{index}]."),
                y_axis,
                field=f"control_points[{index}].value",
            )
        )
    return calibrate_strip_speed(
        np.array(pixels, dtype=np.float64).reshape(-1, 2),
        np.array(values, dtype=np.float64),
        y_axis=y_axis,
        time_zero_pixel=_pair(_required(spec, "time_zero_pixel"), field="time_zero_pixel"),
        time_direction=_option(spec.get("time_direction"), field="time_direction", options=tuple(IMAGE_DIRECTIONS)),
        chart_speed_mm_per_hour=_number(_required(spec, "chart_speed_mm_per_hour"), field="chart_speed_mm_per_hour"),
        scan_dpi=_number(_required(spec, "scan_dpi"), field="scan_dpi"),
        time_axis=TimeScale(start=_start(spec, field="start")),
    )


def _radius_law(spec: Any) -> RadiusLaw:
    axis = _mapping(spec, field="value_axis")
    scale = _option(axis.get("scale"), field="value_axis.scale", options=("linear", "sqrt", "log10"))
    numbers = {
        key: _number(_required(axis, key, prefix="value_axis."), field=f"value_axis.{key}")
        for key in ("min", "max", "radius_min_px", "radius_max_px")
    }
    return RadiusLaw(
        scale_from_name(scale), numbers["min"], numbers["max"], numbers["radius_min_px"], numbers["radius_max_px"]
    )


def _circular_from_spec(spec: Mapping[str, Any]) -> ChartMapping:
    start = _start(spec, field="start")
    law = _radius_law(_required(spec, "value_axis"))
    check_pixels = check_values = None
    if spec.get("check_points") is not None:
        check_pixels, check_values = _value_pairs(spec, "check_points", x_axis=TimeScale(start=start), y_axis=law.scale)
    return CircularCalibration(
        centre=_pair(_required(spec, "centre"), field="centre"),
        radius_law=law,
        period_hours=_number(_required(spec, "period_hours"), field="period_hours"),
        time_zero_pixel=_pair(_required(spec, "time_zero_pixel"), field="time_zero_pixel"),
        time_direction=_option(
            spec.get("time_direction"), field="time_direction", options=("clockwise", "counterclockwise")
        ),
        pen_arm=None if spec.get("pen_arc") is None else _pen_arm(spec["pen_arc"]),
        start=start,
        check_pixels=check_pixels,
        check_values=check_values,
    )


def build_calibration(spec: Mapping[str, Any]) -> ChartMapping:
    """Build a calibration from its JSON description.

    Parameters
    ----------
    spec : mapping
        ``{"kind": "cartesian" | "curvilinear" | "strip_speed" | "circular", ...}``; the fields of each
        kind are documented in DEVELOPERS.md and in the module docstring.

    Returns
    -------
    ChartMapping
        The fitted calibration; ``residual_report.to_dict()`` gives its residuals as JSON.

    Raises
    ------
    ScienceInputError
        For a missing or bad field (the message starts with the field's path) or a calibration that
        cannot be fitted.
    """
    top = _mapping(spec, field="calibration")
    kind = _option(top.get("kind"), field="kind", options=CALIBRATION_KINDS)
    builders = {
        "cartesian": _cartesian_from_spec,
        "curvilinear": _curvilinear_from_spec,
        "strip_speed": _strip_speed_from_spec,
        "circular": _circular_from_spec,
    }
    return builders[kind](top)
