"""Which printed line is which: line families matched to the spec's axes, the sheet's orientation, and
the predicted course of every line.

Each family (near-vertical and near-horizontal lines) is matched against both axes of the spec, in
both directions (:mod:`tracedesk.science.grid_template`). An orientation assigns an axis and a
direction to each family:

===========================  ============================  ==============================
orientation                  x axis lines                  y axis lines
===========================  ============================  ==============================
upright                      vertical, x grows rightwards  horizontal, y grows upwards
rotated 180                  vertical, x grows leftwards   horizontal, y grows downwards
rotated 90 clockwise         horizontal, x grows down      vertical, y grows rightwards
rotated 90 counterclockwise  horizontal, x grows up        vertical, y grows leftwards
===========================  ============================  ==============================

(for axes that grow the usual way; ``increases`` in the spec reverses one). The other four
assignments are mirror images. The orientation with the best summed match score wins; upright wins
ties, and a tie (a grid that looks the same turned) is reported as an orientation the grid cannot tell.

Lines that converge (keystone) or spread unevenly are then followed band by band along their length:
each band's profile is matched to the template starting from its neighbour's match, and each line's
course is a low-order polynomial through its band positions.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Final

import numpy as np
from numpy.polynomial import polynomial
from numpy.typing import NDArray

from tracedesk.science.errors import ScienceInputError
from tracedesk.science.grid_lines import (
    FamilyFrame,
    FamilyProfiles,
    MapPoints,
    estimate_family_angle,
    estimate_fan,
    family_profiles,
    fan_corrected_s,
    normalise_profile,
    spectral_periods,
)
from tracedesk.science.grid_spec import AxisGridSpec, CartesianGridSpec
from tracedesk.science.grid_template import (
    LineTemplate,
    MatchCheck,
    TemplateMatch,
    check_match,
    line_template,
    refine_match,
    search_template,
)

FloatArray = NDArray[np.float64]

N_BANDS: Final = 8
SPECTRAL_PEAKS: Final = 3
SPAN_WINDOW: Final = 0.03
MIN_SPAN_FRACTION: Final = 0.25
ORIENTATION_TIE: Final = 0.012
MIN_MATCH_SCORE: Final = 0.15
MIN_FOUND_FRACTION: Final = 0.6
MAX_EXTRA_FRACTION: Final = 0.25
MAX_BEYOND_RATIO: Final = 0.5
MIN_MAJOR_AGREEMENT: Final = 0.3
BAND_SPAN_REACH: Final = 0.012
RELIABLE_BAND_SCORE: Final = 0.4
FAMILIES: Final = ("vertical", "horizontal")

# orientation -> (family of the x lines, x grows along the profile, y grows along the profile), for axes
# that grow the usual way (x rightwards, y upwards on the upright sheet).
ORIENTATIONS: Final = {
    "upright": ("vertical", True, False),
    "rotated 180": ("vertical", False, True),
    "rotated 90 clockwise": ("horizontal", True, True),
    "rotated 90 counterclockwise": ("horizontal", False, False),
    "mirrored left-right": ("vertical", False, False),
    "mirrored top-bottom": ("vertical", True, True),
    "mirrored along the diagonal": ("horizontal", True, False),
    "mirrored along the other diagonal": ("horizontal", False, True),
}
PROPER_ORIENTATIONS: Final = ("upright", "rotated 180", "rotated 90 clockwise", "rotated 90 counterclockwise")


@dataclass(frozen=True)
class FamilyAnalysis:
    """One family of lines on the coarse map: its angle and profiles.

    Attributes
    ----------
    profiles : FamilyProfiles
        Whole and band profiles (raw sums).
    normalised : ndarray
        The whole profile normalised (lines as peaks in [0, 1]).
    """

    profiles: FamilyProfiles
    normalised: FloatArray

    @property
    def family(self) -> str:
        """``"vertical"`` or ``"horizontal"``."""
        return self.profiles.frame.family

    @property
    def angle_deg(self) -> float:
        """Angle of the lines (degrees, clockwise on the screen)."""
        return self.profiles.frame.angle_deg


def analyse_family(points: MapPoints, *, bin_px: float, image_shape: tuple[int, int]) -> FamilyAnalysis:
    """Angle and profiles of one family over the whole sheet (``image_shape`` = (H, W) px)."""
    angle = estimate_family_angle(points, bin_px=bin_px)
    frame = FamilyFrame(points.family, angle)
    height, width = image_shape
    corners_u, corners_v = np.array([0.0, width, 0.0, width]), np.array([0.0, 0.0, height, height])
    s, _ = frame.to_frame(corners_u, corners_v)
    whole_s = fan_corrected_s(points, frame, estimate_fan(points, frame, bin_px=bin_px))
    profiles = family_profiles(
        points, frame, bin_px=bin_px, s_range=(float(s.min()), float(s.max())), n_bands=N_BANDS, whole_s=whole_s
    )
    return FamilyAnalysis(profiles, normalise_profile(profiles.whole))


def _axis_reversed(axis: AxisGridSpec, *, is_x: bool) -> bool:
    """Whether the axis' values grow against the usual direction (leftwards x, downwards y)."""
    return axis.increases == ("left" if is_x else "down")


