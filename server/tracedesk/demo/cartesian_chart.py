"""Rectangular charts: strip-chart recorder paper and laboratory graph paper (linear or log10 scales).

The grid is printed in a box on the paper; values map linearly in each axis' chart coordinate (the value
itself, or its log10) onto that box, x to the right and y upwards. Everything is drawn in the paper frame
(mm converted to px at the scan resolution) and carried to the scan by the sheet's warp.
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


@dataclass(frozen=True)
class ChartAxis:
    """One axis: range, scale, printed lines (major, minor) and labels ``(value, text)``."""

    low: float
    high: float
    scale: str
    major: tuple[float, ...]
    minor: tuple[float, ...]
    labels: tuple[tuple[float, str], ...]
    unit: str = ""

    def fraction(self, values: ArrayLike) -> FloatArray:
        """Position along the axis, 0 at ``low`` and 1 at ``high``."""
        chart = np.log10 if self.scale == "log10" else np.asarray
        value = np.asarray(values, dtype=np.float64)
        return np.asarray((chart(value) - chart(self.low)) / (chart(self.high) - chart(self.low)), dtype=np.float64)

    def calibration_axis(self) -> dict[str, Any]:
        """The axis in the calibration's JSON shape."""
        return {"scale": self.scale, "unit": self.unit} if self.unit else {"scale": self.scale}


@dataclass(frozen=True)
class PenSpec:
    """A pen: what it records, its unit, ink (``#rrggbb``) and width (mm)."""

    name: str
    unit: str
    colour: str
    width_mm: float = 0.35


@dataclass(frozen=True)
class Lettering:
    """Printed text at a paper position (mm), size (mm), Pillow anchor, weight (0-1) and turn (deg clockwise)."""

    text: str
    at_mm: tuple[float, float]
    size_mm: float
    anchor: str = "mm"
    strength: float = 1.0
    angle_deg: float = 0.0


@dataclass(frozen=True)
class CartesianDesign:
    """A rectangular chart: paper size, grid box (left, top, right, bottom, mm), axes, pens, text."""

    kind: str
    paper_mm: tuple[float, float]
    box_mm: tuple[float, float, float, float]
    x_axis: ChartAxis
    y_axis: ChartAxis
    pens: tuple[PenSpec, ...]
    control_values: tuple[tuple[float, float], ...]
    lettering: tuple[Lettering, ...] = ()
    grid_colour: str = "#4f8f62"
    note: str = ""
    note_at_mm: tuple[float, float] = (0.0, 0.0)
    sprocket_pitch_mm: float | None = None


@dataclass(frozen=True)
class _Frame:
    design: CartesianDesign
    dpi: float
    margin_mm: float

    def px(self, mm: float) -> float:
        return mm * self.dpi / MM_PER_INCH

    def at(self, mm: tuple[float, float]) -> tuple[float, float]:
        return (self.px(mm[0] + self.margin_mm), self.px(mm[1] + self.margin_mm))

    @property
    def shape(self) -> tuple[int, int]:
        width, height = self.design.paper_mm
        return (round(self.px(height + 2 * self.margin_mm)), round(self.px(width + 2 * self.margin_mm)))

    def to_paper(self, x: ArrayLike, y: ArrayLike) -> FloatArray:
        """Paper pixels of chart values."""
        left, top, right, bottom = self.design.box_mm
        fx, fy = self.design.x_axis.fraction(x), self.design.y_axis.fraction(y)
        scale = self.dpi / MM_PER_INCH
        u, v = np.broadcast_arrays(
            (self.margin_mm + left + fx * (right - left)) * scale,
            (self.margin_mm + bottom - fy * (bottom - top)) * scale,
        )
        return np.column_stack([u, v]).astype(np.float64)


