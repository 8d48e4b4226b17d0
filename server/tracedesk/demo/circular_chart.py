"""A weekly circular chart: value rings, pen-arc time lines, a pen trace, labels, and its exact truth.

Geometry (REFERENCES.md, "Chart recorder geometry"): the pen swings on an arm of length L about a pivot at
distance D from the chart centre, so a printed time line is an arc of radius L, and the pen tip at radius r
sits at the angle ``phi(r)`` from the centre -> pivot line, where the circle of radius r about the centre meets
the circle of radius L about the pivot. Time turns the whole pattern about the centre by ``2 pi t / P``.
Angles are image angles, clockwise on the screen from +u.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from tracedesk.demo.compose import Ageing, InkLayer, compose_scan
from tracedesk.demo.lettering import draw_handwriting, draw_text
from tracedesk.demo.raster import fill_disc, new_canvas, stroke_polyline, stroke_polylines
from tracedesk.demo.signals import Signal
from tracedesk.demo.truth import PenTruth, RenderedSheet, SheetTruth
from tracedesk.demo.warp import SheetWarp

FloatArray = NDArray[np.float64]
MM_PER_INCH = 25.4
DAY_NAMES = ("MON", "TUE", "WED", "THU", "FRI", "SAT", "SUN")


def pen_arc_angle(radius: ArrayLike, *, centre_to_pivot: float, arm_length: float) -> FloatArray:
    """Angle (rad) at the centre between the pivot and a pen tip at ``radius`` (any one length unit).

    Where the circle of ``radius`` about the centre meets the arm's circle about the pivot: with the pivot
    on +x at distance D, the meeting point has ``x = (r^2 + D^2 - L^2) / (2 D)`` and ``y = sqrt(r^2 - x^2)``.
    NaN where the arm cannot reach.
    """
    r = np.asarray(radius, dtype=np.float64)
    x = (r * r + centre_to_pivot**2 - arm_length**2) / (2.0 * centre_to_pivot)
    with np.errstate(invalid="ignore"):
        y = np.sqrt(r * r - x * x)
    return np.arctan2(y, x)


@dataclass(frozen=True)
class CircularDesign:
    """The printed chart and its recorder (lengths in mm, as printed on a 12-inch chart)."""

    title: tuple[str, ...]
    pen_name: str
    unit: str
    value_min: float = 0.0
    value_max: float = 12.0
    major_step: float = 1.0
    minor_step: float = 0.2
    diameter_mm: float = 12 * MM_PER_INCH
    radius_min_mm: float = 25.0
    radius_max_mm: float = 145.0
    arm_mm: float = 140.0
    pivot_distance_mm: float = 140.0
    pivot_angle_deg: float = -90.0
    arc_side: float = 1.0
    period_hours: float = 168.0
    time_direction: str = "counterclockwise"
    grid_colour: str = "#3d8a63"
    pen_colour: str = "#c0282e"
    pen_width_mm: float = 0.4
    first_day: int = 0
    note: str = ""


@dataclass(frozen=True)
class _Frame:
    """The design in paper pixels at one resolution."""

    design: CircularDesign
    dpi: float
    size: int
    centre: tuple[float, float]

    def px(self, mm: float) -> float:
        return mm * self.dpi / MM_PER_INCH

    @property
    def sign(self) -> float:
        return 1.0 if self.design.time_direction == "clockwise" else -1.0

    def radius_of(self, value: ArrayLike) -> FloatArray:
        d = self.design
        fraction = (np.asarray(value, dtype=np.float64) - d.value_min) / (d.value_max - d.value_min)
        return self.px(d.radius_min_mm) + fraction * (self.px(d.radius_max_mm) - self.px(d.radius_min_mm))

    def angle_of(self, radius: FloatArray, hours: ArrayLike) -> FloatArray:
        d = self.design
        phi = pen_arc_angle(radius, centre_to_pivot=self.px(d.pivot_distance_mm), arm_length=self.px(d.arm_mm))
        turn = 2.0 * math.pi * np.asarray(hours, dtype=np.float64) / d.period_hours
        return math.radians(d.pivot_angle_deg) + d.arc_side * phi + self.sign * turn

    def point(self, radius: FloatArray, angle: FloatArray) -> FloatArray:
        return np.column_stack([self.centre[0] + radius * np.cos(angle), self.centre[1] + radius * np.sin(angle)])


def _frame(design: CircularDesign, dpi: float, margin_mm: float) -> _Frame:
    size = round((design.diameter_mm + 2 * margin_mm) * dpi / MM_PER_INCH)
    return _Frame(design, dpi, size, (size / 2.0, size / 2.0))


def _rings(frame: _Frame, warp: SheetWarp, minor: NDArray[np.float32], major: NDArray[np.float32]) -> None:
    d = frame.design
    count = round((d.value_max - d.value_min) / d.minor_step)
    per_major = round(d.major_step / d.minor_step)
    rings: dict[bool, list[FloatArray]] = {True: [], False: []}
    for index in range(count + 1):
        radius = float(frame.radius_of(d.value_min + index * d.minor_step))
        angles = np.linspace(0.0, 2.0 * math.pi, max(64, int(radius)), endpoint=True)
        rings[index % per_major == 0].append(warp.paper_to_scan(frame.point(np.full(angles.shape, radius), angles)))
    stroke_polylines(major, rings[True], width_px=frame.px(0.3))
    stroke_polylines(minor, rings[False], width_px=frame.px(0.15))


def _time_arcs(frame: _Frame, warp: SheetWarp, minor: NDArray[np.float32], major: NDArray[np.float32]) -> None:
    """Arcs every 2 h (thin), 6 h (medium) and 24 h (heavy)."""
    d = frame.design
    radius = np.linspace(frame.px(d.radius_min_mm), frame.px(d.radius_max_mm), 400)
    arcs: dict[float, list[FloatArray]] = {0.35: [], 0.22: [], 0.12: []}
    for hour in range(0, round(d.period_hours), 2):
        width = 0.35 if hour % 24 == 0 else (0.22 if hour % 6 == 0 else 0.12)
        arcs[width].append(warp.paper_to_scan(frame.point(radius, frame.angle_of(radius, hour))))
    for width, lines in arcs.items():
        stroke_polylines(minor if width == 0.12 else major, lines, width_px=frame.px(width))


def _labels(frame: _Frame, text: NDArray[np.float32]) -> None:
    """Day names in the rim band, hour numbers and values along the arcs, the title in the centre (paper frame)."""
    d = frame.design
    rim = frame.px((d.radius_max_mm + d.diameter_mm / 2.0) / 2.0)
    for day in range(round(d.period_hours / 24)):
        for hour, label in ((12.0, DAY_NAMES[(d.first_day + day) % 7]), (6.0, "6"), (18.0, "18")):
            angle = float(frame.angle_of(np.array([rim]), day * 24 + hour)[0])
            at = (frame.centre[0] + rim * math.cos(angle), frame.centre[1] + rim * math.sin(angle))
            size = frame.px(3.6 if len(label) > 2 else 2.6)
            draw_text(text, label, at_uv=at, size_px=size, angle_deg=math.degrees(angle) + 90.0)
    for value in np.arange(d.value_min + d.major_step, d.value_max + 1e-9, d.major_step):
        radius = float(frame.radius_of(value)) + frame.px(1.6)
        angle = float(frame.angle_of(np.array([radius]), 3.0)[0])
        at = (frame.centre[0] + radius * math.cos(angle), frame.centre[1] + radius * math.sin(angle))
        draw_text(text, f"{value:g}", at_uv=at, size_px=frame.px(2.4), angle_deg=math.degrees(angle) + 90.0)
    top = frame.centre[1] - frame.px(14.0)
    for index, line in enumerate(d.title):
        at = (frame.centre[0], top + index * frame.px(3.4))
        draw_text(text, line, at_uv=at, size_px=frame.px(2.5 if index else 2.8))


def _note(frame: _Frame, note: NDArray[np.float32], rng: np.random.Generator) -> None:
    if frame.design.note:
        at = (frame.centre[0] - frame.px(19.0), frame.centre[1] + frame.px(10.0))
        draw_handwriting(note, frame.design.note, at_uv=at, size_px=frame.px(3.4), rng=rng, angle_deg=-6.0)


def _pen(frame: _Frame, warp: SheetWarp, signal: Signal, span: tuple[float, float]) -> tuple[FloatArray, FloatArray]:
    """Dense times and scan pixels of the pen's centre line."""
    hours = np.linspace(span[0], span[1], max(4000, round(40 * (span[1] - span[0]) * frame.dpi / 200.0)))
    radius = frame.radius_of(signal(hours))
    return hours, warp.paper_to_scan(frame.point(radius, frame.angle_of(radius, hours)))


