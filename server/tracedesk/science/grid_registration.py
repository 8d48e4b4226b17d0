"""Automatic registration of a cartesian chart from its printed grid.

:func:`detect_cartesian_grid` finds the spec's printed grid on a scan and proposes a calibration:

1. colour model: the sheet's paper colour and the spec's grid colour adapted to the scan
   (:mod:`~tracedesk.science.grid_likelihood`); coarse score maps of the near-vertical and the
   near-horizontal lines, on cells of ``block`` px (about 2000 cells across the longer side);
2. each family's angle (sharpest projection within +-4 degrees) and profiles
   (:mod:`~tracedesk.science.grid_lines`);
3. identification: the spec's lines matched to both families in every orientation, refusal of a sheet
   that is not the spec's chart (:mod:`~tracedesk.science.grid_identification`);
4. each line followed band by band, then up to 8 x 6 lines (frame and major lines first) measured to
   sub-pixel accuracy on full-resolution windows and intersected (:mod:`~tracedesk.science.grid_refinement`);
5. the intersections as control points of :func:`~tracedesk.science.calibration.build_calibration`
   (transform ``"auto"``), whose residuals and the evidence above give a confidence in [0, 1].

It refuses (:class:`~tracedesk.science.errors.ScienceInputError`, with the reason) rather than guess:
a blank page or a sheet without the grid colour, a grid whose lines do not fit the spec, a mirror-image
sheet, too few lines measured, or a confidence below :data:`MIN_CONFIDENCE`. A sheet turned by 90 or
180 degrees is registered as it lies, with ``orientation`` saying so.

JSON shape of :meth:`GridDetection.to_dict`::

    {"control_points": [{"pixel": [u, v], "value": [x, y]}, ...],
     "calibration": {"kind": "cartesian", "x_axis": ..., "y_axis": ..., "control_points": [...],
                     "transform": "auto"},                      (ready for build_calibration)
     "transform": "affine" | ..., "residuals": ResidualReport.to_dict(),
     "confidence": c, "confidence_factors": {"match": f, "lines": f, "residuals": f},
     "rotation_deg": r, "orientation": "upright" | "rotated 180" | "rotated 90 clockwise" |
     "rotated 90 counterclockwise", "orientation_certain": bool,
     "lines_measured": {"x": [n, of_n], "y": [n, of_n]}, "warnings": [text, ...]}

``rotation_deg`` is the mean angle (degrees, clockwise on the screen) of the printed lines against the
image axes, after the quarter turns named by ``orientation``.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any, Final

import numpy as np
from numpy.typing import NDArray

from tracedesk.science.calibration import build_calibration
from tracedesk.science.errors import ScienceInputError
from tracedesk.science.grid_identification import (
    AxisMatch,
    FamilyAnalysis,
    Identification,
    LineCourse,
    analyse_family,
    check_identification,
    follow_lines,
    identify_axes,
    match_bands,
)
from tracedesk.science.grid_likelihood import GridColourModel, family_score_maps, grid_colour_model_for
from tracedesk.science.grid_lines import map_points
from tracedesk.science.grid_refinement import PredictedLine, RefinedLine, intersect_lines, refine_line
from tracedesk.science.grid_spec import CartesianGridSpec
from tracedesk.science.registration import ResidualReport

FloatArray = NDArray[np.float64]
ByteArray = NDArray[np.uint8]
ProgressCallback = Callable[[float], None]

COARSE_CELLS: Final = 2000
MIN_IMAGE_PX: Final = 64
# Fewer strong grid cells than this fraction of a family map: no grid of that colour on the sheet.
MIN_INK_FRACTION: Final = 0.002
INK_SCORE: Final = 64
# At most this many lines per axis are measured; 8 x 6 intersections keep the calibration's
# leave-one-out model choice quick.
MAX_LINES_LONG: Final = 8
MAX_LINES_SHORT: Final = 6
MIN_LINES_MEASURED: Final = 2
MAX_STATIONS: Final = 48
MIN_CONFIDENCE: Final = 0.2


@dataclass(frozen=True)
class GridDetection:
    """A proposed calibration from the printed grid (see the module docstring for its JSON shape).

    Attributes
    ----------
    control_points : list of dict
        ``{"pixel": [u, v], "value": [x, y]}`` at grid intersections (px; axis units).
    calibration_spec : dict
        Ready for :func:`~tracedesk.science.calibration.build_calibration`.
    residual_report : ResidualReport
        Residuals of that calibration at the control points.
    confidence : float
        In [0, 1]: the product of ``confidence_factors``.
    confidence_factors : dict
        ``match`` (template match of the weaker axis), ``lines`` (share of chosen lines measured and
        their stations), ``residuals`` (calibration RMS).
    rotation_deg : float
        Mean angle of the printed lines (degrees, clockwise on the screen).
    orientation : str
        ``"upright"``, ``"rotated 180"``, ``"rotated 90 clockwise"`` or ``"rotated 90 counterclockwise"``.
    orientation_certain : bool
        False when the grid looks the same turned (orientation assumed upright).
    lines_measured : dict
        Per axis ``(measured, chosen)`` line counts.
    warnings : tuple of str
        Notes for the reviewer.
    """

    control_points: list[dict[str, list[float]]]
    calibration_spec: dict[str, Any]
    residual_report: ResidualReport
    confidence: float
    confidence_factors: dict[str, float]
    rotation_deg: float
    orientation: str
    orientation_certain: bool
    lines_measured: dict[str, tuple[int, int]]
    warnings: tuple[str, ...]

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dictionary (module docstring)."""
        return {
            "control_points": self.control_points,
            "calibration": self.calibration_spec,
            "transform": self.residual_report.transform,
            "residuals": self.residual_report.to_dict(),
            "confidence": self.confidence,
            "confidence_factors": dict(self.confidence_factors),
            "rotation_deg": self.rotation_deg,
            "orientation": self.orientation,
            "orientation_certain": self.orientation_certain,
            "lines_measured": {axis: list(counts) for axis, counts in self.lines_measured.items()},
            "warnings": list(self.warnings),
        }