def _grid(frame: _Frame, warp: SheetWarp, minor: NDArray[np.float32], major: NDArray[np.float32]) -> None:
    d = frame.design
    steps = np.linspace(0.0, 1.0, 200)
    if d.y_axis.scale == "log10":
        along_y = d.y_axis.low * (d.y_axis.high / d.y_axis.low) ** steps
    else:
        along_y = d.y_axis.low + steps * (d.y_axis.high - d.y_axis.low)
    along_x = d.x_axis.low + steps * (d.x_axis.high - d.x_axis.low)
    for values, layer, width in ((d.x_axis.minor, minor, 0.13), (d.x_axis.major, major, 0.25)):
        lines = [warp.paper_to_scan(frame.to_paper(np.full(steps.shape, x), along_y)) for x in values]
        stroke_polylines(layer, lines, width_px=frame.px(width))
    for values, layer, width in ((d.y_axis.minor, minor, 0.13), (d.y_axis.major, major, 0.25)):
        lines = [warp.paper_to_scan(frame.to_paper(along_x, np.full(steps.shape, y))) for y in values]
        stroke_polylines(layer, lines, width_px=frame.px(width))


def _labels(frame: _Frame, text: NDArray[np.float32]) -> None:
    d = frame.design
    left, top, right, bottom = d.box_mm
    size = frame.px(2.6)
    for x, label in d.x_axis.labels:
        u = float(frame.to_paper(x, d.y_axis.low)[0, 0])
        for v_mm in (top - 3.0, bottom + 3.5):
            draw_text(text, label, at_uv=(u, frame.px(v_mm + frame.margin_mm)), size_px=size)
    for y, label in d.y_axis.labels:
        v = float(frame.to_paper(d.x_axis.low, y)[0, 1])
        draw_text(text, label, at_uv=(frame.px(left - 2.0 + frame.margin_mm), v), size_px=size, anchor="rm")
        draw_text(text, label, at_uv=(frame.px(right + 2.0 + frame.margin_mm), v), size_px=size, anchor="lm")
    for item in d.lettering:
        draw_text(
            text,
            item.text,
            at_uv=frame.at(item.at_mm),
            size_px=frame.px(item.size_mm),
            anchor=item.anchor,
            strength=item.strength,
            angle_deg=item.angle_deg,
        )


def _paper_mask(frame: _Frame) -> NDArray[np.float32]:
    """The sheet in the paper frame (1 on paper), with sprocket holes along the long edges if it has them."""
    rows, cols = frame.shape
    mask = np.zeros((rows, cols), dtype=np.float32)
    m = round(frame.px(frame.margin_mm))
    mask[m : rows - m, m : cols - m] = 1.0
    pitch = frame.design.sprocket_pitch_mm
    if pitch:
        holes = new_canvas(rows, cols)
        width, height = frame.design.paper_mm
        for index in range(int(width / pitch)):
            for v_mm in (5.0, height - 5.0):
                fill_disc(holes, centre_uv=frame.at((pitch / 2 + index * pitch, v_mm)), radius_px=frame.px(1.9))
        mask *= 1.0 - holes
    return mask


def _pens(
    frame: _Frame,
    warp: SheetWarp,
    signals: tuple[Signal, ...],
    spans: tuple[tuple[float, float], ...],
    shape: tuple[int, int],
) -> tuple[list[PenTruth], list[InkLayer]]:
    truths, inks = [], []
    for spec, signal, span in zip(frame.design.pens, signals, spans, strict=True):
        x = np.linspace(span[0], span[1], max(4000, round(frame.px(300.0) * 4)))
        pixels = warp.paper_to_scan(frame.to_paper(x, signal(x)))
        layer = new_canvas(*shape)
        stroke_polyline(layer, pixels, width_px=frame.px(spec.width_mm))
        truths.append(PenTruth(spec.name, spec.unit, spec.colour, signal, x, pixels, frame.px(spec.width_mm)))
        inks.append(InkLayer(layer, spec.colour, opacity=0.9, uneven=True))
    return truths, inks


