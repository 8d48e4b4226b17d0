"""A daily circular chart written by a pen on an arm, digitized end to end through the HTTP API.

The recorder's pen swings on an arm of length L about a pivot at distance D from the chart centre, so the printed
time lines are arcs of radius L and a value is written at the angle phi(r) = arccos((r^2 + D^2 - L^2) / (2 r D))
from the centre -> pivot line (REFERENCES.md, "Chart recorder geometry": Walter et al., J. Atmos. Oceanic
Technol. 16(8), 1999); the pattern turns about the centre by 2 pi t / P. Truth: the pen value function below,
placed by that geometry (``pen_arc_angle`` of the demo charts, independent of the engine's ``science.circular``)
and drawn by matplotlib (Agg) through tests/science/chart_render.py, then saved as JPEG (quality 85).

The technician's steps are all HTTP: circles through points clicked on the outer and inner rings give the centre
and the value radii, a circle through points clicked along the printed time-zero arc gives the pivot and L
(``POST /api/v1/geometry/circle``), then the calibration, an automatic trace over the calibrated annulus, a fit
and the resampled CSV. A first calibration that ignores the arcs is corrected afterwards, which must re-derive
the samples. Targets: issue 3's, as collected in tests/digitizing/api_steps.py. Measured (sqlite): vertices
0.09 px RMS; samples 0.044 % of full scale RMS and the fitted curve at most 0.066 % off, almost all of it from
the clicked geometry (with exact clicks: 0.029 % and 0.011 %).
"""

from __future__ import annotations

from functools import lru_cache
from typing import Any

import numpy as np
import pytest
from fastapi.testclient import TestClient
from numpy.typing import NDArray

from tests.digitizing.api_steps import (
    SAMPLE_MAX_FS,
    VERTEX_RMS_PX,
    assert_fit_matches,
    assert_samples_match,
    auto_trace,
    create_fit,
    encoded,
    pen_colour_at,
    put_calibration,
    reading_sigma,
    resampled_csv,
    rms,
    trace_arrays,
)
from tests.digitizing.api_steps import upload_sheet as upload
from tests.science.chart_render import CircleGrid, PenStroke, distance_to_polyline, render_sheet
from tracedesk.demo.circular_chart import pen_arc_angle

FloatArray = NDArray[np.float64]

SIZE = 1000
CENTRE = np.array([501.3, 498.6])
RADIUS_MIN, RADIUS_MAX = 80.0, 440.0  # value 0 and value 100 (px)
FULL_SCALE = 100.0
ARM = PIVOT_DISTANCE = 470.0  # time arcs through the centre (D = L, common practice)
PIVOT_ANGLE = np.radians(-30.0)  # image angle of the centre -> pivot line at time zero (clockwise from +u)
PERIOD = 24.0
PEN, GRID_GREEN = "#c81e3c", "#9cc59a"
FIRST_HOUR, LAST_HOUR = 0.3, 23.4
CLICK_SD_PX = 0.1  # a careful technician at zoom; with 0.15 px the arm from one arc is off by up to 4 px


def pen_truth(hours: FloatArray) -> FloatArray:
    return 50.0 + 30.0 * np.sin(2 * np.pi * hours / PERIOD) + 10.0 * np.cos(2 * np.pi * 3 * hours / PERIOD)


def chart_pixels(hours: FloatArray, values: FloatArray) -> FloatArray:
    """Where the pen writes ``values`` at ``hours``; later times lie clockwise on the image."""
    radius = RADIUS_MIN + (np.asarray(values) / FULL_SCALE) * (RADIUS_MAX - RADIUS_MIN)
    phi = pen_arc_angle(radius, centre_to_pivot=PIVOT_DISTANCE, arm_length=ARM)
    angle = PIVOT_ANGLE + phi + 2 * np.pi * np.asarray(hours) / PERIOD
    return np.column_stack([CENTRE[0] + radius * np.cos(angle), CENTRE[1] + radius * np.sin(angle)])


@lru_cache(maxsize=1)
def circular_chart() -> tuple[tuple[bytes, str, str], FloatArray]:
    """The chart as JPEG bytes and the pen's true polyline (px)."""
    hours = np.linspace(FIRST_HOUR, LAST_HOUR, 12000)
    pen = PenStroke(chart_pixels(hours, pen_truth(hours)), PEN, 2.5)
    along = np.linspace(0.0, FULL_SCALE, 300)
    arcs = [PenStroke(chart_pixels(np.full_like(along, h), along), GRID_GREEN, 1.0) for h in range(24)]
    rings = CircleGrid(
        centre_uv=(float(CENTRE[0]), float(CENTRE[1])),
        radii_px=list(np.linspace(RADIUS_MIN, RADIUS_MAX, 11)),
        angles_deg=[],
        radius_range_px=(RADIUS_MIN, RADIUS_MAX),
        colour=GRID_GREEN,
    )
    pixels = render_sheet(width_px=SIZE, height_px=SIZE, strokes=[*arcs, pen], grid=rings)
    return encoded(pixels, jpeg_quality=85), pen.points_uv


