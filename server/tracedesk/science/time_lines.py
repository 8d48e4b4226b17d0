"""Time lines of a circular chart: where the printed time-zero line lies on a scan.

The rings fix a circular chart's centre and value law but look alike at every angle; the printed time
lines fix the angle. :func:`find_time_zero`, given the centre and ring radii
(:mod:`~tracedesk.science.circle_detection`):

1. samples the grid-colour coverage (:func:`~tracedesk.science.grid_likelihood.grid_coverage`) along
   circles between the innermost and outermost ring, about every half pixel of arc at the reference
   radius (the ring of ``value_axis.frame[1]``), each circle less its own median (paper and rings);
2. arc-shaped time lines (drawn by the pen arm) cross each circle at ``side * phi(r)`` from the pivot's
   direction (:func:`~tracedesk.science.circular.pen_tip_angle`); each circle is shifted by
   ``side * (phi(r) - phi(r_ref))`` so every line sits at its angle on the reference ring. Both sides
   are tried and the sharper profile kept (refused when the two are alike);
3. the median over the circles gives one profile of angle: labels and pen crossings, confined to a few
   circles, drop out;
4. the comb of ``N = period / time_line_hours`` lines: the argument of the profile's Fourier coefficient
   at N cycles per turn places every line up to a whole number of spacings; each line's own centroid
   (within a third of a spacing) then gives its residual from the comb, and the comb is moved by their
   median;
5. the major lines (every ``time_major_hours``): the lines' ink summed by index modulo
   ``time_major_hours / time_line_hours``; the heaviest group, when clearly heavier than the next,
   marks them;
6. time zero: of the (major) lines, the one nearest the spec's reference angle
   (``time_zero_angle_deg``). Refused when the nearest lies more than a third of the spacing away: the
   scan is then turned too far (or upside down) to tell which line it is.

Angles are image angles, clockwise on the screen from +u (ARCHITECTURE.md).

References
----------
Walter et al., "Digitizing chart recorder data: coordinate system conversion for rain gauges",
J. Atmos. Oceanic Technol. 16(8), 1999 (time arcs of pen-arm recorders).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Final

import numpy as np
from numpy.typing import NDArray
from scipy import ndimage

from tracedesk.science.circular import pen_tip_angle
from tracedesk.science.errors import ScienceInputError
from tracedesk.science.grid_likelihood import GridColourModel, grid_coverage
from tracedesk.science.grid_spec import CircularChartSpec

FloatArray = NDArray[np.float64]
ByteArray = NDArray[np.uint8]

CIRCLES: Final = 32
# Circles keep this fraction of the ring band clear at either end (the rings themselves are there).
BAND_MARGIN: Final = 0.03
ARC_STEP_PX: Final = 0.5
MAX_SAMPLES_PER_CIRCLE: Final = 60_000
# A comb this weak (Fourier magnitude over total ink) is not a set of printed time lines.
MIN_STRENGTH: Final = 0.1
# The two arc sides give profiles this alike: the bend of the arcs is not clear.
MAX_SIDE_LIKENESS: Final = 0.8
MIN_LINES_FOUND: Final = 0.5
# Major lines must carry this much more ink than the next group of lines.
MIN_MAJOR_RATIO: Final = 1.2
# The chosen line may lie at most this fraction of the line spacing from the reference angle.
MAX_REFERENCE_OFFSET: Final = 1.0 / 3.0
_TWO_PI: Final = 2.0 * math.pi


@dataclass(frozen=True)
class TimeZero:
    """The time-zero line found on a circular chart.

    Attributes
    ----------
    angle_deg : float
        Image angle (degrees in [0, 360), clockwise on the screen from +u) of the time-zero line where it
        meets the reference ring.
    pixel : tuple of float
        That point (u, v) in px: the calibration's ``time_zero_pixel``.
    reference_radius_px : float
        Radius (px) of the reference ring (``value_axis.frame[1]``).
    pen_arm : dict or None
        ``{"pivot_pixel": [u, v], "length_px": L}`` for arc-shaped time lines.
    line_spacing_deg, major_spacing_deg : float
        Angle between neighbouring time lines, and between the lines time zero was chosen from.
    offset_deg : float
        Angle from the spec's reference angle to the chosen line (degrees, clockwise positive): how far
        the scan is turned.
    line_rms_px : float
        RMS distance (px, along the reference ring) of the lines found from the even comb.
    lines_found : tuple of int
        (lines found, lines printed).
    strength : float
        Fourier magnitude of the comb over the total line ink, in [0, 1].
    confidence : float
        In [0, 1].
    warnings : tuple of str
        Notes for the reviewer.
    line_hours, line_angles_deg : tuple of float
        Each line found: its time (h after time zero) and its measured angle (degrees) on the reference ring.
    centre : tuple of float
        The chart centre (u, v) the angles are measured about (px).
    arc_side : float
        +1 or -1: the side of the pivot direction on which the time arcs bend (1 for radial lines).
    """

    angle_deg: float
    pixel: tuple[float, float]
    reference_radius_px: float
    pen_arm: dict[str, Any] | None
    line_spacing_deg: float
    major_spacing_deg: float
    offset_deg: float
    line_rms_px: float
    lines_found: tuple[int, int]
    strength: float
    confidence: float
    warnings: tuple[str, ...]
    line_hours: tuple[float, ...]
    line_angles_deg: tuple[float, ...]
    centre: tuple[float, float]
    arc_side: float

    def line_pixels(self, radius_px: float) -> FloatArray:
        """Pixels (lines, 2) where each found time line crosses the circle of ``radius_px`` about the centre."""
        angles = np.radians(np.asarray(self.line_angles_deg))
        if self.pen_arm is not None:
            pivot = np.subtract(self.pen_arm["pivot_pixel"], self.centre)
            phi = pen_tip_angle(
                np.array([radius_px, self.reference_radius_px]),
                centre_to_pivot=float(np.hypot(*pivot)),
                arm_length=float(self.pen_arm["length_px"]),
            )
            angles = angles + self.arc_side * (phi[0] - phi[1])
        return np.column_stack(
            [self.centre[0] + radius_px * np.cos(angles), self.centre[1] + radius_px * np.sin(angles)]
        )

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dictionary of the summary fields (not the per-line lists)."""
        return {
            "angle_deg": self.angle_deg,
            "pixel": list(self.pixel),
            "reference_radius_px": self.reference_radius_px,
            "pen_arm": self.pen_arm,
            "line_spacing_deg": self.line_spacing_deg,
            "major_spacing_deg": self.major_spacing_deg,
            "offset_deg": self.offset_deg,
            "line_rms_px": self.line_rms_px,
            "lines_found": list(self.lines_found),
            "strength": self.strength,
            "confidence": self.confidence,
            "warnings": list(self.warnings),
        }


