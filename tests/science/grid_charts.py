"""Printed chart grids with exactly known geometry, for the automatic registration tests and bench.

Grid lines are drawn as dense polylines (``PenStroke`` of chart_render) through a *warp* of the sheet:
any smooth map of pixels (px -> px, ARCHITECTURE.md convention), so keystone, uneven shrink and
rotation bend the printed lines exactly as the truth says, without resampling the image. The true
control point of line x_k and line y_l is the warp of their crossing on the unwarped sheet.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from tests.science.chart_render import PAPER_WHITE, PenStroke, render_sheet, rgb_of
from tracedesk.science.grid_spec import AxisGridSpec, CartesianGridSpec

FloatArray = NDArray[np.float64]
Warp = Callable[[FloatArray], FloatArray]
GRID_RED = "#e0907a"


def identity(points: FloatArray) -> FloatArray:
    return np.asarray(points, dtype=np.float64)


def projective(matrix: FloatArray) -> Warp:
    """Keystone: the plane homography ``matrix`` (3x3) acting on (u, v, 1)."""

    def apply(points: FloatArray) -> FloatArray:
        h = np.column_stack([points, np.ones(len(points))]) @ np.asarray(matrix, float).T
        return h[:, :2] / h[:, 2:3]

    return apply


def keystone(*, width: float, height: float, strength: float) -> Warp:
    """Top edge narrower than the bottom by ``strength`` (fraction), about the sheet centre."""
    cx, cy = width / 2.0, height / 2.0
    k = strength / height
    centre = np.array([[1.0, 0.0, -cx], [0.0, 1.0, -cy], [0.0, 0.0, 1.0]])
    back = np.array([[1.0, 0.0, cx], [0.0, 1.0, cy], [0.0, 0.0, 1.0]])
    tilt = np.array([[1.0, 0.0, 0.0], [0.0, 1.0, 0.0], [0.0, -k, 1.0]])
    return projective(back @ tilt @ centre)


def uneven_shrink(*, width: float, height: float, sx: float, sy: float, gradient: float) -> Warp:
    """Different scales in u and v about the centre, plus spacing growing by ``gradient`` across u."""
    cx, cy = width / 2.0, height / 2.0

    def apply(points: FloatArray) -> FloatArray:
        du, dv = points[:, 0] - cx, points[:, 1] - cy
        u = cx + sx * du + gradient * du * du / width
        return np.column_stack([u, cy + sy * dv])

    return apply


def rotation(angle_deg: float, *, width: float, height: float) -> Warp:
    """Clockwise (on the screen) rotation about the sheet centre."""
    theta = np.radians(angle_deg)
    matrix = np.array([[np.cos(theta), -np.sin(theta)], [np.sin(theta), np.cos(theta)]])
    centre = np.array([width / 2.0, height / 2.0])

    def apply(points: FloatArray) -> FloatArray:
        return (np.asarray(points, float) - centre) @ matrix.T + centre

    return apply


def compose(*warps: Warp) -> Warp:
    """Apply the warps in order."""

    def apply(points: FloatArray) -> FloatArray:
        for warp in warps:
            points = warp(points)
        return points

    return apply


@dataclass(frozen=True)
class PrintedChart:
    """A chart spec printed into the box (u_left, v_top, u_right, v_bottom) of the unwarped sheet."""

    spec: CartesianGridSpec
    box_px: tuple[float, float, float, float]
    warp: Warp = identity

    def _fraction(self, axis: AxisGridSpec, values: FloatArray) -> FloatArray:
        scale = axis.axis_scale()
        ends = scale.values_to_chart(np.array(axis.frame))
        return (scale.values_to_chart(values) - ends[0]) / (ends[1] - ends[0])

    def unwarped(self, x: FloatArray, y: FloatArray) -> FloatArray:
        """Unwarped sheet pixels of chart values (x right, y up)."""
        left, top, right, bottom = self.box_px
        u = left + self._fraction(self.spec.x_axis, np.asarray(x, float)) * (right - left)
        v = bottom - self._fraction(self.spec.y_axis, np.asarray(y, float)) * (bottom - top)
        return np.column_stack([u, v])

    def truth(self, values: FloatArray) -> FloatArray:
        """True sheet pixels (px) of chart values (n, 2)."""
        values = np.asarray(values, float)
        return self.warp(self.unwarped(values[:, 0], values[:, 1]))

    def grid_strokes(self, *, minor_px: float = 1.0, major_px: float = 2.0, samples: int = 300) -> list[PenStroke]:
        """Every printed line as a dense polyline through the warp."""
        strokes = []
        x_values, x_major = self.spec.x_axis.line_values()
        y_values, y_major = self.spec.y_axis.line_values()
        y_span = np.linspace(y_values[0], y_values[-1], samples)
        x_span = np.linspace(x_values[0], x_values[-1], samples)
        if self.spec.y_axis.scale == "log10":
            y_span = np.geomspace(y_values[0], y_values[-1], samples)
        if self.spec.x_axis.scale == "log10":
            x_span = np.geomspace(x_values[0], x_values[-1], samples)
        for x, major in zip(x_values, x_major, strict=True):
            points = self.warp(self.unwarped(np.full(samples, x), y_span))
            strokes.append(PenStroke(points, self.spec.grid_colour, major_px if major else minor_px))
        for y, major in zip(y_values, y_major, strict=True):
            points = self.warp(self.unwarped(x_span, np.full(samples, y)))
            strokes.append(PenStroke(points, self.spec.grid_colour, major_px if major else minor_px))
        return strokes

    def pen(self, function: Callable[[FloatArray], FloatArray], *, colour: str, width_px: float = 2.0) -> PenStroke:
        """A pen trace y = function(x) across the frame, through the warp."""
        x_values, _ = self.spec.x_axis.line_values()
        x = np.linspace(x_values[0], x_values[-1], 3000)
        return PenStroke(self.warp(self.unwarped(x, function(x))), colour, width_px)


def render_chart(
    chart: PrintedChart, *, width: int, height: int, pens: list[PenStroke] | None = None, **grid: float
) -> NDArray[np.uint8]:
    """Render the chart's grid (and pens on top) into an (H, W, 3) uint8 array."""
    return render_sheet(width_px=width, height_px=height, strokes=chart.grid_strokes(**grid) + list(pens or []))