def _clicks(points: FloatArray, seed: int) -> list[list[float]]:
    return (points + np.random.default_rng(seed).normal(0.0, CLICK_SD_PX, points.shape)).tolist()


def _circle(client: TestClient, points: FloatArray, seed: int) -> tuple[FloatArray, float]:
    response = client.post("/api/v1/geometry/circle", json={"points": _clicks(points, seed)})
    assert response.status_code == 200, response.text
    return np.array(response.json()["centre"]), float(response.json()["radius_px"])


def _ring(radius: float, angles_deg: FloatArray) -> FloatArray:
    angles = np.radians(angles_deg)
    return np.column_stack([CENTRE[0] + radius * np.cos(angles), CENTRE[1] + radius * np.sin(angles)])


def _calibration(client: TestClient, *, with_arc: bool) -> dict[str, Any]:
    """The calibration as a technician sets it up from clicks on the printed rings and the time-zero arc."""
    centre, radius_max = _circle(client, _ring(RADIUS_MAX, np.arange(0.0, 360.0, 40.0)), seed=11)
    _, radius_min = _circle(client, _ring(RADIUS_MIN, np.arange(10.0, 360.0, 60.0)), seed=12)
    time_zero = chart_pixels(np.zeros(1), np.array([FULL_SCALE]))[0]
    spec: dict[str, Any] = {
        "kind": "circular",
        "centre": centre.tolist(),
        "value_axis": {
            "scale": "linear",
            "min": 0.0,
            "max": FULL_SCALE,
            "radius_min_px": radius_min,
            "radius_max_px": radius_max,
            "unit": "kPa",
        },
        "period_hours": PERIOD,
        "time_zero_pixel": _clicks(time_zero[None, :], seed=13)[0],
        "time_direction": "clockwise",
    }
    if with_arc:
        along_arc = chart_pixels(np.zeros(12), np.linspace(0.0, 100.0, 12))
        pivot, arm = _circle(client, along_arc, seed=14)
        spec["pen_arc"] = {"pivot_pixel": pivot.tolist(), "length_px": arm}
        crossings = [(h, v) for h in (3.0, 9.0, 15.0, 21.0) for v in (20.0, 80.0)]
        pixels = chart_pixels(np.array([h for h, _ in crossings]), np.array([v for _, v in crossings]))
        spec["check_points"] = [
            {"pixel": p, "value": list(value)} for p, value in zip(_clicks(pixels, seed=15), crossings, strict=True)
        ]
    return spec


@pytest.fixture
def tech(signed_in: dict[str, TestClient]) -> TestClient:
    return signed_in["technician"]


def test_circular_chart_with_pen_arcs(tech: TestClient) -> None:
    file, pen = circular_chart()
    sheet_id = upload(tech, file, collection="Boiler house pressure charts")
    put_calibration(tech, sheet_id, _calibration(tech, with_arc=False))
    ink = pen_colour_at(tech, sheet_id, pen[len(pen) // 5])
    trace = auto_trace(tech, sheet_id, name="pressure", unit="kPa", colour=ink, region={"calibrated_area": True})
    vertices, samples, _ = trace_arrays(tech, trace["id"])
    # Reading the arcs as radial lines shifts times by up to phi(80 px) - phi(440 px) = 23.6 degrees (1.6 h):
    # measured 6.6 % of full scale RMS.
    assert rms(samples[:, 1] - pen_truth(samples[:, 0])) > 0.02 * FULL_SCALE

    corrected = put_calibration(tech, sheet_id, _calibration(tech, with_arc=True), reason="pen arcs were ignored")
    assert corrected["version"] == 2 and corrected["warnings"] == []
    assert corrected["rms_px"] < 0.5  # check points clicked 0.1 px (sd) per axis off: 0.14 px RMS of that alone
    again, samples, sigma = trace_arrays(tech, trace["id"])
    np.testing.assert_array_equal(again, vertices)  # the same ink, re-read through the corrected calibration

    hours = samples[:, 0]
    inside = (hours > FIRST_HOUR + 0.05) & (hours < LAST_HOUR - 0.05)
    assert inside.sum() > 0.95 * len(hours)
    assert rms(distance_to_polyline(vertices[inside], pen)) < VERTEX_RMS_PX
    slope = (pen_truth(hours + 1e-4) - pen_truth(hours - 1e-4)) / 2e-4
    error, sigma_reading = samples[:, 1] - pen_truth(hours), reading_sigma(sigma, slope)
    assert_samples_match(error[inside], sigma_reading[inside], full_scale=FULL_SCALE)

    fit = create_fit(tech, trace["id"], {"family": "fourier", "degree": 3, "period": PERIOD})
    assert_fit_matches(fit, pen_truth, full_scale=FULL_SCALE)
    header, grid_x, values = resampled_csv(tech, trace["id"], step=0.5, method="pchip")
    assert header[:2] == ["x [h]", "pressure [kPa]"]
    assert grid_x.min() >= FIRST_HOUR - 0.01 and grid_x.max() <= LAST_HOUR + 0.01  # nothing invented past the ink
    assert np.max(np.abs(values - pen_truth(grid_x))) < SAMPLE_MAX_FS * FULL_SCALE