def _check_image(image: Any) -> ByteArray:
    array = np.asarray(image)
    if array.dtype != np.uint8 or array.ndim != 3 or array.shape[2] != 3:
        raise ScienceInputError(f"image: expected an (H, W, 3) uint8 RGB array, got {array.dtype} {array.shape}")
    if min(array.shape[:2]) < MIN_IMAGE_PX:
        raise ScienceInputError(f"image: {array.shape[1]} x {array.shape[0]} px is too small to register")
    return np.ascontiguousarray(array)


def _report(progress: ProgressCallback | None, fraction: float) -> None:
    if progress is not None:
        progress(fraction)


def _analyse_families(
    image: ByteArray, spec: CartesianGridSpec, block: int
) -> tuple[GridColourModel, dict[str, FamilyAnalysis]]:
    model = grid_colour_model_for(
        image, grid_colour=spec.grid_colour, tolerance=spec.colour_tolerance, pen_colours=spec.pen_colours
    )
    families: dict[str, FamilyAnalysis] = {}
    for family_map in family_score_maps(image, model, block=block):
        ink = float(np.mean(family_map.scores >= INK_SCORE))
        if ink < MIN_INK_FRACTION:
            raise ScienceInputError(
                f"no printed grid of colour {spec.grid_colour} found ({ink:.2%} of the sheet has that ink, "
                f"{family_map.family} lines): a blank page, or not this chart"
            )
        points = map_points(family_map)
        families[family_map.family] = analyse_family(points, bin_px=float(block), image_shape=image.shape[:2])
    return model, families


def _select_lines(major: NDArray[np.bool_], count: int) -> list[int]:
    """Up to ``count`` line indices spread over the axis: both frame lines, major lines preferred."""
    n = major.size
    if n <= count:
        return list(range(n))
    chosen: list[int] = []
    reach = 0.5 * (n - 1) / (count - 1)
    for target in np.linspace(0.0, n - 1.0, count):
        low, high = max(0, math.ceil(target - reach)), min(n - 1, math.floor(target + reach))
        window = np.arange(low, high + 1)
        candidates = window[major[window]] if major[window].any() and 0 < target < n - 1 else window
        pick = int(candidates[np.argmin(np.abs(candidates - target))])
        if pick not in chosen:
            chosen.append(pick)
    return sorted(chosen)


def _line_counts(identification: Identification) -> dict[str, int]:
    """Lines to measure per axis: 8 on the axis whose lines are the longer side's family, else 6."""
    x_vertical = identification.x.family.family == "vertical"
    return {
        "x": MAX_LINES_LONG if x_vertical else MAX_LINES_SHORT,
        "y": MAX_LINES_SHORT if x_vertical else MAX_LINES_LONG,
    }


