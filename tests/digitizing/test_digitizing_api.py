"""The digitizing engine through its JSON API, end to end on a chart rendered by matplotlib with a known function.

Truth: y = 3 + 2 sin(2 pi x / 24) on x = 0..48 h, drawn into a 0..10 value box whose pixel corners are known
exactly (tests/science/chart_render.py). Targets from issue 3: traced samples within 0.1 % of full scale RMS,
fitted curves within 0.1 % of full scale of the truth everywhere in the traced range.
"""

from __future__ import annotations

import csv
import io
import math
from typing import Any

import numpy as np
import pytest
from fastapi.testclient import TestClient
from PIL import Image

from tests.science.chart_render import GridLines, LinearChartMapping, PenStroke, render_sheet
from tracedesk.exports.origins import ORIGIN_HEADER
from tracedesk.science.calibration import build_calibration
from tracedesk.science.circular import fit_circle

MAPPING = LinearChartMapping(x_range=(0.0, 48.0), y_range=(0.0, 10.0), box_px=(60.0, 40.0, 1140.0, 540.0))
FULL_SCALE = 10.0
PEN = "#1f3cc8"


def truth(x: np.ndarray) -> np.ndarray:
    return 3.0 + 2.0 * np.sin(2 * np.pi * x / 24.0)


def _chart_png() -> bytes:
    stroke = PenStroke.from_function(truth, mapping=MAPPING, x_range=(0.0, 48.0), colour=PEN, width_px=2.5)
    grid = GridLines(u_positions=list(np.arange(60.0, 1141.0, 45.0)), v_positions=list(np.arange(40.0, 541.0, 50.0)))
    pixels = render_sheet(width_px=1200, height_px=580, strokes=[stroke], grid=grid)
    buffer = io.BytesIO()
    Image.fromarray(pixels).save(buffer, format="PNG")
    return buffer.getvalue()


def _calibration() -> dict[str, object]:
    corners = [(0.0, 0.0), (48.0, 0.0), (48.0, 10.0), (0.0, 10.0), (24.0, 5.0)]
    points = []
    for x, y in corners:
        u, v = MAPPING.data_to_pixel(np.array([x]), np.array([y]))[0]
        points.append({"pixel": [float(u), float(v)], "value": [x, y]})
    return {
        "kind": "cartesian",
        "x_axis": {"scale": "time"},
        "y_axis": {"scale": "linear", "unit": "m"},
        "control_points": points,
        "transform": "auto",
    }


@pytest.fixture
def sheet_id(signed_in: dict[str, TestClient]) -> int:
    tech = signed_in["technician"]
    collection_id = tech.post("/api/v1/collections", json={"name": "Reservoir levels"}).json()["id"]
    upload = tech.post(
        f"/api/v1/collections/{collection_id}/sheets", files=[("files", ("level.png", _chart_png(), "image/png"))]
    )
    assert upload.status_code == 201, upload.text
    return int(upload.json()["sheets"][0]["id"])


def _calibrate(client: TestClient, sheet_id: int) -> dict[str, object]:
    response = client.put(f"/api/v1/sheets/{sheet_id}/calibration", json=_calibration())
    assert response.status_code == 201, response.text
    return dict(response.json())


def test_calibration_reports_residuals_and_needs_if_match_to_change(
    signed_in: dict[str, TestClient], sheet_id: int
) -> None:
    tech = signed_in["technician"]
    body = _calibrate(tech, sheet_id)
    assert body["version"] == 1
    assert body["rms_px"] is not None and body["rms_px"] < 1e-6  # exact points, exact affine/similarity
    assert len(body["residuals"]) == 5  # type: ignore[arg-type]
    url = f"/api/v1/sheets/{sheet_id}/calibration"
    assert tech.put(url, json=_calibration()).status_code == 428
    etag = tech.get(url).headers["etag"]
    again = tech.put(url, json={**_calibration(), "reason": "re-clicked"}, headers={"If-Match": etag})
    assert again.status_code == 200 and again.json()["version"] == 2
    assert tech.put(url, json=_calibration(), headers={"If-Match": etag}).status_code == 412


@pytest.mark.parametrize(
    ("change", "fragment"),
    [
        ({"control_points": [{"pixel": [10, 10], "value": [0, 0]}]}, ""),
        ({"y_axis": {"scale": "log10"}}, "log"),
        (
            {"control_points": [{"pixel": [5000, 10], "value": [0, 0]}, {"pixel": [20, 20], "value": [1, 1]}]},
            "outside the sheet",
        ),
    ],
)
def test_bad_calibrations_are_refused_and_nothing_is_stored(
    signed_in: dict[str, TestClient], sheet_id: int, change: dict[str, object], fragment: str
) -> None:
    tech = signed_in["technician"]
    body = {**_calibration(), **change}
    if fragment == "log":  # a log axis with a zero value cannot be calibrated
        body["control_points"] = _calibration()["control_points"]
    response = tech.put(f"/api/v1/sheets/{sheet_id}/calibration", json=body)
    assert response.status_code == 422, response.text
    assert fragment in response.text
    assert tech.get(f"/api/v1/sheets/{sheet_id}/calibration").status_code == 422  # still none


