"""The JSON routes behind the workbench: colour under a point, calibration preview and pixel mapping, a circle
through points, a fit evaluated for drawing, and calibrations to reuse.

Truth comes from the matplotlib-rendered chart of tests/browser/charts.py (pen colour, pixel box of the chart and
its paper colour are all known exactly) and from closed forms (a circle through points on a known circle, a
straight-line fit to points on a straight line).
"""

from __future__ import annotations

import io

import numpy as np
import pytest
from fastapi.testclient import TestClient
from PIL import Image

from tests.browser.charts import PEN, STRIP, CircularChart, strip_chart_png, strip_truth
from tests.science.chart_render import PAPER_WHITE, rgb_of


def _upload(client: TestClient, png: bytes, collection_id: int | None = None) -> int:
    if collection_id is None:
        collection_id = client.post("/api/v1/collections", json={"name": "Workbench"}).json()["id"]
    upload = client.post(
        f"/api/v1/collections/{collection_id}/sheets", files=[("files", ("chart.png", png, "image/png"))]
    )
    assert upload.status_code == 201, upload.text
    return int(upload.json()["sheets"][0]["id"])


def _strip_calibration() -> dict[str, object]:
    corners = [(0.0, 0.0), (48.0, 0.0), (48.0, 10.0), (0.0, 10.0)]
    points = [
        {"pixel": STRIP.data_to_pixel(np.array([x]), np.array([y]))[0].tolist(), "value": [x, y]} for x, y in corners
    ]
    return {
        "kind": "cartesian",
        "x_axis": {"scale": "time"},
        "y_axis": {"scale": "linear", "unit": "m"},
        "control_points": points,
    }


@pytest.fixture
def tech(signed_in: dict[str, TestClient]) -> TestClient:
    return signed_in["technician"]


@pytest.fixture
def strip_sheet(tech: TestClient) -> int:
    return _upload(tech, strip_chart_png())


def test_colour_reads_the_pen_ink_the_paper_and_the_pixel_under_the_point(tech: TestClient, strip_sheet: int) -> None:
    u, v = STRIP.data_to_pixel(np.array([6.0]), strip_truth(np.array([6.0])))[0]
    on_pen = tech.get(f"/api/v1/sheets/{strip_sheet}/colour", params={"u": u + 1.2, "v": v - 0.8, "radius": 3}).json()
    assert on_pen["ink_found"] is True
    np.testing.assert_allclose(rgb_of(on_pen["pen_color"]), rgb_of(PEN), atol=16)  # the renderer's pen colour
    paper = tech.get(f"/api/v1/sheets/{strip_sheet}/colour", params={"u": 80.0, "v": 60.0, "radius": 3}).json()
    assert paper["ink_found"] is False
    np.testing.assert_allclose(rgb_of(paper["paper_color"]), rgb_of(PAPER_WHITE), atol=3)
    outside = tech.get(f"/api/v1/sheets/{strip_sheet}/colour", params={"u": 5000, "v": 10})
    assert outside.status_code == 422


def test_colour_of_a_pixel_follows_the_pixel_convention(tech: TestClient, strip_sheet: int) -> None:
    """Pixel (i, j) covers [i, i+1) x [j, j+1) (ARCHITECTURE.md): any point inside it reads image[j, i]."""
    image = np.asarray(Image.open(io.BytesIO(strip_chart_png())).convert("RGB"))
    j, i = 290, 60  # on the printed grid line at u = 60 px, next to paper: neighbours differ
    assert not np.array_equal(image[j, i], image[j, i + 2])
    for u, v in ((i + 0.5, j + 0.5), (i + 0.01, j + 0.99)):
        answer = tech.get(f"/api/v1/sheets/{strip_sheet}/colour", params={"u": u, "v": v, "radius": 0}).json()
        assert rgb_of(answer["pixel_color"]) == tuple(int(c) for c in image[j, i])


def test_preview_fits_without_storing_and_draws_the_grid_where_the_chart_has_it(
    tech: TestClient, strip_sheet: int
) -> None:
    preview = tech.post(f"/api/v1/sheets/{strip_sheet}/calibration/preview", json=_strip_calibration())
    assert preview.status_code == 200, preview.text
    body = preview.json()
    assert body["rms_px"] < 1e-6 and len(body["residuals"]) == 4
    four_metres = [line for line in body["grid"] if line["axis"] == "y" and line["value"] == 4.0]
    assert len(four_metres) == 1 and four_metres[0]["label"] == "4 m"
    # y = 4 m is 40 % up the 0..10 m box whose bottom and top are v = 540 and 40 px (the chart's truth).
    np.testing.assert_allclose(np.array(four_metres[0]["points"])[:, 1], 340.0, atol=0.01)
    assert {line["value"] for line in body["grid"] if line["axis"] == "x"} >= {0.0, 24.0, 48.0}
    assert tech.get(f"/api/v1/sheets/{strip_sheet}/calibration").status_code == 422  # nothing stored
    one_point = {**_strip_calibration(), "control_points": _strip_calibration()["control_points"][:1]}  # type: ignore[index]
    assert tech.post(f"/api/v1/sheets/{strip_sheet}/calibration/preview", json=one_point).status_code == 422


