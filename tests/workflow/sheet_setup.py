"""Small building blocks for workflow and export tests: a collection of uploaded scans, an exact calibration
and manual traces given in chart values (invented data)."""

from __future__ import annotations

import itertools
from collections.abc import Sequence

from fastapi.testclient import TestClient

from tests.archive.scans import png_bytes

# The scans are 640 x 400 px. Chart box: x 0..24 h from u = 40 to 600 px, y 0..10 m from v = 360 to 40 px.
U0, U1, V0, V1 = 40.0, 600.0, 360.0, 40.0
X_SPAN, Y_SPAN = 24.0, 10.0
_NAMES = itertools.count(1)


def pixel_of(x: float, y: float) -> list[float]:
    """Sheet pixel (continuous, top-left origin) of chart value (x h, y m) under ``calibration()``."""
    return [U0 + (U1 - U0) * x / X_SPAN, V0 + (V1 - V0) * y / Y_SPAN]


def calibration(start: str | None = None) -> dict[str, object]:
    corners = [(0.0, 0.0), (X_SPAN, 0.0), (X_SPAN, Y_SPAN), (0.0, Y_SPAN)]
    x_axis: dict[str, object] = {"scale": "time"}
    if start:
        x_axis["start"] = start
    return {
        "kind": "cartesian",
        "x_axis": x_axis,
        "y_axis": {"scale": "linear", "unit": "m"},
        "control_points": [{"pixel": pixel_of(x, y), "value": [x, y]} for x, y in corners],
        "transform": "affine",
    }


def new_sheets(client: TestClient, count: int = 1, *, name: str = "") -> tuple[int, list[int]]:
    """A new collection with ``count`` uploaded scans; returns (collection id, sheet ids)."""
    created = client.post("/api/v1/collections", json={"name": name or f"Gauge charts {next(_NAMES)}"})
    assert created.status_code == 201, created.text
    collection_id = int(created.json()["id"])
    seed = next(_NAMES) * 100  # scans differ between collections too (exact duplicates are refused)
    files = [("files", (f"chart-{i}.png", png_bytes(seed=seed + i), "image/png")) for i in range(count)]
    upload = client.post(f"/api/v1/collections/{collection_id}/sheets", files=files)
    assert upload.status_code == 201, upload.text
    return collection_id, [int(sheet["id"]) for sheet in upload.json()["sheets"]]


def calibrate(client: TestClient, sheet_id: int, *, start: str | None = None) -> None:
    response = client.put(f"/api/v1/sheets/{sheet_id}/calibration", json=calibration(start))
    assert response.status_code in (200, 201), response.text


def add_trace(
    client: TestClient, sheet_id: int, name: str, xs: Sequence[float], ys: Sequence[float], *, unit: str = "m"
) -> dict[str, object]:
    vertices = [pixel_of(x, y) for x, y in zip(xs, ys, strict=True)]
    response = client.post(f"/api/v1/sheets/{sheet_id}/traces", json={"name": name, "unit": unit, "vertices": vertices})
    assert response.status_code == 201, response.text
    return dict(response.json())


def user_id(client: TestClient) -> int:
    return int(client.get("/api/v1/me").json()["id"])


def act(client: TestClient, task_id: int, action: str, reason: str | None = None) -> object:
    body = {"reason": reason} if reason is not None else {}
    return client.post(f"/api/v1/tasks/{task_id}/actions/{action}", json=body)
