"""Circular charts: the centre and the value rings found on a scan from the printed ring colour.

:func:`detect_circular_chart`:

1. grid-colour score maps as for cartesian charts (:mod:`~tracedesk.science.grid_likelihood`), their
   strong cells pooled as weighted points;
2. the centre: concentric rings make the histogram of distances from the true centre sharpest, so
   candidate centres are scored by that sharpness (sum of squared bin counts over the squared total) on
   a grid around the points' centroid, then on finer grids around the best;
3. the rings: the spec's ring radii (known up to the scan's scale) are matched to the radial profile at
   that centre by scale alone, then checked like cartesian grid lines (lines found, extra lines, lines
   past the outermost ring: :mod:`~tracedesk.science.grid_template`);
4. each chosen ring is measured at full resolution along 180 rays (bilinear colour samples every half
   pixel across the ring, background removed, windowed centroid), averaged in 2-degree sectors, fitted by
   :func:`~tracedesk.science.circular.fit_circle` with outliers dropped, and the rings' centres are
   averaged (weighted by the points they hold);
5. the radius law (radius linear in the value axis' chart coordinate) gives the radii of the frame
   values, ready for a ``circular`` calibration's ``value_axis``.

The time zero comes from the printed time lines and the spec's reference angle
(:mod:`~tracedesk.science.time_lines`, put together in :mod:`~tracedesk.science.circular_registration`).

JSON shape of :meth:`CircularDetection.to_dict`::

    {"centre": [u, v], "rings": [{"value": v, "radius_px": r | null}, ...],
     "value_axis": {"scale": ..., "min": v0, "max": v1, "radius_min_px": r0, "radius_max_px": r1},
     "ring_rms_px": e, "radius_law_rms_px": e, "confidence": c,
     "confidence_factors": {"match": f, "rings": f, "residuals": f}, "warnings": [text, ...]}
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Final

import numpy as np
from numpy.typing import NDArray
from scipy import ndimage

from tracedesk.science.circular import fit_circle
from tracedesk.science.errors import ScienceInputError
from tracedesk.science.grid_likelihood import GridColourModel, family_score_maps, grid_colour_model_for, grid_coverage
from tracedesk.science.grid_lines import MapPoints, map_points, normalise_profile
from tracedesk.science.grid_spec import CircularChartSpec
from tracedesk.science.grid_template import LineTemplate, TemplateMatch, check_match, line_template, refine_match

FloatArray = NDArray[np.float64]
ByteArray = NDArray[np.uint8]

COARSE_CELLS: Final = 1500
MIN_IMAGE_PX: Final = 64
MIN_INK_FRACTION: Final = 0.001
# Cells scoring this (of 255) count as grid ink when deciding whether the sheet has any.
INK_SCORE: Final = 64
MAX_CENTRE_POINTS: Final = 8_000
RAYS: Final = 180
RAYS_PER_SECTOR: Final = 3
SECTORS: Final = RAYS // RAYS_PER_SECTOR
MAX_RINGS_MEASURED: Final = 16
MIN_RING_POINTS: Final = 0.3
# Mean grid coverage (0-1) by which the two sides of a ring may differ on one ray.
MAX_SIDE_DIFFERENCE: Final = 0.1
MIN_CONFIDENCE: Final = 0.2
MIN_MATCH_SCORE: Final = 0.15


@dataclass(frozen=True)
class CircularDetection:
    """Centre and rings of a circular chart (module docstring for the JSON shape).

    Attributes
    ----------
    centre : tuple of float
        Centre (u, v) in px.
    ring_values : ndarray
        Values of the spec's rings (value axis units).
    ring_radii_px : ndarray
        Measured radius of each ring (px); NaN for rings not measured.
    radius_min_px, radius_max_px : float
        Radii (px) of the value axis' frame values from the fitted radius law.
    ring_rms_px : float
        RMS distance (px) of the ring points from their concentric circles.
    radius_law_rms_px : float
        RMS (px) of the measured radii about the radius law.
    confidence : float
        In [0, 1], the product of ``confidence_factors``.
    confidence_factors : dict
        ``match``, ``rings`` (share of chosen rings measured), ``residuals``.
    scale : str
        The value axis scale.
    frame : tuple of float
        The value axis' frame values.
    warnings : tuple of str
        Notes for the reviewer.
    """

    centre: tuple[float, float]
    ring_values: FloatArray
    ring_radii_px: FloatArray
    radius_min_px: float
    radius_max_px: float
    ring_rms_px: float
    radius_law_rms_px: float
    confidence: float
    confidence_factors: dict[str, float]
    scale: str
    frame: tuple[float, float]
    warnings: tuple[str, ...]

    def value_axis(self) -> dict[str, Any]:
        """The ``value_axis`` of a ``circular`` calibration for ``build_calibration``."""
        return {
            "scale": self.scale,
            "min": self.frame[0],
            "max": self.frame[1],
            "radius_min_px": self.radius_min_px,
            "radius_max_px": self.radius_max_px,
        }

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dictionary (module docstring)."""
        return {
            "centre": list(self.centre),
            "rings": [
                {"value": float(value), "radius_px": float(radius) if math.isfinite(radius) else None}
                for value, radius in zip(self.ring_values, self.ring_radii_px, strict=True)
            ],
            "value_axis": self.value_axis(),
            "ring_rms_px": self.ring_rms_px,
            "radius_law_rms_px": self.radius_law_rms_px,
            "confidence": self.confidence,
            "confidence_factors": dict(self.confidence_factors),
            "warnings": list(self.warnings),
        }


