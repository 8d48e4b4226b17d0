"""Batch runs over circular charts (issue 9): rings, time zero from the printed time arcs and the spec's reference
angle, the pen traced over the annulus, scored and submitted for review; an upside-down scan is refused with
the reason.

Sheets are the demo's weekly level charts (server/tracedesk/demo/circular_chart.py, seeded scenarios): pen-arm
time arcs every 2 h (heavier every 6 h and 24 h), rings every 0.2 m, ageing, stains, labels and a handwritten
note. Expected values come from the renderer itself: its exact calibration (``SheetTruth.calibration``), the
pen's ``Signal``, its turn of the paper, and its ``pen_arc_angle`` for the spec's time-zero angle.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import pytest
from fastapi.testclient import TestClient
from numpy.testing import assert_allclose

from tests.digitizing.test_batch_runs import _finish
from tests.digitizing.test_detection_api import _png
from tracedesk.demo.circular_chart import pen_arc_angle
from tracedesk.demo.scenarios import LEVEL_DESIGN, _level_sheet
from tracedesk.demo.truth import RenderedSheet
from tracedesk.science.calibration import build_calibration

DPI = 100.0
TURNS_DEG = (0.6, -1.1)  # how the demo's weeks 0 and 1 lie on the scanner (scenarios.py)
D = LEVEL_DESIGN
# The time-zero arc meets the outermost ring at the pivot's angle plus the arc's angle there (renderer geometry).
ZERO_ANGLE_DEG = D.pivot_angle_deg + math.degrees(
    float(pen_arc_angle(D.radius_max_mm, centre_to_pivot=D.pivot_distance_mm, arm_length=D.arm_mm))
)
SPEC = {
    "kind": "circular",
    "value_axis": {"scale": "linear", "frame": [D.value_min, D.value_max], "minor_step": 0.2, "major_step": 1},
    "ring_radii_mm": [D.radius_min_mm, D.radius_max_mm],
    "period_hours": D.period_hours,
    "time_line_hours": 2,
    "time_major_hours": 24,
    "time_lines": "arcs",
    "arc_radius_mm": D.arm_mm,
    "pivot_distance_mm": D.pivot_distance_mm,
    "time_zero_angle_deg": ZERO_ANGLE_DEG,
    "time_direction": D.time_direction,
    "grid_colour": D.grid_colour,
    "pen_colours": [D.pen_colour],
}


@pytest.fixture(scope="module")
def weeks() -> list[RenderedSheet]:
    return [_level_sheet(week).render(DPI) for week in (0, 1)]


def _start(client: TestClient, weeks: list[RenderedSheet]) -> tuple[list[int], dict[str, Any]]:
    collection = client.post("/api/v1/collections", json={"name": "Tollwick level 1987"}).json()["id"]
    images = [week.image for week in weeks] + [np.ascontiguousarray(weeks[0].image[::-1, ::-1])]
    names = ["week10.png", "week11.png", "week10-upside-down.png"]
    upload = [("files", (name, _png(image), "image/png")) for name, image in zip(names, images, strict=True)]
    sheets = [s["id"] for s in client.post(f"/api/v1/collections/{collection}/sheets", files=upload).json()["sheets"]]
    spec = client.post("/api/v1/chart-specs", json={"name": "BV-712", "geometry": SPEC}).json()["id"]
    body = {"chart_spec_id": spec, "pens": [{"name": "Reservoir level", "pen_color": D.pen_colour, "unit": "m"}]}
    started = client.post(f"/api/v1/collections/{collection}/batch-runs", json=body)
    assert started.status_code == 202, started.text
    return sheets, _finish(client, started.json())


def test_circular_sheets_register_trace_and_go_to_review(
    signed_in: dict[str, TestClient], weeks: list[RenderedSheet]
) -> None:
    admin = signed_in["admin"]
    sheets, run = _start(admin, weeks)
    assert run["job"]["status"] == "succeeded", run["job"]
    assert run["counts"] == {"pending": 0, "ready_for_review": 2, "needs_person": 1, "skipped": 0}
    items = {item["sheet_id"]: item for item in run["items"]}

    upside_down = items[sheets[2]]
    assert upside_down["status"] == "needs_person" and upside_down["task_state"] == "open"
    assert "time zero" in upside_down["reason"] and "upside down" in upside_down["reason"]

    for sheet, week, turn in zip(sheets[:2], weeks, TURNS_DEG, strict=True):
        item = items[sheet]
        assert item["status"] == "ready_for_review" and item["task_state"] == "submitted"
        assert item["score"]["kind"] == "circular"
        assert abs(item["score"]["rotation_deg"] - turn) < 0.05  # the paper's turn on the scanner
        stored = admin.get(f"/api/v1/sheets/{sheet}/calibration").json()
        assert stored["origin"] == "automatic" and stored["spec"]["pen_arc"]
        # Against the renderer's exact calibration at its check points: hours and metres.
        truth = week.truth.calibration
        pixels = np.array([point["pixel"] for point in truth["check_points"]])
        found = build_calibration(stored["spec"]).pixels_to_values(pixels)
        expected = np.array([point["value"] for point in truth["check_points"]], dtype=float)
        assert_allclose(found[:, 0], expected[:, 0], rtol=0, atol=0.02)  # hours: 0.02 h of a 168 h turn
        assert_allclose(found[:, 1], expected[:, 1], rtol=0, atol=0.005)  # metres: 5 mm of 12 m

        (trace,) = admin.get(f"/api/v1/sheets/{sheet}/traces").json()
        samples = np.array([s for s in trace["samples"] if None not in s], dtype=float)
        signal = week.truth.pens[0].signal
        error = samples[:, 1] - signal(samples[:, 0])
        assert np.sqrt(np.mean(error**2)) / D.value_max < 0.002  # no click at all; measured 0.05 %
        assert samples[:, 0].min() < 1.0 and samples[:, 0].max() > 167.0  # the whole week, from time zero


def test_detect_route_proposes_and_stores_a_circular_calibration(
    signed_in: dict[str, TestClient], weeks: list[RenderedSheet]
) -> None:
    tech = signed_in["technician"]
    collection = tech.post("/api/v1/collections", json={"name": "One week"}).json()
    upload = [("files", ("week11.png", _png(weeks[1].image), "image/png"))]
    (sheet,) = tech.post(f"/api/v1/collections/{collection['id']}/sheets", files=upload).json()["sheets"]
    route = f"/api/v1/sheets/{sheet['id']}/calibration/detect"

    rings_only = {key: value for key, value in SPEC.items() if key != "time_zero_angle_deg"}
    proposed = tech.post(route, json={"spec": rings_only, "accept": True}).json()
    assert proposed["stored"] is False and "calibration" not in proposed
    assert any("does not give time_zero_angle_deg" in warning for warning in proposed["warnings"])

    stored = tech.post(route, json={"spec": SPEC, "accept": True}).json()
    assert stored["stored"] is True and stored["stored_calibration"]["origin"] == "automatic"
    truth = weeks[1].truth.calibration
    assert_allclose(stored["calibration"]["time_zero_pixel"], truth["time_zero_pixel"], rtol=0, atol=0.2)
    assert stored["residuals"]["rms_px"] < 0.2 and len(stored["control_points"]) == 48