def _paper_mask(frame: _Frame, warp: SheetWarp) -> NDArray[np.float32]:
    """Where the disc of paper lies in the scan, less its centre hole."""
    mask = new_canvas(frame.size, frame.size)
    centre = tuple(warp.paper_to_scan(np.array([frame.centre]))[0])
    scale = warp.mean_scale
    fill_disc(mask, centre_uv=(centre[0], centre[1]), radius_px=frame.px(frame.design.diameter_mm / 2.0) * scale)
    hole = new_canvas(frame.size, frame.size)
    fill_disc(hole, centre_uv=(centre[0], centre[1]), radius_px=frame.px(3.2) * scale)
    return mask * (1.0 - hole)


def _truth_calibration(frame: _Frame, warp: SheetWarp) -> dict[str, Any]:
    """The exact circular calibration, in scan pixels (the warp is a similarity: circles stay circles)."""
    d = frame.design
    scale = warp.mean_scale
    r_max = float(frame.radius_of(d.value_max))
    pivot_angle = math.radians(d.pivot_angle_deg)
    pivot = (
        frame.centre[0] + frame.px(d.pivot_distance_mm) * math.cos(pivot_angle),
        frame.centre[1] + frame.px(d.pivot_distance_mm) * math.sin(pivot_angle),
    )
    zero = frame.point(np.array([r_max]), frame.angle_of(np.array([r_max]), 0.0))
    check = [(hours, value) for hours in (24.0, 78.0, 132.0) for value in (d.value_min + 2 * d.major_step, d.value_max)]
    check_radius = frame.radius_of([value for _, value in check])
    check_pixels = warp.paper_to_scan(frame.point(check_radius, frame.angle_of(check_radius, [h for h, _ in check])))
    return {
        "kind": "circular",
        "centre": [float(c) for c in warp.paper_to_scan(np.array([frame.centre]))[0]],
        "value_axis": {
            "scale": "linear",
            "min": d.value_min,
            "max": d.value_max,
            "radius_min_px": float(frame.radius_of(d.value_min)) * scale,
            "radius_max_px": r_max * scale,
            "unit": d.unit,
        },
        "period_hours": d.period_hours,
        "time_zero_pixel": [float(c) for c in warp.paper_to_scan(zero)[0]],
        "time_direction": d.time_direction,
        "pen_arc": {
            "pivot_pixel": [float(c) for c in warp.paper_to_scan(np.array([pivot]))[0]],
            "length_px": frame.px(d.arm_mm) * scale,
        },
        "check_points": [
            {"pixel": [float(u), float(v)], "value": [hours, value]}
            for (u, v), (hours, value) in zip(check_pixels, check, strict=True)
        ],
    }