def add_stain(
    image: NDArray[np.uint8], *, centre: tuple[float, float], radius: float, colour: str, opacity: float
) -> NDArray[np.uint8]:
    """A translucent blob with a soft edge (coffee, water): paper and ink tinted towards ``colour``."""
    height, width = image.shape[:2]
    v, u = np.mgrid[0:height, 0:width] + 0.5
    distance = np.hypot(u - centre[0], v - centre[1]) / radius
    alpha = opacity * np.clip(1.5 - distance, 0.0, 1.0)[..., None]
    tint = np.array(rgb_of(colour), float) / 255.0
    stained = image.astype(float) * (1.0 - alpha + alpha * tint)
    return np.clip(np.rint(stained), 0, 255).astype(np.uint8)


def erase(image: NDArray[np.uint8], *, box: tuple[int, int, int, int]) -> NDArray[np.uint8]:
    """Paint the box (u0, v0, u1, v1) with paper: a stretch where the print is missing."""
    out = image.copy()
    u0, v0, u1, v1 = box
    out[v0:v1, u0:u1] = rgb_of(PAPER_WHITE)
    return out


def add_noise(image: NDArray[np.uint8], *, sigma: float, seed: int = 0) -> NDArray[np.uint8]:
    """Gaussian noise of ``sigma`` code values on every channel."""
    noisy = image.astype(float) + np.random.default_rng(seed).normal(0.0, sigma, image.shape)
    return np.clip(np.rint(noisy), 0, 255).astype(np.uint8)


def scribbles(*, width: int, height: int, count: int, colour: str, seed: int = 0) -> list[PenStroke]:
    """Text-like marks: short wiggly strokes in rows, like handwriting."""
    rng = np.random.default_rng(seed)
    strokes = []
    for _ in range(count):
        u0, v0 = rng.uniform(0.05 * width, 0.9 * width), rng.uniform(0.05 * height, 0.95 * height)
        t = np.linspace(0.0, 1.0, 60)
        length = rng.uniform(15, 60)
        points = np.column_stack(
            [u0 + length * t, v0 + 6.0 * np.sin(2 * np.pi * rng.uniform(2, 5) * t + rng.uniform(0, 6))]
        )
        strokes.append(PenStroke(points, colour, rng.uniform(1.0, 2.5)))
    return strokes
