"""Regions a pen is traced in: a box or a polygon (traced over pixel columns), or an annulus (circular
charts, traced over angle). Coordinates are sheet pixels: origin at the top-left corner of the top-left
pixel, u right, v down, pixel (i, j) centred at (i + 0.5, j + 0.5).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from tracedesk.science.errors import ScienceInputError

FloatArray = NDArray[np.float64]
IndexArray = NDArray[np.intp]
BoolArray = NDArray[np.bool_]

# Rows x edges held at once when testing many points against a polygon.
_POLYGON_BATCH_CELLS = 4_000_000


@dataclass(frozen=True)
class BoxRegion:
    """Axis-aligned box [u0, u1] x [v0, v1] in sheet pixels."""

    u0: float
    v0: float
    u1: float
    v1: float


@dataclass(frozen=True)
class PolygonRegion:
    """Polygon with vertices (u, v) in sheet pixels (even-odd rule; closed automatically)."""

    vertices_uv: Sequence[Sequence[float]]


@dataclass(frozen=True)
class AnnulusRegion:
    """Ring of a circular chart between two radii (px) about a centre, over an arc of angles.

    Angles are degrees measured clockwise on the screen from the +u axis (3 o'clock); the traced arc
    runs clockwise from ``start_angle_deg`` over ``sweep_deg`` (360 = the full turn).
    """

    centre_uv: tuple[float, float]
    radius_min_px: float
    radius_max_px: float
    start_angle_deg: float = 0.0
    sweep_deg: float = 360.0


@dataclass(frozen=True)
class PixelWindow:
    """Pixel rows [row_start, row_stop) and columns [col_start, col_stop) whose centres are in a region."""

    row_start: int
    row_stop: int
    col_start: int
    col_stop: int


def _finite(values: Sequence[float], what: str) -> None:
    if not all(math.isfinite(float(value)) for value in values):
        raise ScienceInputError(f"{what} must be finite numbers")


def _check_inside_sheet(u: FloatArray, v: FloatArray, shape: tuple[int, ...], what: str) -> None:
    height, width = shape[:2]
    if u.min() < 0.0 or v.min() < 0.0 or u.max() > width or v.max() > height:
        raise ScienceInputError(f"{what} reaches outside the sheet (u in [0, {width}], v in [0, {height}] px)")


def _window_of_extent(u_min: float, u_max: float, v_min: float, v_max: float, what: str) -> PixelWindow:
    window = PixelWindow(
        row_start=math.ceil(v_min - 0.5),
        row_stop=math.floor(v_max - 0.5) + 1,
        col_start=math.ceil(u_min - 0.5),
        col_stop=math.floor(u_max - 0.5) + 1,
    )
    if window.row_stop <= window.row_start or window.col_stop <= window.col_start:
        raise ScienceInputError(f"{what} is empty: it holds no pixel centre")
    return window


def box_window(box: BoxRegion, shape: tuple[int, ...]) -> PixelWindow:
    """Pixels of a box; refuses boxes reaching outside the sheet or holding no pixel centre."""
    _finite([box.u0, box.v0, box.u1, box.v1], "box corners")
    u = np.array([box.u0, box.u1], dtype=np.float64)
    v = np.array([box.v0, box.v1], dtype=np.float64)
    _check_inside_sheet(u, v, shape, "the box")
    return _window_of_extent(float(u.min()), float(u.max()), float(v.min()), float(v.max()), "the box")


def polygon_vertices(polygon: PolygonRegion, shape: tuple[int, ...]) -> FloatArray:
    """Validated (n, 2) vertex array: at least 3 finite vertices inside the sheet, non-zero area."""
    vertices = np.asarray(polygon.vertices_uv, dtype=np.float64)
    if vertices.ndim != 2 or vertices.shape[1] != 2 or len(vertices) < 3:
        raise ScienceInputError("a polygon needs at least three [u, v] vertices")
    _finite(list(vertices.ravel()), "polygon vertices")
    _check_inside_sheet(vertices[:, 0], vertices[:, 1], shape, "the polygon")
    following = np.roll(vertices, -1, axis=0)
    area = 0.5 * abs(float(np.sum(vertices[:, 0] * following[:, 1] - following[:, 0] * vertices[:, 1])))
    if area <= 0.0:
        raise ScienceInputError("the polygon is empty: its area is zero")
    return vertices


def polygon_window(vertices: FloatArray) -> PixelWindow:
    """Pixels of the polygon's bounding box."""
    low, high = vertices.min(axis=0), vertices.max(axis=0)
    return _window_of_extent(float(low[0]), float(high[0]), float(low[1]), float(high[1]), "the polygon")


def _edge_crossings(vertices: FloatArray, v: FloatArray) -> FloatArray:
    """u where each edge crosses each horizontal line v (shape (len(v), edges)); +inf where it does not."""
    start, end = vertices, np.roll(vertices, -1, axis=0)
    v_line = v[:, None]
    # Half-open test so a vertex exactly on a line is counted once.
    crosses = (start[:, 1] <= v_line) != (end[:, 1] <= v_line)
    rise = np.where(end[:, 1] == start[:, 1], 1.0, end[:, 1] - start[:, 1])
    u_cross = start[:, 0] + (v_line - start[:, 1]) * (end[:, 0] - start[:, 0]) / rise
    return np.where(crosses, u_cross, np.inf)


def polygon_row_mask(vertices: FloatArray, *, rows: IndexArray, columns: IndexArray) -> BoolArray:
    """Even-odd inside test of the pixel centres of a rows x columns grid (shape (rows, columns))."""
    crossings = np.sort(_edge_crossings(vertices, rows.astype(np.float64) + 0.5), axis=1)
    u = columns.astype(np.float64) + 0.5
    # One searchsorted for all rows: shift every row into its own band of the number line.
    band = float(max(u.max(), np.nanmax(np.where(np.isfinite(crossings), crossings, 0.0)))) + 2.0
    row_shift = np.arange(len(rows))[:, None] * band
    flat = (np.minimum(crossings, band - 1.0) + row_shift).ravel()
    counts = np.searchsorted(flat, (u[None, :] + row_shift).ravel()).reshape(len(rows), len(u))
    counts -= np.arange(len(rows))[:, None] * crossings.shape[1]
    return np.asarray((counts % 2) == 1, dtype=bool)


def points_in_polygon(vertices: FloatArray, u: FloatArray, v: FloatArray) -> BoolArray:
    """Even-odd inside test for scattered points (u, v), in batches to bound memory."""
    inside = np.zeros(len(u), dtype=bool)
    batch = max(1, _POLYGON_BATCH_CELLS // len(vertices))
    for first in range(0, len(u), batch):
        part = slice(first, first + batch)
        crossings = _edge_crossings(vertices, v[part])
        inside[part] = (np.sum(crossings < u[part, None], axis=1) % 2) == 1
    return inside


def check_annulus(annulus: AnnulusRegion, shape: tuple[int, ...]) -> None:
    """Refuse an annulus with bad radii or sweep, a centre off the sheet, or no overlap with the sheet."""
    cu, cv = annulus.centre_uv
    _finite(
        [cu, cv, annulus.radius_min_px, annulus.radius_max_px, annulus.start_angle_deg, annulus.sweep_deg],
        "annulus centre, radii and angles",
    )
    if not 0.0 <= annulus.radius_min_px < annulus.radius_max_px:
        raise ScienceInputError("the annulus needs 0 <= radius_min_px < radius_max_px")
    if annulus.radius_max_px - annulus.radius_min_px < 1.0:
        raise ScienceInputError("the annulus is empty: it is less than a pixel wide")
    if not 0.0 < annulus.sweep_deg <= 360.0:
        raise ScienceInputError("the annulus sweep must lie in (0, 360] degrees")
    _check_inside_sheet(np.array([cu]), np.array([cv]), shape, "the annulus centre")
