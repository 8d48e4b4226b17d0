"""Grid-line families on a coarse score map: rotation, projection profiles, peaks and periodicity.

A family is the set of near-vertical (or near-horizontal) printed lines. Turned by an angle theta
(degrees, clockwise on the screen, image v running down), a vertical line runs along
``d = (-sin theta, cos theta)`` and every point of it has the same normal coordinate
``s = u cos theta + v sin theta``; a horizontal line runs along ``(cos theta, sin theta)`` with
``s = -u sin theta + v cos theta``. Projecting the grid scores onto s gives a *profile* whose peaks are
the lines; it is sharpest at the lines' true angle, which is how the angle is found (the sum of squared
bin counts over the squared total is largest when the lines fall into the fewest bins). Profiles of
*bands* along the lines follow lines that converge (keystone) or bend.

Profile bins are ``bin_px`` wide; bin x (continuous, bin 0 centred at x = 0) lies at
``s = origin + (x + 0.5) * bin_px`` px.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Final

import numpy as np
from numpy.typing import NDArray
from scipy import ndimage, signal

from tracedesk.science.grid_likelihood import FamilyMap

FloatArray = NDArray[np.float64]

MAX_ANGLE_DEG: Final = 4.0
COARSE_ANGLE_STEP_DEG: Final = 0.25
FINE_ANGLE_STEP_DEG: Final = 0.05
MAX_ROTATION_POINTS: Final = 80_000
# Cells scoring below this (of 255) carry no line: they only add noise to the profiles.
MIN_CELL_SCORE: Final = 40


@dataclass(frozen=True)
class FamilyFrame:
    """Normal and along-line coordinates of one family of lines turned by ``angle_deg`` (clockwise)."""

    family: str
    angle_deg: float

    def normal(self) -> tuple[float, float]:
        """Unit vector (u, v) across the lines."""
        theta = math.radians(self.angle_deg)
        if self.family == "vertical":
            return math.cos(theta), math.sin(theta)
        return -math.sin(theta), math.cos(theta)

    def along(self) -> tuple[float, float]:
        """Unit vector (u, v) along the lines (down for vertical lines, right for horizontal ones)."""
        theta = math.radians(self.angle_deg)
        if self.family == "vertical":
            return -math.sin(theta), math.cos(theta)
        return math.cos(theta), math.sin(theta)

    def to_frame(self, u: FloatArray, v: FloatArray) -> tuple[FloatArray, FloatArray]:
        """(s, t): normal and along-line coordinates (px) of pixels (px)."""
        (nu, nv), (du, dv) = self.normal(), self.along()
        return u * nu + v * nv, u * du + v * dv

    def to_pixels(self, s: FloatArray, t: FloatArray) -> tuple[FloatArray, FloatArray]:
        """Pixels (u, v) of frame coordinates (s, t) (px)."""
        (nu, nv), (du, dv) = self.normal(), self.along()
        return s * nu + t * du, s * nv + t * dv


@dataclass(frozen=True)
class MapPoints:
    """Cells of a family map that may hold a line: pixel positions (px) and scores (0-1)."""

    family: str
    u: FloatArray
    v: FloatArray
    weight: FloatArray


def map_points(family_map: FamilyMap) -> MapPoints:
    """Cells of the map scoring at least :data:`MIN_CELL_SCORE`, as weighted points."""
    rows, cols = np.nonzero(family_map.scores >= MIN_CELL_SCORE)
    weight = family_map.scores[rows, cols].astype(np.float64) / 255.0
    return MapPoints(family_map.family, family_map.u_centres[cols], family_map.v_centres[rows], weight)


def _sharpness(points: MapPoints, angle_deg: float, bin_px: float) -> float:
    s, _ = FamilyFrame(points.family, angle_deg).to_frame(points.u, points.v)
    index = np.floor((s - s.min()) / bin_px).astype(np.intp)
    counts = np.bincount(index, weights=points.weight)
    total = float(counts.sum())
    return float(counts @ counts) / (total * total) if total > 0 else 0.0


def estimate_family_angle(points: MapPoints, *, bin_px: float, max_angle_deg: float = MAX_ANGLE_DEG) -> float:
    """Angle (degrees, clockwise on the screen) at which the family's profile is sharpest.

    Coarse steps of 0.25 degrees over +-``max_angle_deg``, then 0.05 degree steps around the best, then
    a parabola through the best three.
    """
    if points.u.size > MAX_ROTATION_POINTS:
        chosen = np.random.default_rng(0).choice(points.u.size, MAX_ROTATION_POINTS, replace=False)
        points = MapPoints(points.family, points.u[chosen], points.v[chosen], points.weight[chosen])
    if points.u.size < 10:
        return 0.0
    coarse = np.arange(-max_angle_deg, max_angle_deg + 1e-9, COARSE_ANGLE_STEP_DEG)
    best = float(coarse[int(np.argmax([_sharpness(points, a, bin_px) for a in coarse]))])
    fine = best + np.arange(-5, 6) * FINE_ANGLE_STEP_DEG
    sharpness = np.array([_sharpness(points, a, bin_px) for a in fine])
    k = int(np.argmax(sharpness))
    if 0 < k < fine.size - 1:
        left, mid, right = sharpness[k - 1 : k + 2]
        curvature = left - 2.0 * mid + right
        if curvature < 0:
            return float(fine[k] + 0.5 * (left - right) / curvature * FINE_ANGLE_STEP_DEG)
    return float(fine[k])


@dataclass(frozen=True)
class FamilyProfiles:
    """Projection profiles of one family: whole and per band along the lines.

    Attributes
    ----------
    frame : FamilyFrame
        The family's angle and coordinates.
    bin_px : float
        Bin width (px) across the lines.
    origin : float
        s (px) of the lower edge of bin 0.
    whole : ndarray, shape (L,)
        Summed scores per bin over the whole sheet.
    bands : ndarray, shape (K, L)
        The same per band of the along-line coordinate t.
    band_t : ndarray, shape (K,)
        Along-line coordinate (px) of each band's middle.
    """

    frame: FamilyFrame
    bin_px: float
    origin: float
    whole: FloatArray
    bands: FloatArray
    band_t: FloatArray

    def bin_to_s(self, x: FloatArray) -> FloatArray:
        """Normal coordinate s (px) of continuous bin positions x."""
        return self.origin + (np.asarray(x, dtype=np.float64) + 0.5) * self.bin_px

    def s_to_bin(self, s: FloatArray) -> FloatArray:
        """Continuous bin positions of normal coordinates s (px)."""
        return (np.asarray(s, dtype=np.float64) - self.origin) / self.bin_px - 0.5


def family_profiles(
    points: MapPoints, frame: FamilyFrame, *, bin_px: float, s_range: tuple[float, float], n_bands: int
) -> FamilyProfiles:
    """Profiles of the family over s in ``s_range`` (px), whole and in ``n_bands`` bands along t."""
    s, t = frame.to_frame(points.u, points.v)
    length = int(math.ceil((s_range[1] - s_range[0]) / bin_px))
    index = np.floor((s - s_range[0]) / bin_px).astype(np.intp)
    edges = np.linspace(float(t.min()), float(t.max()) + 1e-9, n_bands + 1)
    band = np.clip(np.searchsorted(edges, t, side="right") - 1, 0, n_bands - 1)
    inside = (index >= 0) & (index < length)
    flat = band[inside] * length + index[inside]
    bands = np.bincount(flat, weights=points.weight[inside], minlength=n_bands * length).reshape(n_bands, length)
    return FamilyProfiles(frame, bin_px, s_range[0], bands.sum(axis=0), bands, 0.5 * (edges[:-1] + edges[1:]))


def normalise_profile(profile: FloatArray, *, tophat_bins: int = 9) -> FloatArray:
    """Lines as peaks in [0, 1] on a flat floor: white top-hat, light smoothing, scaled by a high quantile.

    The top-hat removes anything broader than ``tophat_bins`` (lines of the other family seen at a slant,
    stains, uneven paper); the 1-bin Gaussian lets a template point between two bins see the peak.
    """
    opened = ndimage.grey_opening(profile, size=tophat_bins, mode="nearest")
    peaks = ndimage.gaussian_filter1d(profile - opened, 1.0, mode="constant")
    positive = peaks[peaks > 0]
    if positive.size == 0:
        return np.zeros_like(profile)
    scale = float(np.quantile(positive, 0.98))
    return np.clip(peaks / scale, 0.0, 1.0) if scale > 0 else np.zeros_like(profile)


def profile_peaks(profile: FloatArray, *, min_height: float) -> tuple[FloatArray, FloatArray]:
    """Sub-bin positions and heights of the local maxima of a normalised profile above ``min_height``."""
    index, _ = signal.find_peaks(profile, height=min_height, prominence=0.5 * min_height)
    position = index.astype(np.float64)
    inner = (index > 0) & (index < profile.size - 1)
    left, mid, right = profile[index[inner] - 1], profile[index[inner]], profile[index[inner] + 1]
    curvature = left - 2.0 * mid + right
    with np.errstate(divide="ignore", invalid="ignore"):
        shift = np.where(curvature < 0, 0.5 * (left - right) / curvature, 0.0)
    position[inner] += np.clip(shift, -0.5, 0.5)
    return position, profile[index]


def dominant_period(profile: FloatArray, *, min_bins: float = 2.0) -> float | None:
    """Repeat distance (bins) of a normalised profile: the first strong autocorrelation peak, or None."""
    centred = profile - profile.mean()
    size = 1 << int(math.ceil(math.log2(2 * centred.size)))
    spectrum = np.fft.rfft(centred, size)
    correlation = np.fft.irfft(spectrum * np.conj(spectrum), size)[: centred.size // 2]
    if correlation[0] <= 0:
        return None
    correlation = correlation / correlation[0]
    index, _ = signal.find_peaks(correlation, height=0.2)
    index = index[index >= min_bins]
    return float(index[0]) if index.size else None