def test_auto_trace_fit_and_csv_match_the_truth(signed_in: dict[str, TestClient], sheet_id: int) -> None:
    tech = signed_in["technician"]
    _calibrate(tech, sheet_id)
    response = tech.post(
        f"/api/v1/sheets/{sheet_id}/traces/auto",
        json={"name": "level", "unit": "m", "pen_color": PEN, "region": {"box": [62, 42, 1138, 538]}},
    )
    assert response.status_code == 201, response.text
    trace = response.json()
    samples = np.array(trace["samples"], dtype=float)
    error = samples[:, 1] - truth(samples[:, 0])
    rms_fraction = np.sqrt(np.mean(error**2)) / FULL_SCALE
    assert rms_fraction < 0.001, f"traced samples RMS error {rms_fraction:.4%} of full scale"
    assert trace["x_unit"] == "h" and trace["origin"] == "auto"

    fit = tech.post(f"/api/v1/traces/{trace['id']}/fits", json={"family": "fourier", "degree": 1, "period": 24})
    assert fit.status_code == 201, fit.text
    coefficients = fit.json()["coefficients"]
    x = np.linspace(fit.json()["domain"][0], fit.json()["domain"][1], 400)
    fitted = (
        coefficients["a0"]
        + coefficients["a1"] * np.cos(2 * np.pi * x / 24)
        + coefficients["b1"] * np.sin(2 * np.pi * x / 24)
    )
    assert np.max(np.abs(fitted - truth(x))) / FULL_SCALE < 0.001
    assert set(fit.json()["equation"]) == {"text", "latex", "python", "spreadsheet"}

    csv_response = tech.get(f"/api/v1/traces/{trace['id']}/resampled.csv", params={"step": 1, "method": "pchip"})
    assert csv_response.status_code == 200
    rows = list(csv.reader(io.StringIO(csv_response.text)))
    assert rows[0] == ["x [h]", "level [m]", "flag", *ORIGIN_HEADER]
    assert {tuple(row[3:]) for row in rows[1:]} == {("auto", "manual")}  # auto-traced on clicked control points
    grid = np.array([float(row[0]) for row in rows[1:] if row[1]])
    values = np.array([float(row[1]) for row in rows[1:] if row[1]])
    assert np.max(np.abs(values - truth(grid))) / FULL_SCALE < 0.002

    summary = tech.get(f"/api/v1/traces/{trace['id']}/summary", params={"period": "day", "threshold": 3}).json()
    first_day = summary["periods"][0]
    assert abs(first_day["mean"] - 3.0) < 0.02  # a whole period of a sine averages to its offset
    assert abs(first_day["maximum"] - 5.0) < 0.02 and abs(first_day["maximum_time"] - 6.0) < 0.3


def test_auto_trace_bad_input_is_refused_and_nothing_is_stored(signed_in: dict[str, TestClient], sheet_id: int) -> None:
    tech = signed_in["technician"]
    url = f"/api/v1/sheets/{sheet_id}/traces/auto"
    outside = tech.post(url, json={"name": "x", "pen_color": PEN, "region": {"box": [5000, 0, 6000, 100]}})
    assert outside.status_code == 422
    absent = tech.post(url, json={"name": "x", "pen_color": "#00ff00", "region": {"box": [62, 42, 1138, 538]}})
    assert absent.status_code == 422
    assert tech.get(f"/api/v1/sheets/{sheet_id}/traces").json() == []


def test_manual_trace_edit_rederives_fits_and_is_audited(signed_in: dict[str, TestClient], sheet_id: int) -> None:
    tech = signed_in["technician"]
    _calibrate(tech, sheet_id)
    x = np.linspace(0.0, 48.0, 60)
    vertices = MAPPING.data_to_pixel(x, 1.0 + 0.1 * x).tolist()
    created = tech.post(f"/api/v1/sheets/{sheet_id}/traces", json={"name": "ramp", "unit": "m", "vertices": vertices})
    assert created.status_code == 201, created.text
    trace_id = created.json()["id"]
    fit = tech.post(f"/api/v1/traces/{trace_id}/fits", json={"family": "polynomial", "degree": 1}).json()
    np.testing.assert_allclose(fit["coefficients"], [1.0, 0.1], rtol=1e-6, atol=1e-6)
    bad_period = tech.post(f"/api/v1/traces/{trace_id}/fits", json={"family": "fourier", "degree": 1, "period": -24})
    assert bad_period.status_code == 422 and "period" in bad_period.text
    unknown = tech.post(f"/api/v1/traces/{trace_id}/fits", json={"family": "astrology"})
    assert unknown.status_code == 422
    doubled = MAPPING.data_to_pixel(x, 2.0 + 0.1 * x).tolist()
    etag = tech.get(f"/api/v1/traces/{trace_id}").headers["etag"]
    edited = tech.patch(f"/api/v1/traces/{trace_id}", json={"vertices": doubled}, headers={"If-Match": etag})
    assert edited.status_code == 200 and edited.json()["version"] == 2
    refit = tech.get(f"/api/v1/fits/{fit['id']}").json()
    np.testing.assert_allclose(refit["coefficients"], [2.0, 0.1], rtol=1e-6, atol=1e-6)
    assert refit["trace_version"] == 2
    history = tech.get(f"/api/v1/audit/history/fit/{fit['id']}").json()
    assert [event["action"] for event in history] == ["create", "rederive"]
    assert tech.patch(f"/api/v1/traces/{trace_id}", json={"name": "r"}, headers={"If-Match": etag}).status_code == 412
    viewer = signed_in["viewer"]
    assert viewer.post(f"/api/v1/traces/{trace_id}/fits", json={"family": "polynomial", "degree": 1}).status_code == 403


