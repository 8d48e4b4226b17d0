"""Time zero of circular charts from the printed time lines and the spec's reference angle.

Radial charts are drawn by matplotlib Agg (tests/science/chart_render.py ``CircleGrid``): rings about a known
centre, time lines at known angles (the chart turned by a known angle), heavier major lines drawn over every
sixth one, a pen crossing everything. Arc-shaped time lines come from the demo renderer
(server/tracedesk/demo/circular_chart.py), whose exact calibration is the truth there.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose

from tests.science.chart_render import CircleGrid, PenStroke, render_sheet
from tests.science.test_circle_detection import CENTRE, GREEN, INNER_PX, OUTER_PX, RED, RING_RADII, SPEC_JSON
from tracedesk.demo.circular_chart import pen_arc_angle
from tracedesk.demo.scenarios import LEVEL_DESIGN, _level_sheet
from tracedesk.science.calibration import build_calibration
from tracedesk.science.circular_registration import register_circular_chart
from tracedesk.science.errors import ScienceInputError
from tracedesk.science.grid_likelihood import grid_colour_model_for
from tracedesk.science.grid_spec import CircularChartSpec, grid_spec_from_dict
from tracedesk.science.time_lines import TimeZero, find_time_zero

W, H = 1000, 800
HOURLY = {**SPEC_JSON, "time_zero_angle_deg": -90.0, "time_direction": "clockwise"}


def _spec(**changes: object) -> CircularChartSpec:
    spec = grid_spec_from_dict({**HOURLY, **changes})
    assert isinstance(spec, CircularChartSpec)
    return spec


def _radial_sheet(turn_deg: float, *, majors: bool = False) -> np.ndarray:
    """Hourly radial lines (15 degrees apart) with time zero at 12 o'clock, the paper turned by ``turn_deg``."""
    angles = -90.0 + turn_deg + 15.0 * np.arange(24)
    grid = CircleGrid(centre_uv=CENTRE, radii_px=RING_RADII, angles_deg=angles, radius_range_px=(INNER_PX, OUTER_PX))
    strokes = []
    if majors:  # every 6 h drawn three times as wide
        for angle in np.radians(angles[::6]):
            ends = np.array([INNER_PX, OUTER_PX])
            points = np.column_stack([CENTRE[0] + ends * np.cos(angle), CENTRE[1] + ends * np.sin(angle)])
            strokes.append(PenStroke(points, GREEN, 3.0))
    pen = PenStroke.from_polar(lambda a: 200 + 60 * np.sin(np.radians(a) * 3), centre_uv=CENTRE, colour=RED)
    return render_sheet(width_px=W, height_px=H, strokes=[*strokes, pen], grid=grid)


def _find(image: np.ndarray, spec: CircularChartSpec) -> TimeZero:
    model = grid_colour_model_for(image, grid_colour=spec.grid_colour, tolerance=30.0, pen_colours=spec.pen_colours)
    return find_time_zero(image, spec, model, centre=CENTRE, radius_min_px=INNER_PX, radius_max_px=OUTER_PX)


def test_radial_time_zero_of_a_turned_chart() -> None:
    zero = _find(_radial_sheet(2.3), _spec())
    # The 0 h line was drawn at -90 + 2.3 degrees (the render's own angles).
    assert_allclose(zero.angle_deg, 272.3, rtol=0, atol=0.03)
    assert_allclose(zero.offset_deg, 2.3, rtol=0, atol=0.03)
    assert_allclose(
        zero.pixel,
        [CENTRE[0] + OUTER_PX * math.cos(math.radians(272.3)), CENTRE[1] - OUTER_PX * math.sin(math.radians(87.7))],
        rtol=0,
        atol=0.2,
    )
    assert zero.lines_found == (24, 24) and zero.pen_arm is None and zero.line_rms_px < 0.2
    # Clockwise time: the line 15 degrees clockwise of time zero is 1 h.
    by_hour = dict(zip(zero.line_hours, zero.line_angles_deg, strict=True))
    assert_allclose((by_hour[1.0] - by_hour[0.0]) % 360.0, 15.0, rtol=0, atol=0.05)


def test_counterclockwise_time_numbers_the_lines_the_other_way() -> None:
    zero = _find(_radial_sheet(2.3), _spec(time_direction="counterclockwise"))
    by_hour = dict(zip(zero.line_hours, zero.line_angles_deg, strict=True))
    assert_allclose((by_hour[0.0] - by_hour[1.0]) % 360.0, 15.0, rtol=0, atol=0.05)


