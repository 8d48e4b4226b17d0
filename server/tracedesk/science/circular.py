"""Circular recorder charts and pen-arm geometry (arc-shaped time lines), for both chart shapes.

A circular chart turns once per period under a pen whose distance from the centre shows the value.
Time is the angle, measured as seen on the image: ``theta = atan2(v - v_c, u - u_c)`` grows clockwise on
the screen because image v runs down. When the pen swings on an arm about a pivot, the printed time
lines are arcs of radius L (the arm length) and a point at radius r lies at the angle
``phi(r) = arccos((r^2 + D^2 - L^2) / (2 r D))`` from the centre -> pivot line, D being the pivot's
distance from the centre. Strip and drum charts written by an arm get the time shift
``dx(y) = L - sqrt(L^2 - (y - y_p)^2)`` at distance ``y - y_p`` from the pivot's height.

References
----------
Handbook of Meteorology, 1921, p. 202 (pen arcs of recorder charts).
Walter et al., "Digitizing chart recorder data: coordinate system conversion for rain gauges",
J. Atmos. Oceanic Technol. 16(8), 1999.
I. Kasa, "A circle fitting procedure and its error analysis", IEEE Trans. Instrum. Meas. 25(1), 1976
(algebraic circle fit used as the starting point of the geometric fit).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from datetime import datetime
from typing import Final

import numpy as np
from numpy.typing import ArrayLike, NDArray

from tracedesk.science.axes import AxisScale
from tracedesk.science.errors import ScienceInputError
from tracedesk.science.registration import (
    COLLINEAR_RATIO,
    MAX_MAGNITUDE,
    ResidualReport,
    as_point_array,
    count_distinct_pixels,
    empty_residual_report,
    residual_report,
    spread_ratio,
)

FloatArray = NDArray[np.float64]


def _quiet() -> np.errstate:
    """Mapping absurd pixels or values gives inf or NaN, never a floating-point warning."""
    return np.errstate(over="ignore", invalid="ignore", divide="ignore", under="ignore")


TIME_DIRECTIONS: Final = {"clockwise": 1.0, "counterclockwise": -1.0}
# A time-zero pixel further than this from the pen arc through the pivot earns a warning.
ARC_MISMATCH_WARNING_PX: Final = 2.0
_TWO_PI: Final = 2.0 * math.pi


def _finite(value: float, *, field: str, minimum: float | None = None, strict: bool = True) -> float:
    if not isinstance(value, int | float) or isinstance(value, bool) or not abs(value) <= MAX_MAGNITUDE:
        raise ScienceInputError(f"{field}: must be a finite number, got {value!r}")
    if minimum is not None and (value <= minimum if strict else value < minimum):
        relation = ">" if strict else ">="
        raise ScienceInputError(f"{field}: must be {relation} {minimum:g}, got {value:g}")
    return float(value)


def _finite_pair(pair: ArrayLike, *, field: str) -> tuple[float, float]:
    array = as_point_array(pair, field=field, finite=True)
    if array.shape[0] != 1:
        raise ScienceInputError(f"{field}: expected one [u, v] pair")
    return float(array[0, 0]), float(array[0, 1])


@dataclass(frozen=True)
class CircleFit:
    """Least-squares circle through points.

    Attributes
    ----------
    centre : tuple of float
        Centre (u, v) in px.
    radius : float
        Radius in px.
    residuals_px : ndarray, shape (n,)
        Signed distance of each point from the circle (px, positive outside).
    rms_px : float
        RMS of the residuals (px).
    """

    centre: tuple[float, float]
    radius: float
    residuals_px: FloatArray
    rms_px: float


def _algebraic_circle(points: FloatArray) -> tuple[FloatArray, float]:
    """Kasa fit: least squares of u^2 + v^2 = 2 a u + 2 b v + c (points centred and scaled)."""
    design = np.column_stack([2.0 * points, np.ones(points.shape[0])])
    (a, b, c), *_ = np.linalg.lstsq(design, np.sum(points**2, axis=1), rcond=None)
    return np.array([a, b]), math.sqrt(max(c + a * a + b * b, 0.0))


def _geometric_circle(points: FloatArray, centre: FloatArray, radius: float) -> tuple[FloatArray, float]:
    """Gauss-Newton on the orthogonal distances |p - c| - R (points centred and scaled)."""
    params = np.array([centre[0], centre[1], radius])
    for _ in range(100):
        offsets = points - params[:2]
        distances = np.hypot(offsets[:, 0], offsets[:, 1])
        if np.any(distances == 0.0):
            break
        jacobian = np.column_stack([-offsets / distances[:, None], -np.ones(points.shape[0])])
        step, *_ = np.linalg.lstsq(jacobian, -(distances - params[2]), rcond=None)
        params = params + step
        if float(np.max(np.abs(step))) <= 1e-14 * (1.0 + abs(params[2])):
            break
    return params[:2], float(params[2])


def fit_circle(points: ArrayLike, *, field: str = "points") -> CircleFit:
    """Circle through three or more points (px): algebraic fit refined by geometric least squares.

    Parameters
    ----------
    points : array_like, shape (n, 2)
        Pixels (px) clicked on one printed ring, or along one printed arc.
    field : str
        Name used in error messages.

    Raises
    ------
    ScienceInputError
        Fewer than three distinct points, or points on one line.
    """
    pixels = as_point_array(points, field=field, finite=True)
    if count_distinct_pixels(pixels) < 3:
        raise ScienceInputError(f"{field}: a circle needs at least 3 distinct points")
    if spread_ratio(pixels) < COLLINEAR_RATIO:
        raise ScienceInputError(f"{field}: the points lie on one line, not on a circle")
    origin = pixels.mean(axis=0)
    scale = float(np.sqrt(np.mean((pixels - origin) ** 2)))
    scaled = (pixels - origin) / scale
    centre, radius = _geometric_circle(scaled, *_algebraic_circle(scaled))
    centre_px = centre * scale + origin
    radius_px = radius * scale
    residuals = np.hypot(*(pixels - centre_px).T) - radius_px
    return CircleFit(
        centre=(float(centre_px[0]), float(centre_px[1])),
        radius=radius_px,
        residuals_px=residuals,
        rms_px=float(np.sqrt(np.mean(residuals**2))),
    )


@dataclass(frozen=True)
class PenArm:
    """A recorder pen arm: pivot (px) and length from pivot to pen tip (px)."""

    pivot_pixel: tuple[float, float]
    length_px: float

    def __post_init__(self) -> None:
        _finite_pair(self.pivot_pixel, field="pen_arc.pivot_pixel")
        _finite(self.length_px, field="pen_arc.length_px", minimum=0.0)


def pen_arm_from_time_line(points: ArrayLike, *, field: str = "time_line_points") -> tuple[PenArm, CircleFit]:
    """Pen arm from three or more pixels (px) clicked along one printed time line (an arc).

    The arc is part of the circle the pen tip draws around the pivot, so the fitted circle's centre is
    the pivot and its radius the arm length (px). ``field`` names the points in error messages.

    Raises
    ------
    ScienceInputError
        Fewer than three distinct points, or points on one line (as :func:`fit_circle`).
    """
    circle = fit_circle(points, field=field)
    return PenArm(pivot_pixel=circle.centre, length_px=circle.radius), circle


def pen_tip_angle(radius: ArrayLike, *, centre_to_pivot: float, arm_length: float) -> FloatArray:
    """Angle (rad) between the centre -> pivot line and the centre -> pen tip line.

    ``phi(r) = arccos((r^2 + D^2 - L^2) / (2 r D))`` for a tip at radius r, pivot at distance D from the
    centre and arm length L (any one length unit). NaN where the arm cannot reach radius r.
    """
    r = np.asarray(radius, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        cosine = (r * r + centre_to_pivot**2 - arm_length**2) / (2.0 * r * centre_to_pivot)
        return np.where(np.abs(cosine) <= 1.0, np.arccos(np.clip(cosine, -1.0, 1.0)), np.nan)


def arc_time_shift(offset: ArrayLike, *, arm_length: float) -> FloatArray:
    """Shift along the time axis of a pen-arm arc: ``dx = L - sqrt(L^2 - y^2)`` at offset y from the pivot.

    Computed as ``y^2 / (L + sqrt(L^2 - y^2))``, which avoids cancellation near the pivot height. Units
    are those of ``offset`` and ``arm_length``; NaN where ``|y| > L``.
    """
    y = np.asarray(offset, dtype=np.float64)
    with np.errstate(invalid="ignore"):
        root = np.sqrt(arm_length * arm_length - y * y)
        return np.where(np.abs(y) <= arm_length, y * y / (arm_length + root), np.nan)


@dataclass(frozen=True)
class RadiusLaw:
    """Value along the radius of a circular chart, linear in the scale's chart coordinate.

    Attributes
    ----------
    scale : AxisScale
        Linear, square-root or log10 scale.
    value_min, value_max : float
        Lowest and highest printed values (axis units), ``value_min < value_max``.
    radius_min_px, radius_max_px : float
        Radii (px) of the rings of those values; the highest value may sit inside the lowest.
    """

    scale: AxisScale
    value_min: float
    value_max: float
    radius_min_px: float
    radius_max_px: float

    def __post_init__(self) -> None:
        if self.scale.name not in ("linear", "sqrt", "log10"):
            raise ScienceInputError("value_axis.scale: a circular value axis is linear, sqrt or log10")
        low = _finite(self.value_min, field="value_axis.min")
        high = _finite(self.value_max, field="value_axis.max")
        if not low < high:
            raise ScienceInputError(f"value_axis: min ({low:g}) must be below max ({high:g})")
        self.scale.values_to_chart(np.array([low, high]), field="value_axis.min/max")
        r0 = _finite(self.radius_min_px, field="value_axis.radius_min_px", minimum=0.0, strict=False)
        r1 = _finite(self.radius_max_px, field="value_axis.radius_max_px", minimum=0.0, strict=False)
        if r0 == r1:
            raise ScienceInputError("value_axis: radius_min_px and radius_max_px must differ")
        c0, c1 = self._chart_ends()
        with np.errstate(over="ignore", divide="ignore"):
            slopes = ((r1 - r0) / (c1 - c0), (c1 - c0) / (r1 - r0))
        if not all(math.isfinite(slope) and slope != 0.0 for slope in slopes):
            raise ScienceInputError("value_axis: min and max (or the two radii) are too close to tell apart")

    def _chart_ends(self) -> tuple[float, float]:
        ends = self.scale.values_to_chart(np.array([self.value_min, self.value_max]))
        return float(ends[0]), float(ends[1])

    def values_to_radius(self, values: ArrayLike) -> FloatArray:
        """Radius (px) of values (axis units); raises for values the scale cannot show."""
        c0, c1 = self._chart_ends()
        chart = self.scale.values_to_chart(values, field="value")
        return self.radius_min_px + (chart - c0) * ((self.radius_max_px - self.radius_min_px) / (c1 - c0))

    def radius_to_values(self, radius: ArrayLike) -> FloatArray:
        """Values (axis units) at radii (px); NaN where the scale has no value."""
        c0, c1 = self._chart_ends()
        r = np.asarray(radius, dtype=np.float64)
        chart = c0 + (r - self.radius_min_px) * ((c1 - c0) / (self.radius_max_px - self.radius_min_px))
        return self.scale.chart_to_values(chart)


class CircularCalibration:
    """Pixels <-> (elapsed hours since time zero in [0, P), value) on a circular chart.

    Parameters
    ----------
    centre : (float, float)
        Chart centre (u, v) in px.
    radius_law : RadiusLaw
        Value along the radius.
    period_hours : float
        Hours per turn, > 0 (24 for a daily chart, 168 for a weekly one).
    time_zero_pixel : (float, float)
        Where the time-zero line meets the ring of the highest value (px).
    time_direction : {"clockwise", "counterclockwise"}
        Side on which later times lie, as seen on the image.
    pen_arm : PenArm or None
        Pen arm whose arcs are the time lines; None for straight radial time lines. The arc through
        ``time_zero_pixel`` is the time-zero line.
    start : datetime or None
        Timezone-aware moment of time zero, when known.
    check_pixels, check_values : array_like or None
        Optional points (px) with known (hours, value) to measure the calibration against.

    Notes
    -----
    Pixels the pen cannot reach (beyond the arm's reach, or below the scale's zero) map to NaN.
    """

    kind: Final = "circular"

    def __init__(
        self,
        *,
        centre: tuple[float, float],
        radius_law: RadiusLaw,
        period_hours: float,
        time_zero_pixel: tuple[float, float],
        time_direction: str,
        pen_arm: PenArm | None = None,
        start: datetime | None = None,
        check_pixels: ArrayLike | None = None,
        check_values: ArrayLike | None = None,
    ) -> None:
        self.centre = _finite_pair(centre, field="centre")
        self.radius_law = radius_law
        self.period_hours = _finite(period_hours, field="period_hours", minimum=0.0)
        self.time_zero_pixel = _finite_pair(time_zero_pixel, field="time_zero_pixel")
        if time_direction not in TIME_DIRECTIONS:
            raise ScienceInputError("time_direction: expected 'clockwise' or 'counterclockwise'")
        self.time_direction = time_direction
        self.pen_arm = pen_arm
        if start is not None and start.utcoffset() is None:
            raise ScienceInputError("start: a chart start time needs an explicit UTC offset")
        self.start = start
        self._sign = TIME_DIRECTIONS[time_direction]
        offset = np.subtract(self.time_zero_pixel, self.centre)
        self._zero_radius = float(np.hypot(*offset))
        if self._zero_radius == 0.0:
            raise ScienceInputError("time_zero_pixel: must not be the centre")
        self._zero_angle = math.atan2(offset[1], offset[0])
        notes = self._set_arm_geometry() if pen_arm is not None else ()
        self.residual_report = self._check(check_pixels, check_values, notes)

    @property
    def x_period_hours(self) -> float | None:
        """The time axis repeats every ``period_hours``."""
        return self.period_hours

    def _set_arm_geometry(self) -> tuple[str, ...]:
        """Fix the pivot's angle, which side of it the tip lies on, and the arc's rotation."""
        assert self.pen_arm is not None
        to_pivot = np.subtract(self.pen_arm.pivot_pixel, self.centre)
        self._pivot_distance = float(np.hypot(*to_pivot))
        self._pivot_angle = math.atan2(to_pivot[1], to_pivot[0])
        if self._pivot_distance == 0.0:
            raise ScienceInputError("pen_arc.pivot_pixel: the pivot cannot be the chart centre")
        self._check_reach()
        phi_zero = float(self._phi(np.array([self._zero_radius]))[0])
        misses = {side: _wrap(self._zero_angle - self._pivot_angle - side * phi_zero) for side in (1.0, -1.0)}
        self._arc_side = min(misses, key=lambda side: abs(misses[side]))
        self._arc_rotation = misses[self._arc_side]
        miss_px = abs(self._arc_rotation) * self._zero_radius
        if miss_px > ARC_MISMATCH_WARNING_PX:
            return (
                f"time_zero_pixel lies {miss_px:.1f} px off the pen arc around the pivot; "
                "the arc was turned to meet it",
            )
        return ()

    def _check_reach(self) -> None:
        assert self.pen_arm is not None
        arm, distance = self.pen_arm.length_px, self._pivot_distance
        law = self.radius_law
        for label, r in (("radius_min_px", law.radius_min_px), ("radius_max_px", law.radius_max_px)):
            if r < abs(arm - distance) - 1e-9 * arm or r > arm + distance + 1e-9 * arm:
                raise ScienceInputError(
                    f"pen_arc: an arm of {arm:g} px with its pivot {distance:g} px from the centre "
                    f"cannot reach value_axis.{label} = {r:g} px"
                )
        if np.isnan(self._phi(np.array([self._zero_radius]))[0]):
            raise ScienceInputError("pen_arc: the pen arm cannot reach time_zero_pixel")

    def _phi(self, radius: FloatArray) -> FloatArray:
        assert self.pen_arm is not None
        return pen_tip_angle(radius, centre_to_pivot=self._pivot_distance, arm_length=self.pen_arm.length_px)

    def time_zero_angle(self, radius: ArrayLike) -> FloatArray:
        """Image angle (rad, clockwise on screen from +u) of the time-zero line at each radius (px)."""
        r = np.asarray(radius, dtype=np.float64)
        if self.pen_arm is None:
            return np.full(r.shape, self._zero_angle)
        return self._pivot_angle + self._arc_rotation + self._arc_side * self._phi(r)

    def pixels_to_values(self, pixels: ArrayLike) -> FloatArray:
        """(elapsed hours in [0, P), value) at pixels (px), shape (n, 2)."""
        uv = as_point_array(pixels, field="pixels")
        with _quiet():
            du, dv = uv[:, 0] - self.centre[0], uv[:, 1] - self.centre[1]
            radius = np.hypot(du, dv)
            turn = np.mod(self._sign * (np.arctan2(dv, du) - self.time_zero_angle(radius)), _TWO_PI)
            hours = turn * (self.period_hours / _TWO_PI)
            hours = np.where(hours >= self.period_hours, hours - self.period_hours, hours)
            return np.column_stack([hours, self.radius_law.radius_to_values(radius)])

    def values_to_pixels(self, values: ArrayLike) -> FloatArray:
        """Pixels (px) of (elapsed hours, value) pairs, shape (n, 2); hours wrap with the period."""
        xy = as_point_array(values, field="values")
        radius = self.radius_law.values_to_radius(xy[:, 1])
        with _quiet():
            radius = np.where(radius >= 0.0, radius, np.nan)
            angle = self.time_zero_angle(radius) + self._sign * _TWO_PI * (xy[:, 0] / self.period_hours)
            return np.column_stack([self.centre[0] + radius * np.cos(angle), self.centre[1] + radius * np.sin(angle)])

    def _check(self, pixels: ArrayLike | None, values: ArrayLike | None, notes: tuple[str, ...]) -> ResidualReport:
        if pixels is None or values is None:
            return empty_residual_report("circular", warnings=notes)
        uv = as_point_array(pixels, field="check_points pixel", finite=True)
        xy = as_point_array(values, field="check_points value", finite=True)
        if uv.shape != xy.shape:
            raise ScienceInputError("check_points: as many pixels as values are needed")
        return residual_report(
            transform="circular",
            pixels=uv,
            values=xy,
            predicted_pixels=self.values_to_pixels(xy),
            predicted_values=self.pixels_to_values(uv),
            warnings=notes,
            x_period_hours=self.period_hours,
        )


def _wrap(angle: float) -> float:
    """Angle wrapped to [-pi, pi)."""
    return (angle + math.pi) % _TWO_PI - math.pi


@dataclass(frozen=True)
class ArcStraightening:
    """Moves points of a strip chart written by a pen arm onto straight time lines, and back.

    Attributes
    ----------
    pivot_pixel : (float, float)
        Pivot of the pen arm (px); only its position across the time axis matters.
    length_px : float
        Arm length (px).
    time_direction : (float, float)
        Unit vector on the image along which later times lie.
    pivot_side : float
        +1 when the pivot lies on the later-time side of the arcs it draws, -1 on the earlier side.

    Notes
    -----
    A point at distance h from the pivot's track (across the time axis) sits ``pivot_side * dx(h)``
    along ``time_direction`` from the straight time line, ``dx(h) = L - sqrt(L^2 - h^2)``. The shift is
    along the time axis, so h is unchanged and the inverse is exact.
    """

    pivot_pixel: tuple[float, float]
    length_px: float
    time_direction: tuple[float, float]
    pivot_side: float

    def _shift(self, pixels: FloatArray) -> FloatArray:
        tu, tv = self.time_direction
        across = (pixels[:, 0] - self.pivot_pixel[0]) * -tv + (pixels[:, 1] - self.pivot_pixel[1]) * tu
        shift = self.pivot_side * arc_time_shift(across, arm_length=self.length_px)
        return np.column_stack([shift * tu, shift * tv])

    def straighten(self, pixels: FloatArray) -> FloatArray:
        """Image pixels (px) -> pixels on straight time lines (px); NaN beyond the arm's reach."""
        return pixels - self._shift(pixels)

    def unstraighten(self, pixels: FloatArray) -> FloatArray:
        """Pixels on straight time lines (px) -> image pixels (px); NaN beyond the arm's reach."""
        return pixels + self._shift(pixels)
