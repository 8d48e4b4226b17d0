"""Charts with exactly known truth for the browser tests, rendered by matplotlib (tests/science/chart_render.py)."""

from __future__ import annotations

import io
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from PIL import Image

from tests.science.chart_render import CircleGrid, GridLines, LinearChartMapping, PenStroke, render_sheet

PEN = "#1f3cc8"
# Strip chart: y = 3 + 2 sin(2 pi x / 24) over x = 0..48 h in a 0..10 m box with known pixel corners.
STRIP = LinearChartMapping(x_range=(0.0, 48.0), y_range=(0.0, 10.0), box_px=(60.0, 40.0, 1140.0, 540.0))
STRIP_SIZE = (1200, 580)
STRIP_FULL_SCALE = 10.0


def strip_truth(x: np.ndarray) -> np.ndarray:
    return 3.0 + 2.0 * np.sin(2 * np.pi * x / 24.0)


def png_bytes(pixels: np.ndarray) -> bytes:
    buffer = io.BytesIO()
    Image.fromarray(pixels).save(buffer, format="PNG")
    return buffer.getvalue()


@lru_cache(maxsize=4)
def strip_chart_png(variant: int = 0) -> bytes:
    """The strip chart; a non-zero ``variant`` darkens the top-left pixel so a collection accepts it as another file."""
    stroke = PenStroke.from_function(strip_truth, mapping=STRIP, x_range=(0.0, 48.0), colour=PEN, width_px=2.5)
    grid = GridLines(u_positions=list(np.arange(60.0, 1141.0, 45.0)), v_positions=list(np.arange(40.0, 541.0, 50.0)))
    pixels = render_sheet(width_px=STRIP_SIZE[0], height_px=STRIP_SIZE[1], strokes=[stroke], grid=grid)
    if variant:
        pixels[0, 0] = (200 - variant, 200 - variant, 200 - variant)
    return png_bytes(pixels)


@dataclass(frozen=True)
class CircularChart:
    """A daily circular chart: values 0..100 between radii 60 and 360 px, time zero at 12 o'clock, clockwise."""

    centre: tuple[float, float] = (400.0, 400.0)
    radius_min: float = 60.0
    radius_max: float = 360.0
    value_min: float = 0.0
    value_max: float = 100.0
    period_hours: float = 24.0
    size: int = 800

    def radius_of(self, value: float | np.ndarray) -> float | np.ndarray:
        fraction = (np.asarray(value, float) - self.value_min) / (self.value_max - self.value_min)
        return self.radius_min + fraction * (self.radius_max - self.radius_min)

    def angle_deg_of(self, hours: float | np.ndarray) -> float | np.ndarray:
        """Image angle, clockwise on screen from +u: time zero points up (-90 degrees)."""
        return -90.0 + 360.0 * np.asarray(hours, float) / self.period_hours

    def pixel_of(self, hours: float, value: float) -> tuple[float, float]:
        angle = np.radians(self.angle_deg_of(hours))
        radius = float(self.radius_of(value))
        return self.centre[0] + radius * float(np.cos(angle)), self.centre[1] + radius * float(np.sin(angle))

    @staticmethod
    def pen_value(hours: np.ndarray) -> np.ndarray:
        return 50.0 + 30.0 * np.sin(2 * np.pi * hours / 24.0)

    def png(self) -> bytes:
        return _circular_png(self)

    def _render(self) -> bytes:
        def radius_of_angle(angle_deg: np.ndarray) -> np.ndarray:
            hours = (angle_deg + 90.0) / 360.0 * self.period_hours
            return np.asarray(self.radius_of(self.pen_value(hours)), float)

        pen = PenStroke.from_polar(radius_of_angle, centre_uv=self.centre, angle_range_deg=(-90.0, 270.0), colour=PEN)
        grid = CircleGrid(
            centre_uv=self.centre,
            radii_px=list(np.arange(self.radius_min, self.radius_max + 1, 30.0)),
            angles_deg=list(np.arange(-90.0, 270.0, 15.0)),
            radius_range_px=(self.radius_min, self.radius_max),
        )
        return png_bytes(render_sheet(width_px=self.size, height_px=self.size, strokes=[pen], grid=grid))


@lru_cache(maxsize=4)
def _circular_png(chart: CircularChart) -> bytes:
    return chart._render()