def _calibration(frame: _Frame, warp: SheetWarp) -> dict[str, Any]:
    d = frame.design
    points = [
        {"pixel": [float(c) for c in warp.paper_to_scan(frame.to_paper(x, y))[0]], "value": [x, y]}
        for x, y in d.control_values
    ]
    return {
        "kind": "cartesian",
        "x_axis": d.x_axis.calibration_axis(),
        "y_axis": d.y_axis.calibration_axis(),
        "control_points": points,
        "transform": "auto",
    }


def render_cartesian_chart(
    design: CartesianDesign,
    signals: tuple[Signal, ...],
    *,
    spans: tuple[tuple[float, float], ...],
    warp: SheetWarp,
    ageing: Ageing,
    dpi: float,
    seed: int,
    margin_mm: float = 3.0,
) -> RenderedSheet:
    """Render the chart as scanned at ``dpi``: pen k writes ``signals[k]`` over ``spans[k]`` (x units)."""
    rng = np.random.default_rng(seed)
    frame = _Frame(design, dpi, margin_mm)
    shape = frame.shape
    minor, major, text, note = (new_canvas(*shape) for _ in range(4))
    _grid(frame, warp, minor, major)
    _labels(frame, text)
    if design.note:
        draw_handwriting(
            note, design.note, at_uv=frame.at(design.note_at_mm), size_px=frame.px(4.0), rng=rng, angle_deg=-1.5
        )
    pens, pen_inks = _pens(frame, warp, signals, spans, shape)
    inks = [
        InkLayer(minor, design.grid_colour, opacity=0.5),
        InkLayer(major, design.grid_colour, opacity=0.85),
        InkLayer(warp.resample_layer(text, shape), design.grid_colour, opacity=0.95),
        InkLayer(warp.resample_layer(note, shape), "#27324f", opacity=0.85),
        *pen_inks,
    ]
    paper = np.clip(warp.resample_layer(_paper_mask(frame), shape), 0.0, 1.0)
    image = compose_scan(paper=paper, inks=inks, ageing=ageing, dpi=dpi, rng=rng)
    calibration = _calibration(frame, warp)
    corners = warp.paper_to_scan(
        frame.to_paper(
            np.array([design.x_axis.low, design.x_axis.high, design.x_axis.high, design.x_axis.low]),
            np.array([design.y_axis.high, design.y_axis.high, design.y_axis.low, design.y_axis.low]),
        )
    )
    geometry = {
        "plot_corners_px": corners.tolist(),
        "rotation_deg": warp.rotation_deg,
        "shrink": [warp.shrink_u, warp.shrink_v],
        "bow": warp.bow,
    }
    full_scale = design.y_axis.high - design.y_axis.low
    truth = SheetTruth(design.kind, shape[1], shape[0], dpi, calibration, tuple(pens), geometry, full_scale)
    return RenderedSheet(image, truth)


def cartesian_warp(
    design: CartesianDesign,
    *,
    dpi: float,
    rotation_deg: float,
    shrink: tuple[float, float],
    offset_mm: tuple[float, float],
    bow: float,
    margin_mm: float = 3.0,
) -> SheetWarp:
    """A placement of the sheet on the scanner: turned, shrunk unevenly, shifted, bowed a little."""
    frame = _Frame(design, dpi, margin_mm)
    rows, cols = frame.shape
    return SheetWarp(
        rotation_deg=rotation_deg,
        shrink_u=shrink[0],
        shrink_v=shrink[1],
        offset_px=(frame.px(offset_mm[0]), frame.px(offset_mm[1])),
        pivot_px=(cols / 2, rows / 2),
        bow=bow,
        span_px=float(cols),
    )


def log_decade_lines(low: float, high: float) -> tuple[tuple[float, ...], tuple[float, ...]]:
    """Major (decades) and minor (2-9 times each decade) lines of a log10 axis from ``low`` to ``high``."""
    first, last = round(math.log10(low)), round(math.log10(high))
    major = tuple(10.0**k for k in range(first, last + 1))
    minor = tuple(m * 10.0**k for k in range(first, last) for m in range(2, 10))
    return major, minor