@dataclass(frozen=True)
class _Geometry:
    """Where to look: centre (px), reference radius and band (px), arm and pivot distance (px) for arcs."""

    centre: tuple[float, float]
    reference_radius: float
    band: tuple[float, float]
    arm_px: float | None
    pivot_px: float | None


@dataclass(frozen=True)
class _Comb:
    """The lines on the profile: first line's angle (rad), spacing (rad), per-line ink and residuals."""

    phase: float
    spacing: float
    mass: FloatArray
    residual: FloatArray
    found: NDArray[np.bool_]
    strength: float
    side: float


def _whole_ratio(numerator: float, denominator: float, *, field: str) -> int:
    ratio = numerator / denominator
    if abs(ratio - round(ratio)) > 1e-6 * max(1.0, ratio) or round(ratio) < 2:
        raise ScienceInputError(f"{field}: must divide {numerator:g} h into a whole number (2 or more) of parts")
    return round(ratio)


def _check_spec(spec: CircularChartSpec) -> tuple[int, int, float, str]:
    """Lines per turn, lines per major line (1: none), reference angle (rad), time direction."""
    missing = [
        name for name in ("time_line_hours", "time_zero_angle_deg", "time_direction") if getattr(spec, name) is None
    ]
    if missing:
        raise ScienceInputError(
            f"the chart spec does not give {', '.join(missing)}: time zero cannot be found automatically"
        )
    assert spec.time_line_hours is not None and spec.time_zero_angle_deg is not None and spec.time_direction
    lines = _whole_ratio(spec.period_hours, spec.time_line_hours, field="time_line_hours")
    per_major = 1
    if spec.time_major_hours is not None:
        per_major = _whole_ratio(spec.time_major_hours, spec.time_line_hours, field="time_major_hours")
        _whole_ratio(spec.period_hours, spec.time_major_hours, field="time_major_hours")
    if spec.time_lines == "arcs" and spec.arc_radius_mm is None:
        raise ScienceInputError("arc_radius_mm: arc-shaped time lines need the pen arm length")
    return lines, per_major, math.radians(spec.time_zero_angle_deg), spec.time_direction