def _check_image(image: Any) -> ByteArray:
    array = np.asarray(image)
    if array.dtype != np.uint8 or array.ndim != 3 or array.shape[2] != 3:
        raise ScienceInputError(f"image: expected an (H, W, 3) uint8 RGB array, got {array.dtype} {array.shape}")
    if min(array.shape[:2]) < MIN_IMAGE_PX:
        raise ScienceInputError(f"image: {array.shape[1]} x {array.shape[0]} px is too small to register")
    return np.ascontiguousarray(array)


def _ring_points(image: ByteArray, model: GridColourModel, block: int, spec: CircularChartSpec) -> MapPoints:
    """Strong grid cells of both coarse maps, pooled: rings run in every direction."""
    maps = family_score_maps(image, model, block=block)
    ink = max(float(np.mean(m.scores >= INK_SCORE)) for m in maps)
    if ink < MIN_INK_FRACTION:
        raise ScienceInputError(
            f"no printed rings of colour {spec.grid_colour} found ({ink:.2%} of the sheet has that ink): "
            "a blank page, or not this chart"
        )
    parts = [map_points(m) for m in maps]
    return MapPoints(
        "rings",
        np.concatenate([p.u for p in parts]),
        np.concatenate([p.v for p in parts]),
        np.concatenate([p.weight for p in parts]),
    )


def _radial_sharpness(points: MapPoints, centres: FloatArray, bin_px: float) -> FloatArray:
    """Sharpness of the distance histogram about each candidate centre (n, 2)."""
    result = np.empty(centres.shape[0])
    for index, (cu, cv) in enumerate(centres):
        radius = np.hypot(points.u - cu, points.v - cv)
        counts = np.bincount((radius / bin_px).astype(np.intp), weights=points.weight)
        result[index] = float(counts @ counts)
    total = float(points.weight.sum())
    return result / (total * total)


def find_centre(points: MapPoints, *, bin_px: float, reach_px: float) -> tuple[float, float]:
    """Centre (px) of concentric rings among weighted points: sharpest radial histogram (module docstring).

    Parameters
    ----------
    points : MapPoints
        Ring-coloured cells.
    bin_px : float
        Radial bin width (px) of the coarse cells.
    reach_px : float
        Half-width (px) of the first search square around the points' weighted centroid.
    """
    if points.u.size > MAX_CENTRE_POINTS:
        chosen = np.random.default_rng(0).choice(points.u.size, MAX_CENTRE_POINTS, replace=False)
        points = MapPoints(points.family, points.u[chosen], points.v[chosen], points.weight[chosen])
    best = np.array([np.average(points.u, weights=points.weight), np.average(points.v, weights=points.weight)])
    step, half_steps = reach_px / 8.0, 8
    # Each finer grid spans +-1 step of the coarser one; the full-resolution fit refines the rest.
    while step >= 0.5 * bin_px:
        offsets = np.arange(-half_steps, half_steps + 1) * step
        grid = np.stack(np.meshgrid(offsets, offsets, indexing="ij"), axis=-1).reshape(-1, 2) + best
        best = grid[int(np.argmax(_radial_sharpness(points, grid, bin_px)))]
        step, half_steps = step / 4.0, 4
    return float(best[0]), float(best[1])


