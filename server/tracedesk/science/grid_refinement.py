"""Sub-pixel grid lines at full resolution: local centre estimates along a predicted line, robust line fits.

A line is followed in *stations*: short runs of pixel rows (near-vertical lines) or columns
(near-horizontal lines) spread along its predicted course. In each row of a station the grid coverage
(:func:`~tracedesk.science.grid_likelihood.grid_coverage`) of a window across the predicted course is
read and its median subtracted (a crossing line of the other family, a stain or tinted paper fills the
whole row and so drops out); the rows are averaged and the line's centre is the centroid in a window
that is re-centred on the estimate until it settles (edge pixels weighed by their overlap with the
window, so the fixed point is the line's centre whatever the window size). Stations where pens, stains
or a missing stretch leave too little ink are dropped; the rest are fitted by a straight line (or a
parabola when a bend is significant) across ``cross = p(along)``, rejecting outliers, and neighbouring
families' lines are intersected to give control points.

Pixel convention (ARCHITECTURE.md): pixel (i, j) covers [i, i + 1) x [j, j + 1), centre (i + 0.5, j + 0.5).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Final

import numpy as np
from numpy.polynomial import polynomial
from numpy.typing import NDArray

from tracedesk.science.grid_likelihood import GridColourModel, grid_coverage

FloatArray = NDArray[np.float64]
ByteArray = NDArray[np.uint8]

CENTROID_ITERATIONS: Final = 6
# A station holds a line when its ink mass reaches this fraction of the line's median station mass.
MIN_RELATIVE_MASS: Final = 0.35
MIN_STATIONS: Final = 4
MIN_STATION_FRACTION: Final = 0.3
OUTLIER_FLOOR_PX: Final = 0.4
# A parabola replaces the straight line when its bend is this many standard errors and >= 0.15 px.
BEND_SIGNIFICANCE: Final = 4.0
BEND_FLOOR_PX: Final = 0.15


@dataclass(frozen=True)
class PredictedLine:
    """Where a line should be: ``cross = p(along)`` in px.

    Attributes
    ----------
    family : str
        ``"vertical"`` (cross = u, along = v) or ``"horizontal"`` (cross = v, along = u).
    coefficients : ndarray
        Polynomial coefficients (lowest degree first) of the cross coordinate in the along coordinate.
    station_along : ndarray
        Along coordinates (px) of the stations' middles: half-way between crossing lines, so that
        crossings and the ends of lines at the frame stay out of the windows.
    station_lines : int
        Pixel rows (columns) averaged per station.
    search_px : float
        Half-width (px) of the window across the line.
    centroid_px : float
        Half-width (px) of the centroid window.
    """

    family: str
    coefficients: FloatArray
    station_along: FloatArray
    station_lines: int
    search_px: float
    centroid_px: float


@dataclass(frozen=True)
class RefinedLine:
    """A line measured to sub-pixel accuracy: ``cross = p(along)`` (px).

    Attributes
    ----------
    family : str
        ``"vertical"`` or ``"horizontal"``.
    coefficients : ndarray
        Polynomial coefficients (lowest first) in the along coordinate (px), degree 1 or 2.
    along_range : tuple of float
        Along-line extent (px) covered by the stations used.
    stations_used, stations_total : int
        Stations that held the line (after outliers were dropped) and stations read.
    rms_px : float
        RMS distance (px) of the used station centres from the fitted line.
    """

    family: str
    coefficients: FloatArray
    along_range: tuple[float, float]
    stations_used: int
    stations_total: int
    rms_px: float

    def cross_at(self, along: FloatArray) -> FloatArray:
        """Cross coordinate (px) of the line at along coordinates (px)."""
        return np.asarray(polynomial.polyval(np.asarray(along, dtype=np.float64), self.coefficients))


@dataclass(frozen=True)
class _Stations:
    along: FloatArray  # (n,) px, mean along coordinate of each station (pixel centres)
    base: FloatArray  # (n,) mean first window column/row index of each station
    profile: FloatArray  # (n, width) background-free mean coverage across the window


def _read_stations(image: ByteArray, model: GridColourModel, line: PredictedLine) -> _Stations | None:
    """Coverage windows across the predicted line, ``line.station_lines`` pixel lines per station."""
    height, width = image.shape[:2]
    along_size, cross_size = (height, width) if line.family == "vertical" else (width, height)
    count = line.station_lines
    starts = np.round(line.station_along - 0.5 * count).astype(np.intp)
    starts = np.unique(starts[(starts >= 0) & (starts + count <= along_size)])
    if starts.size == 0:
        return None
    along_index = (starts[:, None] + np.arange(count)[None, :]).ravel()
    half = math.ceil(line.search_px)
    centre = polynomial.polyval(along_index + 0.5, line.coefficients)
    base = np.floor(centre).astype(np.intp) - half
    cross_index = base[:, None] + np.arange(2 * half + 1)[None, :]
    inside = (cross_index >= 0) & (cross_index < cross_size)
    cross_clipped = np.clip(cross_index, 0, cross_size - 1)
    if line.family == "vertical":
        pixels = image[along_index[:, None], cross_clipped]
    else:
        pixels = image[cross_clipped, along_index[:, None]]
    coverage = np.where(inside, grid_coverage(pixels, model), np.float32(0.0)).astype(np.float64)
    coverage -= np.median(coverage, axis=1, keepdims=True)
    shape = (starts.size, count, 2 * half + 1)
    profile = coverage.reshape(shape).mean(axis=1)
    along = (along_index + 0.5).reshape(shape[:2]).mean(axis=1)
    return _Stations(along, base.reshape(shape[:2]).mean(axis=1), profile)


def _window_weights(centre: FloatArray, half: float, width: int) -> FloatArray:
    """Overlap of each sample [o - 0.5, o + 0.5] with [centre - half, centre + half], per station."""
    offsets = np.arange(width, dtype=np.float64)[None, :]
    low = np.maximum(offsets - 0.5, centre[:, None] - half)
    high = np.minimum(offsets + 0.5, centre[:, None] + half)
    return np.asarray(np.clip(high - low, 0.0, 1.0), dtype=np.float64)


def _centroids(profile: FloatArray, half: float) -> tuple[FloatArray, FloatArray]:
    """Iterated windowed centroid (sample index units) and ink mass of each station's profile."""
    values = np.clip(profile, 0.0, None)
    width = values.shape[1]
    margin = min(width // 2, max(1, round(half / 2)))
    inner = values[:, margin : width - margin] if width > 2 * margin else values
    centre = np.argmax(inner, axis=1).astype(np.float64) + (margin if width > 2 * margin else 0)
    mass = np.zeros(values.shape[0])
    for _ in range(CENTROID_ITERATIONS):
        weights = _window_weights(centre, half, width) * values
        mass = weights.sum(axis=1)
        with np.errstate(divide="ignore", invalid="ignore"):
            moved = (weights @ np.arange(width, dtype=np.float64)) / mass
        centre = np.where(mass > 0, np.clip(moved, 0.0, width - 1.0), centre)
    return centre, mass


def _robust_fit(along: FloatArray, cross: FloatArray, weight: FloatArray) -> tuple[FloatArray, NDArray[np.bool_]]:
    """Straight line (or parabola) through station centres, dropping outliers; returns coefficients, inliers."""
    keep = np.ones(along.shape, dtype=bool)
    coefficients = np.zeros(2)
    for _ in range(4):
        if keep.sum() < MIN_STATIONS:
            break
        coefficients = _choose_degree(along[keep], cross[keep], weight[keep])
        residual = cross - polynomial.polyval(along, coefficients)
        spread = 1.4826 * float(np.median(np.abs(residual[keep])))
        updated = np.abs(residual) <= max(3.0 * spread, OUTLIER_FLOOR_PX)
        if np.array_equal(updated, keep):
            break
        keep = updated
    return coefficients, keep


def _choose_degree(along: FloatArray, cross: FloatArray, weight: FloatArray) -> FloatArray:
    """Weighted straight line, or a parabola when its bend over the stations is significant."""
    middle, half = 0.5 * (along.max() + along.min()), max(0.5 * (along.max() - along.min()), 1.0)
    x = (along - middle) / half
    root_w = np.sqrt(weight)
    line = np.linalg.lstsq(np.vander(x, 2, increasing=True) * root_w[:, None], cross * root_w, rcond=None)[0]
    if along.size >= 8:
        design = np.vander(x, 3, increasing=True) * root_w[:, None]
        bend, residuals, rank, _ = np.linalg.lstsq(design, cross * root_w, rcond=None)
        if rank == 3 and residuals.size:
            sigma_sq = float(residuals[0]) / (along.size - 3)
            error = math.sqrt(max(sigma_sq * float(np.linalg.inv(design.T @ design)[2, 2]), 1e-30))
            if abs(bend[2]) > max(BEND_SIGNIFICANCE * error, BEND_FLOOR_PX):
                return _unscale(bend, middle, half)
    return _unscale(line, middle, half)


def _unscale(coefficients: FloatArray, middle: float, half: float) -> FloatArray:
    """Coefficients in x = (along - middle) / half -> coefficients in along (px)."""
    shifted = polynomial.Polynomial(coefficients, domain=[middle - half, middle + half], window=[-1.0, 1.0])
    return np.asarray(shifted.convert().coef, dtype=np.float64)


def refine_line(image: ByteArray, model: GridColourModel, line: PredictedLine) -> RefinedLine | None:
    """Measure one predicted line to sub-pixel accuracy (module docstring); None if too little of it is seen.

    Parameters
    ----------
    image : ndarray of uint8, shape (H, W, 3)
        The sheet, sRGB.
    model : GridColourModel
        Colour model of the sheet.
    line : PredictedLine
        Where to look.
    """
    stations = _read_stations(image, model, line)
    if stations is None:
        return None
    centre, mass = _centroids(stations.profile, line.centroid_px)
    reference = float(np.median(mass[mass > 0])) if np.any(mass > 0) else 0.0
    edge = min(1.0, line.search_px / 4)
    width = stations.profile.shape[1]
    held = (mass >= MIN_RELATIVE_MASS * reference) & (centre >= edge) & (centre <= width - 1 - edge)
    if reference <= 0 or held.sum() < max(MIN_STATIONS, MIN_STATION_FRACTION * centre.size):
        return None
    cross = stations.base + centre + 0.5
    coefficients, inliers = _robust_fit(stations.along[held], cross[held], mass[held])
    if inliers.sum() < max(MIN_STATIONS, MIN_STATION_FRACTION * centre.size):
        return None
    used_along = stations.along[held][inliers]
    residual = cross[held][inliers] - polynomial.polyval(used_along, coefficients)
    return RefinedLine(
        family=line.family,
        coefficients=coefficients,
        along_range=(float(used_along.min()), float(used_along.max())),
        stations_used=int(inliers.sum()),
        stations_total=int(centre.size),
        rms_px=float(np.sqrt(np.mean(residual**2))),
    )


def intersect_lines(vertical: RefinedLine, horizontal: RefinedLine) -> tuple[float, float]:
    """Pixel (u, v) where a near-vertical line ``u = f(v)`` meets a near-horizontal one ``v = g(u)``.

    Fixed-point iteration: converges fast because both lines are within a few degrees of the axes.
    """
    v = float(np.mean(horizontal.cross_at(np.array(horizontal.along_range))))
    u = float(vertical.cross_at(np.array([v]))[0])
    for _ in range(20):
        v_next = float(horizontal.cross_at(np.array([u]))[0])
        u_next = float(vertical.cross_at(np.array([v_next]))[0])
        if abs(u_next - u) < 1e-9 and abs(v_next - v) < 1e-9:
            return u_next, v_next
        u, v = u_next, v_next
    return u, v