def test_major_lines_tell_time_zero_beyond_a_minor_spacing() -> None:
    """Turned by 22 degrees: the nearest hourly line is 7 degrees off (over a third of 15), the 6 h line 22 degrees
    (under a third of 90)."""
    image = _radial_sheet(22.0, majors=True)
    with pytest.raises(ScienceInputError, match="unsure which printed line is time zero"):
        _find(image, _spec())
    zero = _find(image, _spec(time_major_hours=6))
    assert_allclose(zero.offset_deg, 22.0, rtol=0, atol=0.05)
    assert zero.major_spacing_deg == pytest.approx(90.0)


@pytest.mark.parametrize(
    ("turn_deg", "majors", "changes", "message"),
    [
        (40.0, True, {"time_major_hours": 6}, "lies 40.0 degrees from the spec's time-zero angle"),
        (0.0, False, {"time_major_hours": 6}, "major time lines cannot be told from the others"),
        (0.0, False, {"time_line_hours": 0.7}, "time_line_hours: must divide 24 h into a whole number"),
        (0.0, False, {"time_direction": None}, "does not give time_direction"),
    ],
)
def test_refusals_say_why(turn_deg: float, majors: bool, changes: dict[str, object], message: str) -> None:
    fields = {key: value for key, value in {**HOURLY, **changes}.items() if value is not None}
    spec = grid_spec_from_dict(fields)
    assert isinstance(spec, CircularChartSpec)
    with pytest.raises(ScienceInputError, match=message):
        _find(_radial_sheet(turn_deg, majors=majors), spec)


def test_rings_without_time_lines_are_refused() -> None:
    grid = CircleGrid(centre_uv=CENTRE, radii_px=RING_RADII, angles_deg=[], radius_range_px=(INNER_PX, OUTER_PX))
    with pytest.raises(ScienceInputError, match="time lines"):
        _find(render_sheet(width_px=W, height_px=H, strokes=[], grid=grid), _spec())


def test_pen_arm_chart_registers_against_the_renderers_calibration() -> None:
    """The demo's weekly chart at 100 dpi: arcs of a 140 mm arm pivoted 140 mm from the centre, paper turned -1.1
    degrees. Every check point of the renderer's exact calibration maps to within 0.01 h and 1 mm."""
    design = LEVEL_DESIGN
    sheet = _level_sheet(1).render(100.0)
    zero_deg = design.pivot_angle_deg + math.degrees(
        float(pen_arc_angle(design.radius_max_mm, centre_to_pivot=design.pivot_distance_mm, arm_length=design.arm_mm))
    )
    spec = grid_spec_from_dict(
        {
            "kind": "circular",
            "value_axis": {"scale": "linear", "frame": [0, 12], "minor_step": 0.2, "major_step": 1},
            "ring_radii_mm": [design.radius_min_mm, design.radius_max_mm],
            "period_hours": 168,
            "time_line_hours": 2,
            "time_major_hours": 24,
            "time_lines": "arcs",
            "arc_radius_mm": design.arm_mm,
            "time_zero_angle_deg": zero_deg,
            "time_direction": design.time_direction,
            "grid_colour": design.grid_colour,
            "pen_colours": [design.pen_colour],
        }
    )
    assert isinstance(spec, CircularChartSpec)
    registration = register_circular_chart(sheet.image, spec)
    truth = sheet.truth.calibration
    assert_allclose(registration.time_zero.pixel, truth["time_zero_pixel"], rtol=0, atol=0.1)
    assert_allclose(registration.time_zero.pen_arm["pivot_pixel"], truth["pen_arc"]["pivot_pixel"], rtol=0, atol=0.5)
    assert_allclose(registration.time_zero.offset_deg, -1.1, rtol=0, atol=0.02)
    pixels = np.array([point["pixel"] for point in truth["check_points"]])
    expected = np.array([point["value"] for point in truth["check_points"]], dtype=float)
    found = build_calibration(registration.calibration_spec).pixels_to_values(pixels)
    assert_allclose(found[:, 0], expected[:, 0], rtol=0, atol=0.01)
    assert_allclose(found[:, 1], expected[:, 1], rtol=0, atol=0.001)
    shape = registration.to_dict()
    assert shape["residuals"]["rms_px"] < 0.2 and len(shape["control_points"]) == 48
    assert shape["confidence"] > 0.9


def test_spec_time_zero_fields_round_trip_and_are_checked() -> None:
    fields = {**HOURLY, "time_lines": "arcs", "arc_radius_mm": 140, "pivot_distance_mm": 150, "time_major_hours": 6}
    spec = _spec(**fields)
    assert grid_spec_from_dict(spec.to_dict()) == spec
    assert spec.pivot_distance() == 150.0
    assert _spec(time_lines="arcs", arc_radius_mm=140).pivot_distance() == 140.0  # arcs through the centre
    with pytest.raises(ScienceInputError, match="time_direction: expected one of clockwise, counterclockwise"):
        _spec(time_direction="sunwise")
    with pytest.raises(ScienceInputError, match="time_zero_angle_deg: expected a finite number"):
        _spec(time_zero_angle_deg="north")