def _ring_template_match(profile: FloatArray, template: LineTemplate, ratio: float) -> TemplateMatch:
    """Scale of the rings: radius of fraction f is R (ratio + (1 - ratio) f), R the frame[1] ring (bins)."""
    outer = np.arange(4.0, profile.size - 1.0, 0.5)
    low = np.minimum(ratio, 1.0) * outer
    span = np.abs(1.0 - ratio) * outer
    flipped = ratio > 1.0
    candidates = [TemplateMatch(float(s), float(o), flipped, 0.0) for s, o in zip(span, low, strict=True)]
    fractions, amounts = template.comb()
    along = 1.0 - fractions if flipped else fractions
    positions = low[:, None] + span[:, None] * along[None, :]
    score = np.interp(positions, np.arange(profile.size, dtype=np.float64), profile, left=0.0, right=0.0) @ amounts
    best = candidates[int(np.argmax(score))]
    return refine_match(profile, template, best, span_bins=1.0, offset_bins=1.0)


def _check_rings(profile: FloatArray, template: LineTemplate, match: TemplateMatch) -> None:
    check = check_match(profile, template, match)
    if match.score < MIN_MATCH_SCORE:
        raise ScienceInputError("no printed rings matching the spec were found around any centre")
    if check.found_fraction < 0.6:
        raise ScienceInputError(
            f"only {check.found_fraction:.0%} of the spec's {template.fraction.size} rings were found; not this chart"
        )
    if check.extra_fraction > 0.25:
        raise ScienceInputError(
            f"{check.extra_fraction:.0%} of the printed rings are not where the spec puts rings; is this the chart?"
        )
    if check.beyond_ratio > 0.5:
        raise ScienceInputError("the printed rings go on past the spec's outermost ring; not this chart")


def _ring_samples(image: ByteArray, centre: FloatArray, radius: float, half: float) -> tuple[FloatArray, FloatArray]:
    """Colours (rays, samples, 3) sampled bilinearly across a ring every half pixel, and the sample radii."""
    angles = np.linspace(0.0, 2.0 * np.pi, RAYS, endpoint=False)
    radii = radius + np.arange(-half, half + 1e-9, 0.5)
    u = centre[0] + np.cos(angles)[:, None] * radii[None, :]
    v = centre[1] + np.sin(angles)[:, None] * radii[None, :]
    # Pixel (i, j) is centred at (i + 0.5, j + 0.5): array coordinates are the pixel coordinates - 0.5.
    coordinates = np.stack([v.ravel() - 0.5, u.ravel() - 0.5])
    channels = [
        ndimage.map_coordinates(image[:, :, k], coordinates, order=1, mode="constant", cval=np.nan, output=np.float64)
        for k in range(3)
    ]
    return np.stack(channels, axis=-1).reshape(RAYS, radii.size, 3), radii


def _ring_points_px(
    image: ByteArray, model: GridColourModel, centre: FloatArray, radius: float, gap: float
) -> FloatArray:
    """Sub-pixel points (n, 2) on one ring: a windowed centroid across the ring on each ray."""
    half = float(np.clip(0.45 * gap, 2.5, 20.0))
    colours, radii = _ring_samples(image, centre, radius, half)
    usable = np.all(np.isfinite(colours), axis=(1, 2))
    coverage = grid_coverage(np.clip(np.nan_to_num(colours), 0, 255).astype(np.uint8), model).astype(np.float64)
    coverage -= np.median(coverage, axis=1, keepdims=True)
    weights = np.clip(coverage, 0.0, None)
    window = float(np.clip(0.3 * gap, 2.0, 10.0))
    peak = radii[np.argmax(weights, axis=1)]
    for _ in range(6):
        inside = np.abs(radii[None, :] - peak[:, None]) <= window
        mass = np.sum(weights * inside, axis=1)
        with np.errstate(divide="ignore", invalid="ignore"):
            peak = np.where(mass > 0, np.sum(weights * inside * radii[None, :], axis=1) / mass, peak)
    reference = float(np.median(mass[usable & (mass > 0)])) if np.any(usable & (mass > 0)) else 0.0
    held = (
        usable
        & (mass >= 0.35 * reference)
        & (np.abs(peak - radius) < half - 1.0)
        & _balanced(coverage, radii, peak, window)
    )
    return _sector_points(centre, np.where(held, peak, np.nan))