def _profile_flipped(orientation: str, *, is_x: bool, reversed_on_sheet: bool) -> bool:
    """Whether frame[0] lies at the high end of the family's profile for this orientation."""
    grows = ORIENTATIONS[orientation][1 if is_x else 2]
    return grows == reversed_on_sheet


@dataclass(frozen=True)
class AxisMatch:
    """One spec axis matched to one family of lines."""

    axis_name: str
    axis: AxisGridSpec
    template: LineTemplate
    family: FamilyAnalysis
    match: TemplateMatch


@dataclass(frozen=True)
class Identification:
    """The chosen orientation and both axes' matches.

    Attributes
    ----------
    orientation : str
        Key of :data:`ORIENTATIONS` (never a mirrored one: those are refused).
    orientation_certain : bool
        False when another turn of the sheet matched as well (a grid that looks the same turned).
    x, y : AxisMatch
        The matches of the spec's x and y axes.
    """

    orientation: str
    orientation_certain: bool
    x: AxisMatch
    y: AxisMatch


def _span_windows(family: FamilyAnalysis, template: LineTemplate) -> list[tuple[float, float]] | None:
    """Frame lengths (bins) that fit the profile's repeat distances, for equally spaced lines; else None.

    A repeat distance P is the minor spacing (span = P (n - 1)) or, when minor lines are faint, the
    major spacing (span = P (n - 1) / k for majors every k lines).
    """
    gaps = np.diff(template.fraction)
    if gaps.size < 2 or float(np.ptp(gaps)) > 1e-6 * float(gaps.mean()):
        return None
    majors = np.flatnonzero(template.major)
    every = {1} | ({int(np.median(np.diff(majors)))} if majors.size >= 2 else set())
    windows = []
    for period in spectral_periods(family.normalised, count=SPECTRAL_PEAKS):
        for lines_per_period in every:
            span = period * gaps.size / lines_per_period
            windows.append(((1.0 - SPAN_WINDOW) * span, (1.0 + SPAN_WINDOW) * span))
    return windows or None


def _best_match(family: FamilyAnalysis, template: LineTemplate, flipped: bool) -> TemplateMatch | None:
    """Best placement: within the spans the profile's periodicity allows, else (nothing good there) any span."""
    size = family.normalised.size
    span_range = (MIN_SPAN_FRACTION * size, float(size))
    windows = _span_windows(family, template)
    found = search_template(family.normalised, template, flipped=flipped, span_range=span_range, span_windows=windows)
    if windows and (not found or found[0].score < MIN_MATCH_SCORE):
        found = search_template(family.normalised, template, flipped=flipped, span_range=span_range)
    return found[0] if found else None


def identify_axes(spec: CartesianGridSpec, families: dict[str, FamilyAnalysis]) -> Identification:
    """Match both axes to both families in both directions and choose the orientation (module docstring).

    Raises
    ------
    ScienceInputError
        When the best match is a mirror image of the chart, or nothing matches.
    """
    templates = {"x": line_template(spec.x_axis), "y": line_template(spec.y_axis)}
    cache: dict[tuple[str, str, bool], TemplateMatch | None] = {}
    totals: dict[str, tuple[float, AxisMatch, AxisMatch] | None] = {}
    for orientation, (x_family, _, _) in ORIENTATIONS.items():
        y_family = "horizontal" if x_family == "vertical" else "vertical"
        pair = []
        for name, family_name, axis in (("x", x_family, spec.x_axis), ("y", y_family, spec.y_axis)):
            is_x = name == "x"
            flipped = _profile_flipped(orientation, is_x=is_x, reversed_on_sheet=_axis_reversed(axis, is_x=is_x))
            key = (name, family_name, flipped)
            if key not in cache:
                cache[key] = _best_match(families[family_name], templates[name], flipped)
            match = cache[key]
            if match is not None:
                pair.append(AxisMatch(name, axis, templates[name], families[family_name], match))
        totals[orientation] = (pair[0].match.score + pair[1].match.score, pair[0], pair[1]) if len(pair) == 2 else None
    return _choose_orientation(totals)


