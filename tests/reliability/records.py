"""Records the campaign's modules work on: a collection with one small sheet, its calibration and a trace.

The sheet is a 640 x 400 chart (tests/archive/scans.py); the calibration maps its corners to 0..24 h and 0..10
(values invented for the test); the trace is a short manual polyline.
"""

from __future__ import annotations

from dataclasses import dataclass

from fastapi.testclient import TestClient

from tests.archive.scans import png_bytes
from tests.reliability.campaign import new_collection, upload

CALIBRATION = {
    "kind": "cartesian",
    "x_axis": {"scale": "linear"},
    "y_axis": {"scale": "linear"},
    "control_points": [
        {"pixel": [40.5, 360.5], "value": [0, 0]},
        {"pixel": [600.5, 360.5], "value": [24, 0]},
        {"pixel": [600.5, 40.5], "value": [24, 10]},
        {"pixel": [40.5, 40.5], "value": [0, 10]},
    ],
    "transform": "auto",
}
VERTICES = [[50.0, 300.0], [150.0, 250.0], [300.0, 200.0], [450.0, 180.0], [590.0, 120.0]]


@dataclass(frozen=True)
class Records:
    collection_id: int
    sheet_id: int
    trace_id: int
    fit_id: int


def make_records(client: TestClient, *, name: str, seed: int) -> Records:
    """A collection, a sheet (uploaded), its calibration, a manual trace and a straight-line fit."""
    collection_id = new_collection(client, name)
    uploaded = upload(client, collection_id, f"chart-{seed}.png", png_bytes(seed=seed))
    assert uploaded.status_code == 201, uploaded.text
    sheet_id = int(uploaded.json()["sheets"][0]["id"])
    calibrated = client.put(f"/api/v1/sheets/{sheet_id}/calibration", json=CALIBRATION)
    assert calibrated.status_code == 201, calibrated.text
    trace = client.post(f"/api/v1/sheets/{sheet_id}/traces", json={"name": "pen 1", "unit": "m", "vertices": VERTICES})
    assert trace.status_code == 201, trace.text
    trace_id = int(trace.json()["id"])
    fit = client.post(f"/api/v1/traces/{trace_id}/fits", json={"family": "polynomial", "degree": 1})
    assert fit.status_code == 201, fit.text
    return Records(collection_id, sheet_id, trace_id, int(fit.json()["id"]))
