"""Circular charts: centre and value rings found from the printed ring colour, against rendered truth.

Charts are drawn by matplotlib Agg (tests/science/chart_render.py ``CircleGrid``): rings of known radii
about a known centre in the ARCHITECTURE.md pixel convention, radial time lines, a pen crossing the
rings. Measured on these cases (see the task report): centre within 0.01 px, ring radii within 0.1 px.
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from tests.science.chart_render import CircleGrid, PenStroke, jpeg_roundtrip, render_sheet
from tests.science.grid_charts import add_noise, add_stain
from tracedesk.science.calibration import build_calibration
from tracedesk.science.circle_detection import CircularDetection, detect_circular_chart
from tracedesk.science.errors import ScienceInputError
from tracedesk.science.grid_spec import CircularChartSpec, grid_spec_from_dict

W, H = 1000, 800
CENTRE = (503.3, 398.7)
INNER_PX, OUTER_PX = 80.0, 340.0
RING_VALUES = np.arange(0.0, 101.0, 5.0)
RING_RADII = INNER_PX + (OUTER_PX - INNER_PX) * RING_VALUES / 100.0
GREEN, RED = "#9cc59a", "#c81e3c"
SPEC_JSON = {
    "kind": "circular",
    "value_axis": {"scale": "linear", "frame": [0, 100], "minor_step": 5, "major_step": 20},
    # 30 mm and 127.5 mm scale to 80 px and 340 px: only the ratio matters to detection.
    "ring_radii_mm": [30, 127.5],
    "period_hours": 24,
    "time_line_hours": 1,
    "grid_colour": GREEN,
    "pen_colours": [RED],
}


def _spec(json=None) -> CircularChartSpec:
    spec = grid_spec_from_dict(json or SPEC_JSON)
    assert isinstance(spec, CircularChartSpec)
    return spec


def _sheet(radii=RING_RADII) -> np.ndarray:
    grid = CircleGrid(
        centre_uv=CENTRE, radii_px=radii, angles_deg=np.arange(0.0, 360.0, 15.0), radius_range_px=(INNER_PX, OUTER_PX)
    )
    pen = PenStroke.from_polar(lambda a: 200 + 60 * np.sin(np.radians(a) * 3), centre_uv=CENTRE, colour=RED)
    return render_sheet(width_px=W, height_px=H, strokes=[pen], grid=grid)


def _check(detection: CircularDetection, *, tolerance_px: float) -> None:
    assert_allclose(detection.centre, CENTRE, rtol=0, atol=tolerance_px)
    measured = np.isfinite(detection.ring_radii_px)
    assert measured.sum() >= 12
    assert_allclose(detection.ring_radii_px[measured], RING_RADII[measured], rtol=0, atol=tolerance_px)
    assert_allclose([detection.radius_min_px, detection.radius_max_px], [INNER_PX, OUTER_PX], rtol=0, atol=tolerance_px)
    assert detection.confidence > 0.9


@pytest.fixture(scope="module")
def clean_detection() -> CircularDetection:
    return detect_circular_chart(_sheet(), _spec())


def test_clean_chart(clean_detection):
    _check(clean_detection, tolerance_px=0.1)


@pytest.mark.parametrize(
    "damage",
    [
        lambda image: jpeg_roundtrip(add_noise(image, sigma=5.0), quality=75),
        lambda image: add_stain(image, centre=(420.0, 330.0), radius=180.0, colour="#b08040", opacity=0.45),
    ],
    ids=["noise and JPEG", "stain"],
)
def test_damaged_scans(damage):
    _check(detect_circular_chart(damage(_sheet()), _spec()), tolerance_px=0.3)


def test_value_axis_makes_a_circular_calibration(clean_detection):
    calibration = build_calibration(
        {
            "kind": "circular",
            "centre": list(clean_detection.centre),
            "value_axis": clean_detection.value_axis(),
            "period_hours": 24,
            "time_zero_pixel": [CENTRE[0], CENTRE[1] - OUTER_PX],
            "time_direction": "clockwise",
        }
    )
    # A pixel on the 45 ring, due right of the centre: value 45 (from the rendered ring radii).
    pixel = np.array([[CENTRE[0] + RING_RADII[9], CENTRE[1]]])
    assert_allclose(calibration.pixels_to_values(pixel)[0, 1], 45.0, rtol=0, atol=0.05)
    shape = clean_detection.to_dict()
    assert shape["rings"][9]["value"] == 45.0
    assert set(shape) >= {"centre", "rings", "value_axis", "confidence", "warnings"}


def test_blank_page_is_refused():
    with pytest.raises(ScienceInputError, match="no printed rings of colour #9cc59a"):
        detect_circular_chart(render_sheet(width_px=W, height_px=H, strokes=[]), _spec())


def test_other_ring_pattern_is_refused():
    """The spec says 21 rings; this chart prints rings every 20 units from 0 to 100 only (6 rings)."""
    sparse = INNER_PX + (OUTER_PX - INNER_PX) * np.arange(0.0, 101.0, 20.0) / 100.0
    with pytest.raises(ScienceInputError, match="rings"):
        detect_circular_chart(_sheet(sparse), _spec())
