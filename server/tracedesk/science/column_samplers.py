"""Where the samples across the pen come from: pixel columns of a box or polygon, or radial lines of a
circular chart (bilinear, so a sample between pixels mixes their colours as the ink coverage does).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from tracedesk.science.polar_unwrap import PolarGrid
from tracedesk.science.trace_regions import PixelWindow, points_in_polygon

FloatArray = NDArray[np.float64]
IndexArray = NDArray[np.intp]
BoolArray = NDArray[np.bool_]


@dataclass(frozen=True)
class PixelColumnSampler:
    """Column c is pixel column ``window.col_start + c``; position k is pixel row ``window.row_start + k``."""

    image: NDArray[np.uint8]
    window: PixelWindow
    polygon: FloatArray | None = None

    @property
    def n_columns(self) -> int:
        """Number of pixel columns in the window."""
        return self.window.col_stop - self.window.col_start

    @property
    def n_positions(self) -> int:
        """Number of pixel rows in the window."""
        return self.window.row_stop - self.window.row_start

    def sample(self, columns: IndexArray, positions: IndexArray) -> tuple[NDArray[np.uint8], BoolArray]:
        """Pixel colours (uint8) and whether each pixel centre is inside the region."""
        rows = self.window.row_start + positions
        cols = self.window.col_start + columns
        rgb = _gather(self.image, rows, cols)
        if self.polygon is None:
            return rgb, np.ones(len(rows), dtype=bool)
        return rgb, points_in_polygon(self.polygon, cols.astype(np.float64) + 0.5, rows.astype(np.float64) + 0.5)

    def sample_precise(self, columns: IndexArray, positions: IndexArray) -> tuple[NDArray[np.uint8], BoolArray]:
        """Same as ``sample``: pixel columns need no interpolation."""
        return self.sample(columns, positions)


class PolarSampler:
    """Column j is the angle of grid column j; position k is the radius of grid position k.

    ``sample`` reads the nearest pixel (enough to tell pen from paper, and one gather);
    ``sample_precise`` interpolates bilinearly, which keeps the ink's centroid along the radius.
    """

    def __init__(self, image: NDArray[np.uint8], grid: PolarGrid, radius_max_px: float) -> None:
        self.image = image
        self.grid = grid
        self.radius_max_px = radius_max_px
        # Per-column direction, computed once: columns are sampled many times over.
        angle = grid.angle_rad(np.arange(grid.n_angles))
        self._cos, self._sin = np.cos(angle), np.sin(angle)

    @property
    def n_columns(self) -> int:
        """Number of angles."""
        return self.grid.n_angles

    @property
    def n_positions(self) -> int:
        """Number of radii."""
        return self.grid.n_radii

    def _points(self, columns: IndexArray, positions: IndexArray) -> tuple[FloatArray, FloatArray, BoolArray]:
        radius = self.grid.radius_px(positions)
        u = self.grid.centre_uv[0] + radius * self._cos[columns]
        v = self.grid.centre_uv[1] + radius * self._sin[columns]
        height, width = self.image.shape[:2]
        inside = (u >= 0.0) & (v >= 0.0) & (u <= width) & (v <= height) & (radius <= self.radius_max_px)
        return u, v, inside

    def sample(self, columns: IndexArray, positions: IndexArray) -> tuple[NDArray[np.uint8], BoolArray]:
        """Colour of the pixel under each polar point, and whether the point is on the sheet and in the ring."""
        u, v, inside = self._points(columns, positions)
        height, width = self.image.shape[:2]
        cols = np.clip(u.astype(np.intp), 0, width - 1)
        rows = np.clip(v.astype(np.intp), 0, height - 1)
        return _gather(self.image, rows, cols), inside

    def sample_precise(self, columns: IndexArray, positions: IndexArray) -> tuple[FloatArray, BoolArray]:
        """Bilinear colours (0-255) at the polar points, and whether each is on the sheet and in the ring."""
        u, v, inside = self._points(columns, positions)
        return bilinear_rgb(self.image, u, v), inside


def _gather(image: NDArray[np.uint8], rows: IndexArray, cols: IndexArray) -> NDArray[np.uint8]:
    """image[rows, cols] as (n, 3); one flat take is about twice as fast as indexing with two arrays."""
    if not image.flags.c_contiguous:
        return np.asarray(image[rows, cols])
    return np.asarray(np.take(image.reshape(-1, 3), rows * image.shape[1] + cols, axis=0), dtype=np.uint8)


def bilinear_rgb(image: NDArray[np.uint8], u: FloatArray, v: FloatArray) -> FloatArray:
    """Bilinear sRGB (0-255) at sheet points, nearest edge pixel beyond the border.

    Gathers the four neighbours directly: map_coordinates would need a contiguous copy of every channel
    of the whole sheet for a few thousand samples.
    """
    height, width = image.shape[:2]
    x = np.clip(u - 0.5, 0.0, width - 1.0)
    y = np.clip(v - 0.5, 0.0, height - 1.0)
    col0 = np.minimum(x.astype(np.intp), max(width - 2, 0))
    row0 = np.minimum(y.astype(np.intp), max(height - 2, 0))
    col1 = np.minimum(col0 + 1, width - 1)
    row1 = np.minimum(row0 + 1, height - 1)
    fx = (x - col0)[:, None]
    fy = (y - row0)[:, None]
    top = _gather(image, row0, col0) * (1.0 - fx) + _gather(image, row0, col1) * fx
    bottom = _gather(image, row1, col0) * (1.0 - fx) + _gather(image, row1, col1) * fx
    return np.asarray(top * (1.0 - fy) + bottom * fy, dtype=np.float64)