def circular_warp(
    design: CircularDesign,
    *,
    dpi: float,
    rotation_deg: float,
    shrink: float,
    offset_mm: tuple[float, float],
    margin_mm: float = 2.5,
) -> SheetWarp:
    """A similarity placement of the chart on the scanner (circles stay circles)."""
    frame = _frame(design, dpi, margin_mm)
    mm = dpi / MM_PER_INCH
    return SheetWarp(
        rotation_deg=rotation_deg,
        shrink_u=shrink,
        shrink_v=shrink,
        offset_px=(offset_mm[0] * mm, offset_mm[1] * mm),
        pivot_px=frame.centre,
    )


def render_circular_chart(
    design: CircularDesign,
    signal: Signal,
    *,
    span_hours: tuple[float, float],
    warp: SheetWarp,
    ageing: Ageing,
    dpi: float,
    seed: int,
    margin_mm: float = 2.5,
) -> RenderedSheet:
    """Render the chart as scanned at ``dpi``; the pen writes ``signal`` from ``span_hours[0]`` to ``[1]``."""
    rng = np.random.default_rng(seed)
    frame = _frame(design, dpi, margin_mm)
    shape = (frame.size, frame.size)
    minor, major, text, note, pen = (new_canvas(*shape) for _ in range(5))
    _rings(frame, warp, minor, major)
    _time_arcs(frame, warp, minor, major)
    _labels(frame, text)
    _note(frame, note, rng)
    hours, pen_pixels = _pen(frame, warp, signal, span_hours)
    pen_width = frame.px(design.pen_width_mm)
    stroke_polyline(pen, pen_pixels, width_px=pen_width)
    inks = [
        InkLayer(minor, design.grid_colour, opacity=0.55),
        InkLayer(major, design.grid_colour, opacity=0.85),
        InkLayer(warp.resample_layer(text, shape), design.grid_colour, opacity=0.9),
        InkLayer(warp.resample_layer(note, shape), "#27324f", opacity=0.85),
        InkLayer(pen, design.pen_colour, opacity=0.92, uneven=True),
    ]
    image = compose_scan(paper=_paper_mask(frame, warp), inks=inks, ageing=ageing, dpi=dpi, rng=rng)
    calibration = _truth_calibration(frame, warp)
    geometry = {
        "centre": calibration["centre"],
        "radius_min_px": calibration["value_axis"]["radius_min_px"],
        "radius_max_px": calibration["value_axis"]["radius_max_px"],
        "pivot_px": calibration["pen_arc"]["pivot_pixel"],
        "arm_px": calibration["pen_arc"]["length_px"],
        "time_zero_px": calibration["time_zero_pixel"],
        "rotation_deg": warp.rotation_deg,
        "scale": warp.mean_scale,
    }
    pens = (PenTruth(design.pen_name, design.unit, design.pen_colour, signal, hours, pen_pixels, pen_width),)
    truth = SheetTruth(
        "circular", frame.size, frame.size, dpi, calibration, pens, geometry, design.value_max - design.value_min
    )
    return RenderedSheet(image, truth)