def test_spline_fit_is_stored_with_a_note_instead_of_an_equation(
    signed_in: dict[str, TestClient], sheet_id: int
) -> None:
    tech = signed_in["technician"]
    _calibrate(tech, sheet_id)
    x = np.linspace(0.0, 48.0, 80)
    vertices = MAPPING.data_to_pixel(x, truth(x)).tolist()
    trace_id = tech.post(f"/api/v1/sheets/{sheet_id}/traces", json={"name": "s", "vertices": vertices}).json()["id"]
    fit = tech.post(f"/api/v1/traces/{trace_id}/fits", json={"family": "spline"})
    assert fit.status_code == 201, fit.text
    assert fit.json()["equation"]["text"].startswith("no closed-form equation")


ARM_PX, PIVOT_V = 2000.0, 290.0


def _arc_pixel(x: float, y: float) -> list[float]:
    """Where (x h, y) lies if the chart is written by a pen arm of 2000 px pivoting at v = 290 on the later side:
    the straight chart's pixel moved later by L - sqrt(L^2 - (v - v_p)^2) (circular.py, drum charts)."""
    u, v = MAPPING.data_to_pixel(np.array([x]), np.array([y]))[0]
    return [float(u + ARM_PX - math.sqrt(ARM_PX**2 - (v - PIVOT_V) ** 2)), float(v)]


def _clicked_arm_calibration() -> dict[str, Any]:
    """Curvilinear, with the pen arm given as 4 pixels clicked along the 24 h line."""
    corners = [(0.0, 0.0), (48.0, 0.0), (48.0, 10.0), (0.0, 10.0), (24.0, 5.0), (12.0, 2.0)]
    return {
        "kind": "curvilinear",
        "x_axis": {"scale": "time"},
        "y_axis": {"scale": "linear", "unit": "m"},
        "control_points": [{"pixel": _arc_pixel(x, y), "value": [x, y]} for x, y in corners],
        "transform": "affine",
        "pen_arc": {"time_line_points": [_arc_pixel(24.0, y) for y in (0.5, 3.0, 7.0, 9.5)], "pivot_side": "later"},
    }


def test_pen_arm_clicked_on_a_time_line_is_stored_and_read_through(
    signed_in: dict[str, TestClient], sheet_id: int
) -> None:
    tech = signed_in["technician"]
    url = f"/api/v1/sheets/{sheet_id}/calibration"
    spec = _clicked_arm_calibration()
    stored = tech.put(url, json=spec)
    assert stored.status_code == 201, stored.text
    assert stored.json()["spec"]["pen_arc"] == spec["pen_arc"]
    assert tech.get(url).json()["spec"]["pen_arc"] == spec["pen_arc"]
    # It reads as the typed arm whose pivot and length are the circle through the clicks (science fit_circle) ...
    circle = fit_circle(spec["pen_arc"]["time_line_points"])
    typed = {**spec, "pen_arc": {"pivot_pixel": list(circle.centre), "length_px": circle.radius, "pivot_side": "later"}}
    pixels = [_arc_pixel(6.0, 8.0), _arc_pixel(40.0, 1.0)]
    mapped = tech.post(f"{url}/map", json={"pixels": pixels}).json()["values"]
    np.testing.assert_allclose(mapped, build_calibration(typed).pixels_to_values(pixels), rtol=0, atol=1e-9)
    # ... and that is the pen arm the chart was drawn with: the points read their true values.
    np.testing.assert_allclose(mapped, [[6.0, 8.0], [40.0, 1.0]], rtol=0, atol=1e-6)
    both = {**spec, "pen_arc": {**spec["pen_arc"], **typed["pen_arc"]}, "reason": "pivot typed too"}
    refused = tech.put(url, json=both, headers={"If-Match": tech.get(url).headers["etag"]})
    assert (
        refused.status_code == 422
        and "pen_arc: give time_line_points or pivot_pixel and length_px, not both" in refused.text
    ), refused.text
    assert tech.get(url).json()["version"] == 1