def _choose_orientation(totals: dict[str, tuple[float, AxisMatch, AxisMatch] | None]) -> Identification:
    scored = {name: value for name, value in totals.items() if value is not None}
    if not scored:
        raise ScienceInputError("no grid lines that could be the spec's were found on the sheet")
    best_name = max(scored, key=lambda name: scored[name][0])
    best = scored[best_name][0]
    proper = {name: scored[name][0] for name in PROPER_ORIENTATIONS if name in scored}
    best_proper = max(proper.values()) if proper else -math.inf
    if best_name not in PROPER_ORIENTATIONS and best > best_proper + ORIENTATION_TIE:
        raise ScienceInputError(
            f"the sheet's grid matches the spec only as a mirror image ({best_name}): "
            "was it scanned from the back, or is the spec's axis direction wrong?"
        )
    chosen = max(proper, key=lambda name: proper[name])
    if proper.get("upright", -math.inf) >= proper[chosen] - ORIENTATION_TIE:
        chosen = "upright"
    rivals = [score for name, score in proper.items() if name != chosen]
    certain = not rivals or max(rivals) < proper[chosen] - ORIENTATION_TIE
    _, x, y = scored[chosen]
    return Identification(chosen, certain, x, y)


def _period_note(axis_match: AxisMatch) -> str:
    """Plain words on how the sheet's lines repeat, compared with the spec's spacing."""
    periods = spectral_periods(axis_match.family.normalised, count=1)
    fractions = axis_match.template.fraction
    spec_px = float(np.min(np.diff(fractions))) * axis_match.match.span * axis_match.family.profiles.bin_px
    if not periods:
        return f"no repeating lines found; the spec's lines would be {spec_px:.1f} px apart"
    seen = periods[0] * axis_match.family.profiles.bin_px
    return f"the sheet's lines repeat every {seen:.1f} px, the spec's lines would be {spec_px:.1f} px apart"


def _band_check(axis_match: AxisMatch, bands: list[TemplateMatch | None]) -> MatchCheck:
    """Median evidence over the bands that carry the lines (the whole profile when fewer than two do).

    Bands see converging (keystone) lines sharply where the whole-sheet profile smears them.
    """
    profiles = axis_match.family.profiles
    checks = [
        check_match(normalise_profile(profiles.bands[index]), axis_match.template, match)
        for index, match in enumerate(bands)
        if match is not None
    ]
    if len(checks) < 2:
        return check_match(axis_match.family.normalised, axis_match.template, axis_match.match)
    return MatchCheck(
        found_fraction=float(np.median([c.found_fraction for c in checks])),
        extra_fraction=float(np.median([c.extra_fraction for c in checks])),
        beyond_ratio=float(np.median([c.beyond_ratio for c in checks])),
        major_agreement=float(np.median([c.major_agreement for c in checks])),
    )


def check_identification(
    identification: Identification, band_matches: dict[str, list[TemplateMatch | None]]
) -> dict[str, MatchCheck]:
    """Check both axes' matches; refuse a sheet that is not the spec's chart.

    Parameters
    ----------
    identification : Identification
        The chosen orientation and matches.
    band_matches : dict
        Per axis name, the band-by-band matches of :func:`match_bands`.

    Raises
    ------
    ScienceInputError
        Weak match, too few of the spec's lines found, lines where the spec has none, lines going on
        past the spec's frame, or heavy lines that the spec does not call major; the message names the
        axis and what was seen.
    """
    checks = {}
    for axis_match in (identification.x, identification.y):
        if axis_match.match.score < MIN_MATCH_SCORE:
            raise ScienceInputError(
                f"{axis_match.axis_name} axis: no printed grid matching the spec ({_period_note(axis_match)})"
            )
        check = _band_check(axis_match, band_matches[axis_match.axis_name])
        _refuse_unless_spec_lines(axis_match, check)
        checks[axis_match.axis_name] = check
    return checks


def _refuse_unless_spec_lines(axis_match: AxisMatch, check: MatchCheck) -> None:
    """Raise with the reason when the evidence says the printed lines are not the spec's."""
    name = f"{axis_match.axis_name} axis"
    n_lines = axis_match.template.fraction.size
    if check.found_fraction < MIN_FOUND_FRACTION:
        raise ScienceInputError(
            f"{name}: only {check.found_fraction:.0%} of the spec's {n_lines} lines were found "
            f"({_period_note(axis_match)}); not this chart, or too faint"
        )
    if check.extra_fraction > MAX_EXTRA_FRACTION:
        raise ScienceInputError(
            f"{name}: {check.extra_fraction:.0%} of the printed lines are not where the spec puts lines "
            f"({_period_note(axis_match)}); is this the spec's chart?"
        )
    if check.beyond_ratio > MAX_BEYOND_RATIO:
        raise ScienceInputError(
            f"{name}: the printed grid goes on past the spec's frame ({n_lines} lines); "
            "the sheet has more lines than the spec, or the frame values are wrong"
        )
    if check.major_agreement < MIN_MAJOR_AGREEMENT:
        raise ScienceInputError(
            f"{name}: the heavier printed lines are not the spec's major lines (correlation "
            f"{check.major_agreement:.2f}); is this the spec's chart?"
        )


