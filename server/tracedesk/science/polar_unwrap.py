"""Angle-radius grids about a circular chart's centre, and unwrapping a sheet-sized map onto them.

Angles are measured as seen on the sheet: from the +u axis (3 o'clock), clockwise on the screen, so
with v pointing down a point at angle theta and radius r is (u, v) = centre + r (cos theta, sin theta).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray
from scipy import ndimage

FloatArray = NDArray[np.float64]


@dataclass(frozen=True)
class PolarGrid:
    """Regular grid of angles (columns) and radii (positions along each column).

    Column j is centred at angle ``angle_start_rad + (j + 0.5) * angle_step_rad``; position k at radius
    ``radius_start_px + (k + 0.5) * radius_step_px``.
    """

    centre_uv: tuple[float, float]
    radius_start_px: float
    radius_step_px: float
    n_radii: int
    angle_start_rad: float
    angle_step_rad: float
    n_angles: int

    def angle_rad(self, columns: NDArray[np.floating] | NDArray[np.integer]) -> FloatArray:
        """Angle (radians, clockwise on screen from +u) of column centres (fractional columns allowed)."""
        return self.angle_start_rad + (np.asarray(columns, np.float64) + 0.5) * self.angle_step_rad

    def radius_px(self, positions: NDArray[np.floating] | NDArray[np.integer]) -> FloatArray:
        """Radius (px) of integer positions (sample centres)."""
        return self.radius_start_px + (np.asarray(positions, np.float64) + 0.5) * self.radius_step_px

    def to_pixels(self, angle_rad: FloatArray, radius_px: FloatArray) -> tuple[FloatArray, FloatArray]:
        """(u, v) sheet pixels of polar points."""
        return (
            self.centre_uv[0] + radius_px * np.cos(angle_rad),
            self.centre_uv[1] + radius_px * np.sin(angle_rad),
        )


def angle_of_point_deg(centre_uv: tuple[float, float], point_uv: tuple[float, float]) -> float:
    """Angle (degrees in [0, 360), clockwise on screen from +u) of a sheet point seen from the centre."""
    return float(np.degrees(np.arctan2(point_uv[1] - centre_uv[1], point_uv[0] - centre_uv[0])) % 360.0)


def unwrap_map(
    values: NDArray[np.floating] | NDArray[np.integer],
    *,
    origin_uv: tuple[float, float],
    cell_px: float,
    grid: PolarGrid,
) -> FloatArray:
    """Resample a map of square cells onto a polar grid (bilinear; 0 outside the map).

    Parameters
    ----------
    values : numpy.ndarray, shape (rows, cols)
        Map whose cell (i, j) covers u in [origin_u + j * cell_px, ...) and v likewise.
    origin_uv : tuple of float
        Sheet position (px) of the map's top-left corner.
    cell_px : float
        Cell size (px).
    grid : PolarGrid
        Target grid.

    Returns
    -------
    numpy.ndarray, shape (grid.n_radii, grid.n_angles)
        Rows are radii (inner first), columns are angles (clockwise).
    """
    angle = grid.angle_rad(np.arange(grid.n_angles))[None, :]
    radius = grid.radius_px(np.arange(grid.n_radii))[:, None]
    u, v = grid.to_pixels(angle, radius)
    # map_coordinates indexes cell centres, so a sheet point maps to (v - origin) / cell - 0.5.
    coordinates = np.stack([(v - origin_uv[1]) / cell_px - 0.5, (u - origin_uv[0]) / cell_px - 0.5])
    return np.asarray(
        ndimage.map_coordinates(np.asarray(values, np.float64), coordinates, order=1, mode="constant", cval=0.0)
    )