def _stations(course: LineCourse, line: int, other: LineCourse, block: int) -> tuple[FloatArray, int]:
    """Station middles along a line, half-way between the other family's lines, and pixel lines per station."""
    # Where this line runs through the middle of the other family (their cross coordinates at 0 are
    # close enough: the lines are within a few degrees of the image axes).
    middle = float(np.mean(other.coefficients[:, 0]))
    here = float(course.cross_at(line, np.array([middle]))[0])
    crossings = np.sort([float(other.cross_at(j, np.array([here]))[0]) for j in range(other.coefficients.shape[0])])
    gaps = np.diff(crossings)
    middles = 0.5 * (crossings[1:] + crossings[:-1])
    if middles.size > MAX_STATIONS:
        middles = middles[np.linspace(0, middles.size - 1, MAX_STATIONS).round().astype(np.intp)]
    lines = int(np.clip(math.floor(0.5 * float(np.min(gaps))), 1, 2 * block + 2)) if gaps.size else 1
    return middles, lines


def _measure_axis(
    image: ByteArray,
    model: GridColourModel,
    axis_match: AxisMatch,
    courses: tuple[LineCourse, LineCourse],
    count: int,
    block: int,
) -> tuple[dict[int, RefinedLine], int]:
    """Refine the chosen lines of one axis (a neighbour stands in for a line that cannot be measured)."""
    course, other = courses
    chosen = _select_lines(axis_match.template.major, count)
    measured: dict[int, RefinedLine] = {}
    for index in chosen:
        for candidate in (index, index + 1, index - 1):
            if candidate in measured or not 0 <= candidate < course.coefficients.shape[0]:
                continue
            refined = refine_line(image, model, _predicted(course, candidate, other, block))
            if refined is not None:
                measured[candidate] = refined
                break
    return measured, len(chosen)


def _predicted(course: LineCourse, line: int, other: LineCourse, block: int) -> PredictedLine:
    spacing = float(course.spacing_px[line])
    middles, lines = _stations(course, line, other, block)
    return PredictedLine(
        family=course.family,
        coefficients=course.coefficients[line],
        station_along=middles,
        station_lines=lines,
        search_px=float(np.clip(0.45 * spacing, 2.5, 4 * block + 8)),
        centroid_px=float(np.clip(0.3 * spacing, 2.0, 2 * block + 4)),
    )


def _control_points(
    identification: Identification, lines: dict[str, dict[int, RefinedLine]]
) -> list[dict[str, list[float]]]:
    x_vertical = identification.x.family.family == "vertical"
    vertical_axis, horizontal_axis = ("x", "y") if x_vertical else ("y", "x")
    values = {"x": identification.x.template.values, "y": identification.y.template.values}
    points = []
    for i, vertical in sorted(lines[vertical_axis].items()):
        for j, horizontal in sorted(lines[horizontal_axis].items()):
            u, v = intersect_lines(vertical, horizontal)
            if not (_supported(vertical, v) and _supported(horizontal, u)):
                continue
            x_index, y_index = (i, j) if x_vertical else (j, i)
            points.append({"pixel": [u, v], "value": [float(values["x"][x_index]), float(values["y"][y_index])]})
    return points


def _supported(line: RefinedLine, along: float) -> bool:
    """The intersection lies where the line was measured (5 % leeway at the ends)."""
    low, high = line.along_range
    margin = 0.05 * (high - low)
    return low - margin <= along <= high + margin


def _confidence(
    identification: Identification, lines: dict[str, dict[int, RefinedLine]], chosen: dict[str, int], rms_px: float
) -> dict[str, float]:
    match = min(identification.x.match.score, identification.y.match.score)
    measured_share = min(len(lines[a]) / max(chosen[a], 1) for a in ("x", "y"))
    refined = [line for axis in lines.values() for line in axis.values()]
    station_share = float(np.mean([line.stations_used / line.stations_total for line in refined])) if refined else 0.0
    return {
        "match": float(np.clip((match - 0.1) / 0.3, 0.0, 1.0)),
        "lines": float(measured_share * min(1.0, station_share / 0.6)),
        "residuals": float(1.0 / (1.0 + (rms_px / 1.0) ** 4)),
    }