def _coverage_on_circles(
    image: ByteArray, model: GridColourModel, geometry: _Geometry, angles: FloatArray, radii: FloatArray
) -> FloatArray:
    """Grid coverage (circles, angles) at the given image angles (rad) per circle, less each circle's median."""
    u = geometry.centre[0] + radii[:, None] * np.cos(angles)
    v = geometry.centre[1] + radii[:, None] * np.sin(angles)
    # Pixel (i, j) is centred at (i + 0.5, j + 0.5): array coordinates are the pixel coordinates - 0.5.
    coordinates = np.stack([v.ravel() - 0.5, u.ravel() - 0.5])
    channels = [
        ndimage.map_coordinates(image[:, :, k], coordinates, order=1, mode="nearest", output=np.float32)
        for k in range(3)
    ]
    colours = np.clip(np.rint(np.stack(channels, axis=-1)), 0, 255).astype(np.uint8)
    coverage = grid_coverage(colours, model).astype(np.float64).reshape(u.shape)
    return coverage - np.median(coverage, axis=1, keepdims=True)


def _arc_shift(geometry: _Geometry, radii: FloatArray) -> FloatArray:
    """``phi(r) - phi(r_ref)`` (rad) of the time arcs at each radius; zeros for radial lines."""
    if geometry.arm_px is None or geometry.pivot_px is None:
        return np.zeros(radii.shape)
    phi = pen_tip_angle(
        np.append(radii, geometry.reference_radius), centre_to_pivot=geometry.pivot_px, arm_length=geometry.arm_px
    )
    if not np.all(np.isfinite(phi)):
        raise ScienceInputError("arc_radius_mm / pivot_distance_mm: the pen arm cannot reach every printed ring")
    return np.asarray(phi[:-1] - phi[-1], dtype=np.float64)


def _profile(image: ByteArray, model: GridColourModel, geometry: _Geometry, side: float) -> FloatArray:
    """Median over the circles of the coverage, each circle shifted so time lines sit at their reference angle."""
    low, high = geometry.band
    margin = BAND_MARGIN * (high - low)
    radii = np.linspace(low + margin, high - margin, CIRCLES)
    count = min(MAX_SAMPLES_PER_CIRCLE, math.ceil(_TWO_PI * geometry.reference_radius / ARC_STEP_PX))
    angles = np.arange(count) * (_TWO_PI / count)
    shifted = angles[None, :] + side * _arc_shift(geometry, radii)[:, None]
    coverage = _coverage_on_circles(image, model, geometry, shifted, radii)
    return np.clip(np.median(coverage, axis=0), 0.0, None)


def _comb(profile: FloatArray, lines: int, side: float) -> _Comb:
    """Phase of the line comb from the Fourier coefficient at ``lines`` cycles per turn, then each line's centroid."""
    count = profile.size
    step = _TWO_PI / count
    angles = np.arange(count) * step
    total = float(profile.sum())
    if total <= 0.0:
        raise ScienceInputError("no printed time lines found between the rings")
    coefficient = complex(np.sum(profile * np.exp(-1j * lines * angles)))
    strength = abs(coefficient) / total
    spacing = _TWO_PI / lines
    phase = (-math.atan2(coefficient.imag, coefficient.real) / lines) % spacing
    half = max(1, math.floor(spacing / 3.0 / step))
    offsets = np.arange(-half, half + 1)
    centres = phase + spacing * np.arange(lines)
    nearest = np.rint(centres / step).astype(np.intp)
    window = profile[(nearest[:, None] + offsets[None, :]) % count]
    relative = (nearest[:, None] + offsets[None, :]) * step - centres[:, None]
    mass = window.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        residual = np.where(mass > 0, np.sum(window * relative, axis=1) / mass, 0.0)
    found = mass >= 0.3 * float(np.median(mass[mass > 0])) if np.any(mass > 0) else np.zeros(lines, dtype=bool)
    if found.any():
        shift = float(np.median(residual[found]))
        # Not wrapped again: line k keeps its index (and so its ink and residual) however far the comb moves.
        phase, residual = phase + shift, residual - shift
    return _Comb(phase, spacing, mass, residual, found, strength, side)


