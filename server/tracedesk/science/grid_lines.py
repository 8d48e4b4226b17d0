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

import itertools
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
MAX_ROTATION_POINTS: Final = 40_000
# Cells scoring below this (of 255) carry no line: they only add noise to the profiles.
MIN_CELL_SCORE: Final = 40
FAN_SLABS: Final = 3
MIN_FAN_POINTS: Final = 500
MIN_FAN_DEG: Final = 0.05


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


def estimate_family_angle(
    points: MapPoints, *, bin_px: float, max_angle_deg: float = MAX_ANGLE_DEG, around_deg: float = 0.0
) -> float:
    """Angle (degrees, clockwise on the screen) at which the family's profile is sharpest.

    Coarse steps of 0.25 degrees over ``around_deg`` +-``max_angle_deg``, then 0.05 degree steps around
    the best, then a parabola through the best three.
    """
    if points.u.size > MAX_ROTATION_POINTS:
        chosen = np.random.default_rng(0).choice(points.u.size, MAX_ROTATION_POINTS, replace=False)
        points = MapPoints(points.family, points.u[chosen], points.v[chosen], points.weight[chosen])
    if points.u.size < 10:
        return around_deg
    coarse = around_deg + np.arange(-max_angle_deg, max_angle_deg + 1e-9, COARSE_ANGLE_STEP_DEG)
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


def _subset(points: MapPoints, keep: NDArray[np.bool_]) -> MapPoints:
    return MapPoints(points.family, points.u[keep], points.v[keep], points.weight[keep])


def estimate_fan(points: MapPoints, frame: FamilyFrame, *, bin_px: float) -> FloatArray:
    """Coefficients (lowest first) of the lines' angle (degrees) as a straight line in s (px).

    Converging lines (keystone) have angles that change across the family; the angle is found
    separately in :data:`FAN_SLABS` slabs across the lines. Without enough points per slab the angle
    is taken as constant.
    """
    s, _ = frame.to_frame(points.u, points.v)
    edges = np.quantile(s, np.linspace(0.0, 1.0, FAN_SLABS + 1)) if s.size else np.zeros(FAN_SLABS + 1)
    centres, angles = [], []
    for low, high in itertools.pairwise(edges):
        keep = (s >= low) & (s <= high)
        if keep.sum() >= MIN_FAN_POINTS:
            centres.append(float(np.mean(s[keep])))
            subset = _subset(points, keep)
            angles.append(estimate_family_angle(subset, bin_px=bin_px, around_deg=frame.angle_deg, max_angle_deg=1.0))
    if len(centres) < FAN_SLABS or float(np.ptp(angles)) < MIN_FAN_DEG:
        return np.array([frame.angle_deg, 0.0])
    return np.asarray(np.polynomial.polynomial.polyfit(centres, angles, 1), dtype=np.float64)


def fan_corrected_s(points: MapPoints, frame: FamilyFrame, fan: FloatArray) -> FloatArray:
    """Normal coordinate (px) of each point moved along its own line to the middle of the family (in t).

    With the angles of :func:`estimate_fan`, converging lines project as sharply as parallel ones.
    """
    s, t = frame.to_frame(points.u, points.v)
    middle = 0.5 * (float(t.min()) + float(t.max())) if t.size else 0.0
    turn = np.radians(np.polynomial.polynomial.polyval(s, fan) - frame.angle_deg)
    # Turning a line by +delta (clockwise) about its middle moves its points by -(t - middle) tan(delta) in s.
    return np.asarray(s + (t - middle) * np.tan(turn), dtype=np.float64)


def family_profiles(
    points: MapPoints,
    frame: FamilyFrame,
    *,
    bin_px: float,
    s_range: tuple[float, float],
    n_bands: int,
    whole_s: FloatArray | None = None,
) -> FamilyProfiles:
    """Profiles of the family over s in ``s_range`` (px), whole and in ``n_bands`` bands along t.

    ``whole_s`` replaces the points' s for the whole profile (e.g. :func:`fan_corrected_s`).
    """
    s, t = frame.to_frame(points.u, points.v)
    length = math.ceil((s_range[1] - s_range[0]) / bin_px)
    index = np.floor((s - s_range[0]) / bin_px).astype(np.intp)
    edges = np.linspace(float(t.min()), float(t.max()) + 1e-9, n_bands + 1)
    band = np.clip(np.searchsorted(edges, t, side="right") - 1, 0, n_bands - 1)
    inside = (index >= 0) & (index < length)
    flat = band[inside] * length + index[inside]
    counts = np.bincount(flat, weights=points.weight[inside], minlength=n_bands * length)
    bands = np.asarray(counts, dtype=np.float64).reshape(n_bands, length)
    whole = bands.sum(axis=0)
    if whole_s is not None:
        index = np.floor((whole_s - s_range[0]) / bin_px).astype(np.intp)
        inside = (index >= 0) & (index < length)
        whole = np.bincount(index[inside], weights=points.weight[inside], minlength=length).astype(np.float64)
    return FamilyProfiles(frame, bin_px, s_range[0], whole, bands, 0.5 * (edges[:-1] + edges[1:]))


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


def spectral_periods(profile: FloatArray, *, count: int = 3, min_bins: float = 2.0) -> list[float]:
    """Repeat distances (bins) of the strongest spectral peaks of a profile, strongest first.

    The power spectrum (mean removed, zero-padded to four times the length for a finer frequency grid)
    is searched for local maxima with periods from ``min_bins`` to a third of the profile; each peak's
    frequency is refined by a parabola through its neighbours.
    """
    centred = profile - profile.mean()
    size = 1 << math.ceil(math.log2(4 * max(centred.size, 2)))
    power = np.abs(np.fft.rfft(centred, size)) ** 2
    index, _ = signal.find_peaks(power)
    frequency = index / size
    usable = (frequency >= 3.0 / max(centred.size, 1)) & (frequency <= 1.0 / min_bins)
    index = index[usable]
    strongest = index[np.argsort(power[index])[::-1][:count]]
    periods = []
    for k in strongest:
        left, mid, right = power[k - 1], power[k], power[k + 1] if k + 1 < power.size else 0.0
        curvature = left - 2.0 * mid + right
        shift = 0.5 * (left - right) / curvature if curvature < 0 else 0.0
        periods.append(float(size / (k + np.clip(shift, -0.5, 0.5))))
    return periods
