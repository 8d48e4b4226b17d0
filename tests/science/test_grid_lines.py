"""Building blocks of grid detection: colour coverage, line angles, periodicity, template matching and
sub-pixel line measurement.

Truth is constructed: points and profiles synthesised from known angles, spacings and placements;
lines rendered by matplotlib Agg at exactly known positions (tests/science/chart_render.py, ARCHITECTURE.md
pixel convention). Mixing of paper and ink colours is linear in sRGB code values in the Agg renderer,
which is what the coverage measure assumes.
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from tests.science.chart_render import PenStroke, render_sheet, rgb_of
from tests.science.grid_charts import GRID_RED
from tracedesk.science.errors import ScienceInputError
from tracedesk.science.grid_likelihood import build_grid_colour_model, grid_colour_model_for, grid_coverage
from tracedesk.science.grid_lines import FamilyFrame, MapPoints, estimate_family_angle, spectral_periods
from tracedesk.science.grid_refinement import PredictedLine, RefinedLine, intersect_lines, refine_line
from tracedesk.science.grid_spec import AxisGridSpec
from tracedesk.science.grid_template import TemplateMatch, check_match, line_template, search_template

PAPER = np.array([251.0, 250.0, 245.0])
GRID = np.array(rgb_of(GRID_RED), dtype=float)


def test_coverage_is_linear_in_the_mixture_and_blind_to_pens():
    model = build_grid_colour_model(
        paper_rgb=PAPER, grid_rgb=GRID, tolerance=30.0, pen_rgbs=(np.array([31, 60, 200.0]),)
    )
    share = np.linspace(0.0, 1.0, 11)
    mixed = np.rint(PAPER + share[:, None] * (GRID - PAPER)).astype(np.uint8)
    # Rounding to 8-bit code values moves a mixture by at most half a code value per channel.
    assert_allclose(grid_coverage(mixed, model), share, rtol=0, atol=0.01)
    # Blue (an expected pen), black, and a red pen of the grid's hue but far more saturated.
    pens = np.array([[31, 60, 200], [20, 20, 20], [200, 30, 60]], dtype=np.uint8)
    assert_allclose(grid_coverage(pens, model), 0.0, atol=0)


def test_grid_colour_too_close_to_paper_is_refused():
    with pytest.raises(ScienceInputError, match="grid_colour: the grid colour differs from the paper"):
        build_grid_colour_model(paper_rgb=PAPER, grid_rgb=PAPER - 2.0, tolerance=30.0)


def test_scanned_grid_colour_is_adapted():
    """A grid printed darker than the spec says is still found: the model moves to the scanned ink."""
    printed = "#c8705a"
    lines = [PenStroke(np.array([[u, 0.0], [u, 200.0]]), printed, 3.0) for u in np.arange(10.5, 300, 12)]
    sheet = render_sheet(width_px=300, height_px=200, strokes=lines)
    model = grid_colour_model_for(sheet, grid_colour=GRID_RED, tolerance=30.0)
    assert_allclose(model.grid_rgb, rgb_of(printed), rtol=0, atol=6.0)


@pytest.mark.parametrize("angle", [-3.2, 0.0, 1.3])
def test_family_angle_from_profile_sharpness(angle):
    rng = np.random.default_rng(1)
    frame = FamilyFrame("vertical", angle)
    s = rng.choice(np.arange(100.0, 1100.0, 20.0), 20_000)
    t = rng.uniform(0.0, 800.0, s.size)
    u, v = frame.to_pixels(s + rng.normal(0.0, 0.3, s.size), t)
    estimate = estimate_family_angle(MapPoints("vertical", u, v, np.ones(s.size)), bin_px=1.0)
    assert_allclose(estimate, angle, rtol=0, atol=0.02)


def test_horizontal_family_frame_round_trip():
    frame = FamilyFrame("horizontal", 2.5)
    u, v = np.array([10.0, 400.0]), np.array([30.0, 250.0])
    s, t = frame.to_frame(u, v)
    back_u, back_v = frame.to_pixels(s, t)
    assert_allclose(np.column_stack([back_u, back_v]), np.column_stack([u, v]), rtol=0, atol=1e-12)


def test_spectral_period_of_a_comb():
    profile = np.zeros(1000)
    profile[np.round(np.arange(5.0, 995.0, 7.3)).astype(int)] = 1.0
    periods = spectral_periods(profile, count=1)
    assert_allclose(periods[0], 7.3, rtol=0, atol=0.02)


AXIS = AxisGridSpec(scale="linear", frame=(0.0, 42.0), minor_step=1.0, major_step=5.0)


def _profile_of(match: TemplateMatch, *, size: int, extra: np.ndarray | None = None) -> np.ndarray:
    """Peaks (Gaussian, sigma 0.8 bins) at the template's lines, majors twice as high."""
    template = line_template(AXIS)
    x = np.arange(size, dtype=float)
    centres = match.bins_of(template.fraction)
    heights = np.where(template.major, 1.0, 0.5)
    if extra is not None:
        centres, heights = np.concatenate([centres, extra]), np.concatenate([heights, np.full(extra.size, 0.5)])
    return np.clip(np.exp(-0.5 * ((x[:, None] - centres[None, :]) / 0.8) ** 2) @ heights, 0.0, 1.0)