def _balanced(coverage: FloatArray, radii: FloatArray, peak: FloatArray, window: float) -> NDArray[np.bool_]:
    """Rays whose ink beside the ring is alike inside and outside it.

    A ray running along a time line that ends at the ring (or a pen along the ray) has ink on one side
    only, which would pull the centroid; such rays are left out.
    """
    inner = radii[None, :] < peak[:, None] - window
    outer = radii[None, :] > peak[:, None] + window
    with np.errstate(invalid="ignore", divide="ignore"):
        inside = np.sum(coverage * inner, axis=1) / np.sum(inner, axis=1)
        outside = np.sum(coverage * outer, axis=1) / np.sum(outer, axis=1)
    return np.asarray(np.nan_to_num(np.abs(outside - inside), nan=1.0) < MAX_SIDE_DIFFERENCE)


def _sector_points(centre: FloatArray, radius_by_ray: FloatArray) -> FloatArray:
    """One point per sector of :data:`RAYS_PER_SECTOR` rays: their mean angle and mean measured radius.

    Keeps the circle fit small (its input check compares every pair of points) without the chord sag a
    mean of (u, v) points would have. Sectors with fewer than two measured rays are left out.
    """
    angles = np.linspace(0.0, 2.0 * np.pi, RAYS, endpoint=False).reshape(-1, RAYS_PER_SECTOR)
    radius = radius_by_ray.reshape(-1, RAYS_PER_SECTOR)
    measured = np.isfinite(radius)
    count = measured.sum(axis=1)
    keep = count >= 2
    mean_radius = np.nansum(radius, axis=1)[keep] / count[keep]
    mean_angle = np.sum(np.where(measured, angles, 0.0), axis=1)[keep] / count[keep]
    return np.column_stack([centre[0] + mean_radius * np.cos(mean_angle), centre[1] + mean_radius * np.sin(mean_angle)])


def _robust_circle(points: FloatArray) -> tuple[FloatArray, float, FloatArray] | None:
    """Circle through ring points with outliers (pen crossings, stains) dropped; None if too few points."""
    keep = np.ones(points.shape[0], dtype=bool)
    for _ in range(4):
        if keep.sum() < MIN_RING_POINTS * SECTORS:
            return None
        fit = fit_circle(points[keep])
        residual = np.hypot(*(points - np.array(fit.centre)).T) - fit.radius
        spread = 1.4826 * float(np.median(np.abs(residual[keep])))
        updated = np.abs(residual) <= max(3.0 * spread, 0.5)
        if np.array_equal(updated, keep):
            break
        keep = updated
    return np.array(fit.centre), fit.radius, points[keep]


def _choose_rings(template: LineTemplate) -> list[int]:
    """Up to :data:`MAX_RINGS_MEASURED` rings spread over the axis, both frame rings included."""
    n = template.fraction.size
    if n <= MAX_RINGS_MEASURED:
        return list(range(n))
    return sorted({int(i) for i in np.linspace(0, n - 1, MAX_RINGS_MEASURED).round()})


@dataclass(frozen=True)
class _RingFits:
    centre: FloatArray
    radii: dict[int, float]
    rms_px: float


def _measure_rings(
    image: ByteArray, model: GridColourModel, centre: FloatArray, radii_px: FloatArray, chosen: list[int]
) -> _RingFits:
    """Fit each chosen ring, average the centres (weighted by points), re-measure radii about that centre."""
    gaps = np.abs(np.diff(np.sort(radii_px)))
    gap = float(np.min(gaps)) if gaps.size else 20.0
    fits: dict[int, tuple[FloatArray, float, FloatArray]] = {}
    for index in chosen:
        points = _ring_points_px(image, model, centre, float(radii_px[index]), gap)
        if points.shape[0] >= MIN_RING_POINTS * SECTORS:
            fitted = _robust_circle(points)
            if fitted is not None:
                fits[index] = fitted
    if len(fits) < 2:
        raise ScienceInputError(f"only {len(fits)} of {len(chosen)} chosen rings could be measured")
    weights = np.array([fit[2].shape[0] for fit in fits.values()], dtype=np.float64)
    common = np.average(np.array([fit[0] for fit in fits.values()]), axis=0, weights=weights)
    radii, residuals = {}, []
    for index, (_, _, points) in fits.items():
        distance = np.hypot(*(points - common).T)
        radii[index] = float(np.mean(distance))
        residuals.append(distance - radii[index])
    rms = float(np.sqrt(np.mean(np.concatenate(residuals) ** 2)))
    return _RingFits(common, radii, rms)