def detect_cartesian_grid(
    image: NDArray[np.uint8], spec: CartesianGridSpec, *, progress: ProgressCallback | None = None
) -> GridDetection:
    """Register a cartesian chart from its printed grid (module docstring).

    Parameters
    ----------
    image : ndarray of uint8, shape (H, W, 3)
        The sheet, sRGB, in stored-image pixels.
    spec : CartesianGridSpec
        The chart's printed geometry.
    progress : callable, optional
        Called with the fraction done (0-1).

    Returns
    -------
    GridDetection
        Control points, a calibration ready for ``build_calibration``, its residuals and a confidence.

    Raises
    ------
    ScienceInputError
        When the sheet cannot be registered to this spec with confidence; the message gives the reason.
    """
    array = _check_image(image)
    block = max(1, math.ceil(max(array.shape[:2]) / COARSE_CELLS))
    model, families = _analyse_families(array, spec, block)
    _report(progress, 0.3)
    identification = identify_axes(spec, families)
    bands = {"x": match_bands(identification.x), "y": match_bands(identification.y)}
    check_identification(identification, bands)
    _report(progress, 0.5)
    lines: dict[str, dict[int, RefinedLine]] = {}
    chosen: dict[str, int] = {}
    counts = _line_counts(identification)
    courses = {"x": follow_lines(identification.x, bands["x"]), "y": follow_lines(identification.y, bands["y"])}
    for name, other in (("x", "y"), ("y", "x")):
        axis_match = identification.x if name == "x" else identification.y
        pair = (courses[name], courses[other])
        lines[name], chosen[name] = _measure_axis(array, model, axis_match, pair, counts[name], block)
        if len(lines[name]) < MIN_LINES_MEASURED:
            raise ScienceInputError(
                f"{name} axis: only {len(lines[name])} of {chosen[name]} chosen grid lines could be measured "
                "(faded, covered or not printed)"
            )
    _report(progress, 0.8)
    return _finish(spec, identification, lines, chosen, families, progress)


def _finish(
    spec: CartesianGridSpec,
    identification: Identification,
    lines: dict[str, dict[int, RefinedLine]],
    chosen: dict[str, int],
    families: dict[str, FamilyAnalysis],
    progress: ProgressCallback | None,
) -> GridDetection:
    points = _control_points(identification, lines)
    calibration_spec = {
        "kind": "cartesian",
        "x_axis": spec.x_axis.calibration_axis(),
        "y_axis": spec.y_axis.calibration_axis(),
        "control_points": points,
        "transform": "auto",
    }
    report = build_calibration(calibration_spec).residual_report
    rms = report.rms_px if report.rms_px is not None else math.inf
    factors = _confidence(identification, lines, chosen, rms)
    confidence = float(np.prod(list(factors.values())))
    warnings = _warnings(identification, lines, chosen)
    if confidence < MIN_CONFIDENCE:
        weakest = min(factors, key=lambda key: factors[key])
        raise ScienceInputError(
            f"registration too uncertain (confidence {confidence:.2f}; weakest: {weakest} {factors[weakest]:.2f}, "
            f"residual RMS {rms:.2f} px); {' '.join(warnings)}".strip()
        )
    _report(progress, 1.0)
    return GridDetection(
        control_points=points,
        calibration_spec=calibration_spec,
        residual_report=report,
        confidence=confidence,
        confidence_factors=factors,
        rotation_deg=float(np.mean([f.angle_deg for f in families.values()])),
        orientation=identification.orientation,
        orientation_certain=identification.orientation_certain,
        lines_measured={a: (len(lines[a]), chosen[a]) for a in ("x", "y")},
        warnings=tuple(warnings),
    )


def _warnings(
    identification: Identification, lines: dict[str, dict[int, RefinedLine]], chosen: dict[str, int]
) -> list[str]:
    notes = []
    if identification.orientation != "upright":
        notes.append(f"the sheet is {identification.orientation}; registered as it lies")
    if not identification.orientation_certain:
        notes.append("the grid looks the same turned; orientation assumed upright: check a printed label")
    for axis in ("x", "y"):
        if len(lines[axis]) < chosen[axis]:
            notes.append(f"{axis} axis: {chosen[axis] - len(lines[axis])} chosen lines could not be measured")
    return notes