@pytest.mark.parametrize("flipped", [False, True])
def test_template_search_recovers_span_offset_and_direction(flipped):
    truth = TemplateMatch(span=613.4, offset=141.7, flipped=flipped, score=0.0)
    profile = _profile_of(truth, size=900)
    template = line_template(AXIS)
    best = search_template(profile, template, flipped=flipped, span_range=(200.0, 900.0))[0]
    assert_allclose([best.span, best.offset], [truth.span, truth.offset], rtol=0, atol=0.35)
    reverse = search_template(profile, template, flipped=not flipped, span_range=(200.0, 900.0))[0]
    # Read backwards, the majors (every 5th line from 0) cannot all land on the heavier lines.
    assert reverse.score < best.score - 0.02
    check = check_match(profile, template, best)
    assert check.found_fraction == 1.0
    assert check.extra_fraction == 0.0
    assert check.beyond_ratio < 0.1
    assert check.major_agreement > 0.9


def test_template_check_sees_lines_past_the_frame():
    truth = TemplateMatch(span=613.4, offset=141.7, flipped=False, score=0.0)
    spacing = truth.span / 42.0
    beyond = truth.offset + truth.span + spacing * np.arange(1, 6)
    profile = _profile_of(truth, size=900, extra=beyond)
    template = line_template(AXIS)
    check = check_match(profile, template, TemplateMatch(truth.span, truth.offset, False, 0.6))
    assert check.beyond_ratio > 0.5


def _line_sheet(u_top: float, u_bottom: float, width_px: float) -> np.ndarray:
    line = PenStroke(np.array([[u_top, -5.0], [u_bottom, 205.0]]), GRID_RED, width_px)
    return render_sheet(width_px=120, height_px=200, strokes=[line])


@pytest.mark.parametrize(("u_top", "u_bottom", "width_px"), [(60.0, 60.0, 1.0), (50.3, 61.2, 2.0), (70.77, 66.1, 1.5)])
def test_refined_line_matches_the_rendered_line(u_top, u_bottom, width_px):
    sheet = _line_sheet(u_top, u_bottom, width_px)
    model = grid_colour_model_for(sheet, grid_colour=GRID_RED, tolerance=30.0)
    slope = (u_bottom - u_top) / 210.0
    guess = PredictedLine(
        family="vertical",
        coefficients=np.array([u_top + 5.0 * slope + 1.7, slope]),
        station_along=np.arange(10.0, 195.0, 12.0),
        station_lines=4,
        search_px=6.0,
        centroid_px=3.0,
    )
    refined = refine_line(sheet, model, guess)
    assert refined is not None
    v = np.array([20.0, 100.0, 180.0])
    truth = u_top + (v + 5.0) * slope
    assert_allclose(refined.cross_at(v), truth, rtol=0, atol=0.05)


def test_refine_line_gives_up_on_a_missing_line():
    sheet = render_sheet(width_px=120, height_px=200, strokes=[])
    model = build_grid_colour_model(paper_rgb=PAPER, grid_rgb=GRID, tolerance=30.0)
    guess = PredictedLine("vertical", np.array([60.0, 0.0]), np.arange(10.0, 195.0, 12.0), 4, 6.0, 3.0)
    assert refine_line(sheet, model, guess) is None


def test_intersection_of_two_lines():
    vertical = RefinedLine("vertical", np.array([100.0, 0.02, 1e-5]), (0.0, 500.0), 10, 10, 0.0)
    horizontal = RefinedLine("horizontal", np.array([300.0, -0.03]), (0.0, 500.0), 10, 10, 0.0)
    u, v = intersect_lines(vertical, horizontal)
    assert_allclose(u, 100.0 + 0.02 * v + 1e-5 * v * v, rtol=0, atol=1e-9)
    assert_allclose(v, 300.0 - 0.03 * u, rtol=0, atol=1e-9)