def _radius_law(spec: CircularChartSpec, values: FloatArray, radii: dict[int, float]) -> tuple[float, float, float]:
    """Radii (px) of the frame values from a straight line of radius against chart coordinate, and its RMS."""
    scale = spec.value_axis.axis_scale()
    indices = sorted(radii)
    chart = scale.values_to_chart(values[indices])
    measured = np.array([radii[i] for i in indices])
    slope, intercept = np.polyfit(chart, measured, 1)
    ends = scale.values_to_chart(np.array(spec.value_axis.frame))
    law_rms = float(np.sqrt(np.mean((measured - (slope * chart + intercept)) ** 2)))
    return float(slope * ends[0] + intercept), float(slope * ends[1] + intercept), law_rms


def detect_circular_chart(
    image: NDArray[np.uint8], spec: CircularChartSpec, *, model: GridColourModel | None = None
) -> CircularDetection:
    """Find the centre and the value rings of a circular chart (module docstring).

    Parameters
    ----------
    image : ndarray of uint8, shape (H, W, 3)
        The sheet, sRGB, in stored-image pixels.
    spec : CircularChartSpec
        The chart's printed geometry.
    model : GridColourModel, optional
        The sheet's grid colour model, when the caller has built it already.

    Raises
    ------
    ScienceInputError
        A blank page, no rings of the spec's pattern, too few rings measured, or low confidence.
    """
    array = _check_image(image)
    block = max(1, math.ceil(max(array.shape[:2]) / COARSE_CELLS))
    if model is None:
        model = grid_colour_model_for(
            array, grid_colour=spec.grid_colour, tolerance=spec.colour_tolerance, pen_colours=spec.pen_colours
        )
    points = _ring_points(array, model, block, spec)
    coarse_centre = find_centre(points, bin_px=float(block), reach_px=0.15 * min(array.shape[:2]))
    radius = np.hypot(points.u - coarse_centre[0], points.v - coarse_centre[1])
    profile = np.bincount((radius / block).astype(np.intp), weights=points.weight).astype(np.float64)
    normalised = normalise_profile(profile)
    template = line_template(spec.value_axis)
    ratio = spec.ring_radii_mm[0] / spec.ring_radii_mm[1]
    match = _ring_template_match(normalised, template, ratio)
    _check_rings(normalised, template, match)
    # Bin x covers radii [x, x + 1) * block: its middle is (x + 0.5) * block.
    radii_px = (match.bins_of(template.fraction) + 0.5) * block
    chosen = _choose_rings(template)
    rings = _measure_rings(array, model, np.array(coarse_centre), radii_px, chosen)
    return _circular_result(spec, template, match, rings, len(chosen))


def _circular_result(
    spec: CircularChartSpec, template: LineTemplate, match: TemplateMatch, rings: _RingFits, chosen: int
) -> CircularDetection:
    r_min, r_max, law_rms = _radius_law(spec, template.values, rings.radii)
    factors = {
        "match": float(np.clip((match.score - 0.1) / 0.3, 0.0, 1.0)),
        "rings": len(rings.radii) / chosen,
        "residuals": float(1.0 / (1.0 + (max(rings.rms_px, law_rms) / 1.0) ** 4)),
    }
    confidence = float(np.prod(list(factors.values())))
    warnings = []
    if len(rings.radii) < chosen:
        warnings.append(f"{chosen - len(rings.radii)} of {chosen} chosen rings could not be measured")
    if confidence < MIN_CONFIDENCE:
        raise ScienceInputError(f"ring detection too uncertain (confidence {confidence:.2f}, factors {factors})")
    radii = np.full(template.values.shape, np.nan)
    for index, value in rings.radii.items():
        radii[index] = value
    return CircularDetection(
        centre=(float(rings.centre[0]), float(rings.centre[1])),
        ring_values=template.values,
        ring_radii_px=radii,
        radius_min_px=r_min,
        radius_max_px=r_max,
        ring_rms_px=rings.rms_px,
        radius_law_rms_px=law_rms,
        confidence=confidence,
        confidence_factors=factors,
        scale=spec.value_axis.scale,
        frame=spec.value_axis.frame,
        warnings=tuple(warnings),
    )
