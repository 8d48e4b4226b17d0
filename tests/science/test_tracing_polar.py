"""End-to-end checks of pen tracing on circular charts (polar unwrap, traced over angle).

Truth: a pen drawn by matplotlib (Agg) as r(theta) about a known centre, in sheet pixels (see
tests/science/chart_render.py); angles are clockwise on the screen from +u, as in ARCHITECTURE.md.
Measured: clean 0.07 px RMS (max 0.63 px), JPEG quality 75 0.07 px RMS (max 0.62 px).
"""

import numpy as np
import pytest
from numpy.testing import assert_allclose

from tests.science.chart_render import CircleGrid, PenStroke, distance_to_polyline, jpeg_roundtrip, render_sheet
from tracedesk.science.errors import ScienceInputError
from tracedesk.science.trace_regions import AnnulusRegion
from tracedesk.science.tracing import trace_pen

CENTRE = (400.0, 400.0)
RING = AnnulusRegion(CENTRE, 80.0, 360.0)
PEN_COLOUR = "#c81e3c"
CLEAN_RMS_PX = 0.3
HARD_RMS_PX = 0.2


def radius_of_angle(angle_deg):
    return 220.0 + 70.0 * np.sin(np.radians(2.0 * angle_deg)) + 30.0 * np.cos(np.radians(5.0 * angle_deg))


@pytest.fixture(scope="module")
def pen():
    return PenStroke.from_polar(
        radius_of_angle, centre_uv=CENTRE, angle_range_deg=(10.0, 330.0), colour=PEN_COLOUR, width_px=2.5
    )


@pytest.fixture(scope="module")
def sheet(pen):
    grid = CircleGrid(
        centre_uv=CENTRE,
        radii_px=np.arange(80.0, 361.0, 28.0),
        angles_deg=np.arange(0.0, 360.0, 15.0),
        radius_range_px=(80.0, 360.0),
    )
    return render_sheet(width_px=800, height_px=800, strokes=[pen], grid=grid)


def angles_of(vertices):
    return np.degrees(np.arctan2(vertices[:, 1] - CENTRE[1], vertices[:, 0] - CENTRE[0])) % 360.0


def test_circular_chart_is_traced_within_target(sheet, pen):
    result = trace_pen(sheet, pen_colour=PEN_COLOUR, region=RING)
    angle = angles_of(result.vertices)
    inside = (angle > 11.0) & (angle < 329.0)  # away from the butt-capped ends
    distance = distance_to_polyline(result.vertices[inside], pen.points_uv)
    assert np.sqrt(np.mean(distance**2)) < CLEAN_RMS_PX
    assert distance.max() < 1.0
    # Vertices run clockwise (angle increasing on screen) and are returned in sheet pixels.
    assert np.all(np.diff(angle) > 0)
    assert result.gap_unit == "angle_deg"
    assert len(result.gap_spans) == 2
    assert_allclose(result.gap_spans[0], (0.0, 10.0), atol=0.2)
    assert_allclose(result.gap_spans[1], (330.0, 360.0), atol=0.2)
    assert result.coverage == pytest.approx(320.0 / 360.0, abs=0.005)
    assert result.line_width_px == pytest.approx(2.5, abs=0.3)


def test_circular_chart_after_jpeg(sheet, pen):
    result = trace_pen(jpeg_roundtrip(sheet, quality=75), pen_colour=PEN_COLOUR, region=RING)
    angle = angles_of(result.vertices)
    inside = (angle > 11.0) & (angle < 329.0)
    distance = distance_to_polyline(result.vertices[inside], pen.points_uv)
    assert np.sqrt(np.mean(distance**2)) < HARD_RMS_PX
    assert distance.max() < 1.0
    assert inside.sum() > 0.95 * 2 * np.pi * 360.0 * (318.0 / 360.0)


def test_start_and_end_points_set_the_arc(sheet, pen):
    """From the pen's point at 100 degrees clockwise to its point at 40 degrees: a 300-degree arc that
    wraps through 330 (the pen's end) and 10 (its start), so one gap of 40 degrees in the middle."""

    def point_at(angle_deg):
        theta = np.radians(angle_deg)
        radius = radius_of_angle(angle_deg)
        return (CENTRE[0] + radius * np.cos(theta), CENTRE[1] + radius * np.sin(theta))

    result = trace_pen(sheet, pen_colour=PEN_COLOUR, region=RING, start_uv=point_at(100.0), end_uv=point_at(40.0))
    assert len(result.gap_spans) == 1
    assert_allclose(result.gap_spans[0], (330.0, 370.0), atol=0.2)  # degrees may run past 360
    angle = angles_of(result.vertices)
    assert angle[0] == pytest.approx(100.0, abs=0.2)
    assert angle[-1] == pytest.approx(40.0, abs=0.2)
    distance = distance_to_polyline(result.vertices, pen.points_uv)
    assert np.sqrt(np.mean(distance**2)) < CLEAN_RMS_PX


@pytest.mark.parametrize(
    ("region", "message"),
    [
        (AnnulusRegion(CENTRE, 200.0, 100.0), "radius_min_px < radius_max_px"),
        (AnnulusRegion(CENTRE, 100.0, 100.5), "less than a pixel"),
        (AnnulusRegion((900.0, 400.0), 80.0, 360.0), "outside the sheet"),
        (AnnulusRegion(CENTRE, 80.0, 360.0, sweep_deg=0.0), "sweep"),
    ],
)
def test_bad_annuli_are_refused(sheet, region, message):
    with pytest.raises(ScienceInputError, match=message):
        trace_pen(sheet, pen_colour=PEN_COLOUR, region=region)


def test_pen_outside_the_ring_is_not_found(sheet):
    """The pen lies between radii 120 and 320: a ring inside radius 100 holds none of it."""
    with pytest.raises(ScienceInputError, match="not found"):
        trace_pen(sheet, pen_colour=PEN_COLOUR, region=AnnulusRegion(CENTRE, 20.0, 100.0))