def _best_side(image: ByteArray, model: GridColourModel, geometry: _Geometry, lines: int) -> _Comb:
    """The comb of the sharper arc side (radial lines: the only one)."""
    if geometry.arm_px is None:
        return _comb(_profile(image, model, geometry, 1.0), lines, 1.0)
    combs = {side: _comb(_profile(image, model, geometry, side), lines, side) for side in (1.0, -1.0)}
    best, other = sorted(combs, key=lambda side: combs[side].strength, reverse=True)
    if combs[other].strength > MAX_SIDE_LIKENESS * combs[best].strength:
        raise ScienceInputError(
            "cannot tell which way the printed time arcs bend (both directions fit alike, strengths "
            f"{combs[best].strength:.2f} and {combs[other].strength:.2f}); place time zero by hand"
        )
    return combs[best]


def _major_group(comb: _Comb, per_major: int) -> int:
    """Index (mod ``per_major``) of the major lines; refused when no group is clearly heavier."""
    if per_major == 1:
        return 0
    groups = np.array([comb.mass[j::per_major].mean() for j in range(per_major)])
    order = np.argsort(groups)[::-1]
    ratio = float(groups[order[0]] / groups[order[1]]) if groups[order[1]] > 0 else math.inf
    if ratio < MIN_MAJOR_RATIO:
        raise ScienceInputError(
            f"the major time lines cannot be told from the others (heaviest group only {ratio:.2f} x the next); "
            "place time zero by hand"
        )
    return int(order[0])


def _wrap(angle: float) -> float:
    """Angle wrapped to [-pi, pi)."""
    return (angle + math.pi) % _TWO_PI - math.pi


def _choose_zero(comb: _Comb, group: int, per_major: int, reference: float) -> tuple[int, float]:
    """Index of the (major) line nearest the reference angle, and its offset from it (rad)."""
    candidates = np.arange(group, comb.mass.size, per_major)
    offsets = np.array([_wrap(comb.phase + k * comb.spacing + comb.residual[k] - reference) for k in candidates])
    best = int(np.argmin(np.abs(offsets)))
    spacing = comb.spacing * per_major
    if abs(offsets[best]) > MAX_REFERENCE_OFFSET * spacing:
        raise ScienceInputError(
            f"unsure which printed line is time zero: the nearest {'major ' if per_major > 1 else ''}time line lies "
            f"{math.degrees(offsets[best]):.1f} degrees from the spec's time-zero angle and such lines are "
            f"{math.degrees(spacing):.1f} degrees apart (is the sheet turned or upside down?); place time zero by hand"
        )
    return int(candidates[best]), float(offsets[best])


def _geometry(
    spec: CircularChartSpec, centre: tuple[float, float], radius_min_px: float, radius_max_px: float
) -> _Geometry:
    px_per_mm = abs(radius_max_px - radius_min_px) / abs(spec.ring_radii_mm[1] - spec.ring_radii_mm[0])
    pivot_mm = spec.pivot_distance()
    arm = None if pivot_mm is None or spec.arc_radius_mm is None else spec.arc_radius_mm * px_per_mm
    return _Geometry(
        centre=centre,
        reference_radius=radius_max_px,
        band=(min(radius_min_px, radius_max_px), max(radius_min_px, radius_max_px)),
        arm_px=arm,
        pivot_px=None if pivot_mm is None else pivot_mm * px_per_mm,
    )


def find_time_zero(
    image: NDArray[np.uint8],
    spec: CircularChartSpec,
    model: GridColourModel,
    *,
    centre: tuple[float, float],
    radius_min_px: float,
    radius_max_px: float,
) -> TimeZero:
    """Find the printed time-zero line of a circular chart (module docstring).

    Parameters
    ----------
    image : ndarray of uint8, shape (H, W, 3)
        The sheet, sRGB, in stored-image pixels.
    spec : CircularChartSpec
        The printed geometry; needs ``time_line_hours``, ``time_zero_angle_deg`` and ``time_direction``
        (and ``arc_radius_mm`` for arc-shaped time lines).
    model : GridColourModel
        The sheet's grid colour model.
    centre : tuple of float
        Chart centre (u, v) in px.
    radius_min_px, radius_max_px : float
        Radii (px) of the rings of ``value_axis.frame[0]`` and ``frame[1]``.

    Raises
    ------
    ScienceInputError
        Missing spec fields, no periodic time lines, an unclear arc bend or major line, or a time-zero
        line too far from the reference angle to be sure which it is.
    """
    lines, per_major, reference, direction = _check_spec(spec)
    geometry = _geometry(spec, centre, radius_min_px, radius_max_px)
    comb = _best_side(np.ascontiguousarray(image), model, geometry, lines)
    if comb.strength < MIN_STRENGTH:
        raise ScienceInputError(
            f"no evenly spaced time lines every {spec.time_line_hours:g} h found (comb strength {comb.strength:.2f})"
        )
    if comb.found.mean() < MIN_LINES_FOUND:
        raise ScienceInputError(f"only {int(comb.found.sum())} of {lines} printed time lines were found")
    zero, offset = _choose_zero(comb, _major_group(comb, per_major), per_major, reference)
    hours = _line_hours(zero, lines, spec.time_line_hours or 0.0, direction)
    return _time_zero(geometry, comb, zero, offset, per_major, hours)