def test_map_reads_values_through_the_saved_or_a_draft_calibration(tech: TestClient, strip_sheet: int) -> None:
    url = f"/api/v1/sheets/{strip_sheet}/calibration/map"
    pixel = STRIP.data_to_pixel(np.array([24.0]), np.array([5.0]))[0].tolist()
    assert tech.post(url, json={"pixels": [pixel]}).status_code == 422  # no saved calibration yet
    draft = tech.post(url, json={"pixels": [pixel], "spec": _strip_calibration()}).json()
    np.testing.assert_allclose(draft["values"][0], [24.0, 5.0], atol=1e-9)
    assert (draft["x_unit"], draft["y_unit"]) == ("h", "m")
    assert tech.put(f"/api/v1/sheets/{strip_sheet}/calibration", json=_strip_calibration()).status_code == 201
    saved = tech.post(url, json={"pixels": [pixel, [0.0, 0.0]]}).json()
    np.testing.assert_allclose(saved["values"][0], [24.0, 5.0], atol=1e-9)


def test_circle_through_clicked_points(tech: TestClient) -> None:
    angles = np.radians([5.0, 80.0, 190.0, 250.0])
    points = np.column_stack([310.5 + 123.0 * np.cos(angles), 205.25 + 123.0 * np.sin(angles)]).tolist()
    circle = tech.post("/api/v1/geometry/circle", json={"points": points}).json()
    np.testing.assert_allclose(circle["centre"], [310.5, 205.25], atol=1e-6)  # the circle the points lie on
    np.testing.assert_allclose(circle["radius_px"], 123.0, atol=1e-6)
    on_a_line = tech.post("/api/v1/geometry/circle", json={"points": [[0, 0], [1, 1], [2, 2]]})
    assert on_a_line.status_code == 422


def test_fit_curve_gives_pixels_bands_and_residuals_for_drawing(tech: TestClient, strip_sheet: int) -> None:
    tech.put(f"/api/v1/sheets/{strip_sheet}/calibration", json=_strip_calibration())
    x = np.linspace(4.0, 44.0, 41)
    y = 1.0 + 0.1 * x + 0.02 * np.sin(3.0 * x)  # a line with a small wiggle, so the bands have a width
    trace = tech.post(
        f"/api/v1/sheets/{strip_sheet}/traces",
        json={"name": "ramp", "unit": "m", "vertices": STRIP.data_to_pixel(x, y).tolist()},
    )
    fit = tech.post(f"/api/v1/traces/{trace.json()['id']}/fits", json={"family": "polynomial", "degree": 1}).json()
    curve = tech.get(f"/api/v1/fits/{fit['id']}/curve", params={"count": 101, "margin": 0.25}).json()
    grid = np.array(curve["x"])
    np.testing.assert_allclose([grid[0], grid[-1]], [4.0 - 10.0, 44.0 + 10.0])  # a quarter of the range each side
    fitted = np.array(curve["fitted"])
    np.testing.assert_allclose(fitted, 1.0 + 0.1 * grid, atol=0.01)
    np.testing.assert_allclose(curve["pixels"]["fitted"], STRIP.data_to_pixel(grid, fitted), atol=1e-6)
    assert curve["outside"] == [bool(g < 4.0 or g > 44.0) for g in grid]
    lower, upper = np.array(curve["confidence"]).T
    assert np.all(lower < fitted) and np.all(fitted < upper)
    wide_lower, wide_upper = np.array(curve["prediction"]).T
    assert np.all(wide_upper - wide_lower > upper - lower)  # a new sample is less certain than the mean curve
    residuals = np.array([r["residual"] for r in curve["residuals"]])
    assert len(residuals) == 41 and np.max(np.abs(residuals)) < 0.03
    # The SD behind the +-2 sd guides and the outlier rings is in metres like the residuals, sqrt(SSR / (n - p))
    # (textbook definition), not in units of each sample's uncertainty.
    assert curve["residual_sd"] == pytest.approx(np.sqrt(residuals @ residuals / (41 - 2)), rel=1e-9)
    assert curve["caution"]  # part of the grid lies outside the traced range


def test_templates_offer_the_calibrations_of_the_other_sheets_of_the_collection(tech: TestClient) -> None:
    collection_id = tech.post("/api/v1/collections", json={"name": "Same chart"}).json()["id"]
    first = _upload(tech, strip_chart_png(), collection_id)
    second = _upload(tech, CircularChart().png(), collection_id)
    tech.put(f"/api/v1/sheets/{first}/calibration", json=_strip_calibration())
    offered = tech.get(f"/api/v1/sheets/{second}/calibration-templates").json()
    assert [item["sheet_id"] for item in offered] == [first]
    assert offered[0]["spec"]["control_points"] == _strip_calibration()["control_points"]
    assert tech.get(f"/api/v1/sheets/{first}/calibration-templates").json() == []


def test_a_circular_calibration_without_check_points_is_saved_and_read(tech: TestClient) -> None:
    chart = CircularChart()
    sheet = _upload(tech, chart.png())
    spec = {
        "kind": "circular",
        "centre": list(chart.centre),
        "period_hours": 24,
        "time_direction": "clockwise",
        "time_zero_pixel": list(chart.pixel_of(0.0, chart.value_max)),
        "value_axis": {"scale": "linear", "min": 0, "max": 100, "radius_min_px": 60, "radius_max_px": 360},
    }
    saved = tech.put(f"/api/v1/sheets/{sheet}/calibration", json=spec)
    assert saved.status_code == 201, saved.text
    assert saved.json()["rms_units"] in (None, [None, None])
    assert tech.get(f"/api/v1/sheets/{sheet}/calibration").status_code == 200


def test_signed_out_callers_are_refused(client: TestClient) -> None:
    assert client.post("/api/v1/geometry/circle", json={"points": [[0, 0], [1, 0], [0, 1]]}).status_code == 401