# --- Following each line band by band -------------------------------------------------------------------


def match_bands(axis_match: AxisMatch) -> list[TemplateMatch | None]:
    """The template matched in each band (None where too weak), from the middle band outwards."""
    profiles = axis_match.family.profiles
    template, start = axis_match.template, axis_match.match
    spacing = float(np.min(np.diff(template.fraction))) * start.span if template.fraction.size > 1 else 4.0
    count = profiles.bands.shape[0]
    results: list[TemplateMatch | None] = [None] * count
    middle = count // 2
    for order in (range(middle, count), range(middle - 1, -1, -1)):
        previous = start
        for band in order:
            normalised = normalise_profile(profiles.bands[band])
            coarse = refine_match(
                normalised,
                template,
                previous,
                span_bins=max(1.0, BAND_SPAN_REACH * previous.span),
                offset_bins=max(1.0, 0.45 * spacing),
                step_bins=1.0,
            )
            fine = refine_match(normalised, template, coarse, span_bins=1.0, offset_bins=1.0)
            if fine.score >= max(RELIABLE_BAND_SCORE * start.score, 0.5 * MIN_MATCH_SCORE):
                results[band] = fine
                previous = fine
    return results


@dataclass(frozen=True)
class LineCourse:
    """Predicted course of every line of one axis: ``cross = p_k(along)`` (px).

    Attributes
    ----------
    family : str
        ``"vertical"`` (cross = u, along = v) or ``"horizontal"``.
    coefficients : ndarray, shape (n_lines, 3)
        Polynomial coefficients (lowest first, degree <= 2) of each line.
    spacing_px : ndarray, shape (n_lines,)
        Distance (px) to the nearest neighbouring line.
    reliable_bands : int
        Bands whose own match was good enough to follow the lines.
    """

    family: str
    coefficients: FloatArray
    spacing_px: FloatArray
    reliable_bands: int

    def cross_at(self, line: int, along: FloatArray) -> FloatArray:
        """Predicted cross coordinate (px) of line ``line`` at along coordinates (px)."""
        return np.asarray(polynomial.polyval(np.asarray(along, dtype=np.float64), self.coefficients[line]))


def _cross_along(family: str, u: FloatArray, v: FloatArray) -> tuple[FloatArray, FloatArray]:
    return (u, v) if family == "vertical" else (v, u)


def follow_lines(axis_match: AxisMatch, matches: list[TemplateMatch | None]) -> LineCourse:
    """Predicted course of each of the axis' lines from the band-by-band matches (:func:`match_bands`)."""
    profiles = axis_match.family.profiles
    frame = profiles.frame
    fractions = axis_match.template.fraction
    usable = [(t, m) for t, m in zip(profiles.band_t, matches, strict=True) if m is not None]
    if len(usable) < 2:
        # Too few bands carry the lines: straight lines at the family's angle from the whole-sheet match.
        s = profiles.bin_to_s(axis_match.match.bins_of(fractions))
        t_ends = np.array([profiles.band_t[0], profiles.band_t[-1]])
        usable_s = np.stack([s, s], axis=1)
    else:
        t_ends = np.array([t for t, _ in usable])
        usable_s = np.stack([profiles.bin_to_s(m.bins_of(fractions)) for _, m in usable], axis=1)
    degree = 2 if t_ends.size >= 4 else 1
    coefficients = np.zeros((fractions.size, 3))
    for line in range(fractions.size):
        u, v = frame.to_pixels(usable_s[line], t_ends)
        cross, along = _cross_along(frame.family, u, v)
        coefficients[line, : degree + 1] = polynomial.polyfit(along, cross, degree)
    lines_px = profiles.bin_to_s(axis_match.match.bins_of(fractions))
    return LineCourse(frame.family, coefficients, _neighbour_gap(lines_px), len(usable))


def _neighbour_gap(lines: FloatArray) -> FloatArray:
    order = np.argsort(lines)
    gaps = np.diff(lines[order])
    if gaps.size == 0:
        return np.full(lines.shape, np.inf)
    nearest = np.minimum(np.append(gaps, gaps[-1]), np.insert(gaps, 0, gaps[0]))
    out = np.empty_like(nearest)
    out[order] = nearest
    return np.asarray(np.abs(out), dtype=np.float64)