def _line_hours(zero: int, lines: int, step_hours: float, direction: str) -> FloatArray:
    """Time (h after time zero) of each line; line indices grow clockwise on the screen."""
    sign = 1 if direction == "clockwise" else -1
    return np.asarray(((sign * (np.arange(lines) - zero)) % lines) * step_hours, dtype=np.float64)


def _time_zero(
    geometry: _Geometry, comb: _Comb, zero: int, offset: float, per_major: int, hours: FloatArray
) -> TimeZero:
    radius = geometry.reference_radius
    line_angles = comb.phase + np.arange(comb.mass.size) * comb.spacing + comb.residual
    angle = float(line_angles[zero]) % _TWO_PI
    pixel = (geometry.centre[0] + radius * math.cos(angle), geometry.centre[1] + radius * math.sin(angle))
    rms_px = float(np.sqrt(np.mean(comb.residual[comb.found] ** 2))) * radius
    spacing = comb.spacing * per_major
    margin = 1.0 - abs(offset) / (MAX_REFERENCE_OFFSET * spacing)
    confidence = (
        float(np.clip((comb.strength - MIN_STRENGTH) / 0.3, 0.0, 1.0))
        * float(comb.found.mean())
        * float(1.0 / (1.0 + (rms_px / 1.0) ** 4))
        * float(np.clip(2.0 * margin, 0.0, 1.0))
    )
    return TimeZero(
        angle_deg=math.degrees(angle),
        pixel=pixel,
        reference_radius_px=radius,
        pen_arm=_pen_arm(geometry, angle, comb.side),
        line_spacing_deg=math.degrees(comb.spacing),
        major_spacing_deg=math.degrees(spacing),
        offset_deg=math.degrees(offset),
        line_rms_px=rms_px,
        lines_found=(int(comb.found.sum()), int(comb.found.size)),
        strength=comb.strength,
        confidence=confidence,
        warnings=_warnings(comb, offset),
        line_hours=tuple(hours[comb.found].tolist()),
        line_angles_deg=tuple(np.degrees(line_angles[comb.found]).tolist()),
        centre=geometry.centre,
        arc_side=comb.side,
    )


def _pen_arm(geometry: _Geometry, angle: float, side: float) -> dict[str, Any] | None:
    """Pivot and arm of arc-shaped time lines: the time-zero arc meets the reference ring at ``angle`` (rad).

    A line's angle at radius r is the pivot's angle plus ``side * phi(r)`` (:mod:`~tracedesk.science.circular`).
    """
    if geometry.arm_px is None or geometry.pivot_px is None:
        return None
    phi = float(
        pen_tip_angle(
            np.array([geometry.reference_radius]), centre_to_pivot=geometry.pivot_px, arm_length=geometry.arm_px
        )[0]
    )
    pivot_angle = angle - side * phi
    pivot = (
        geometry.centre[0] + geometry.pivot_px * math.cos(pivot_angle),
        geometry.centre[1] + geometry.pivot_px * math.sin(pivot_angle),
    )
    return {"pivot_pixel": list(pivot), "length_px": geometry.arm_px}


def _warnings(comb: _Comb, offset: float) -> tuple[str, ...]:
    notes = []
    missing = int(comb.found.size - comb.found.sum())
    if missing:
        notes.append(f"{missing} of {comb.found.size} printed time lines were not found")
    if abs(math.degrees(offset)) > 0.05:
        notes.append(f"the sheet is turned by {math.degrees(offset):.2f} degrees (clockwise positive)")
    return tuple(notes)
