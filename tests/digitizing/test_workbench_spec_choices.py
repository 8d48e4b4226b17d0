"""The chart specs the workbench offers for a sheet: its collection's own and the shared ones, never another
collection's (the page lists them so the Calibrate panel can apply one without asking first)."""

from __future__ import annotations

import re

from fastapi.testclient import TestClient

from tests.browser.charts import strip_chart_png

TEMPLATE = {
    "kind": "cartesian",
    "x_axis": {"scale": "time"},
    "y_axis": {"scale": "linear", "unit": "m"},
    "control_points": [{"pixel": [60.0, 540.0], "value": [0, 0]}, {"pixel": [1140.0, 40.0], "value": [48, 10]}],
}
GRID = {
    "kind": "cartesian",
    "x_axis": {"scale": "time", "frame": [0, 48], "minor_step": 2},
    "y_axis": {"scale": "linear", "frame": [0, 10], "minor_step": 1},
    "grid_colour": "#e8a48c",
}


def _collection_with_sheet(client: TestClient, name: str) -> tuple[int, int]:
    collection_id = int(client.post("/api/v1/collections", json={"name": name}).json()["id"])
    files = [("files", ("level.png", strip_chart_png(), "image/png"))]
    sheets = client.post(f"/api/v1/collections/{collection_id}/sheets", files=files).json()["sheets"]
    return collection_id, int(sheets[0]["id"])


def _spec(client: TestClient, name: str, collection_id: int | None, **parts: object) -> int:
    answer = client.post("/api/v1/chart-specs", json={"name": name, "collection_id": collection_id, **parts})
    assert answer.status_code == 201, answer.text
    return int(answer.json()["id"])


def _options(html: str) -> dict[str, str]:
    select = re.search(r"<select data-spec-choice.*?</select>", html, re.S)
    assert select, "the Calibrate panel has no chart spec list"
    return {value: tag for value, tag in re.findall(r'<option value="(\d+)"([^>]*)>', select.group(0))}


def test_the_workbench_offers_the_collections_own_and_the_shared_chart_specs(
    signed_in: dict[str, TestClient],
) -> None:
    tech = signed_in["technician"]
    here, sheet_id = _collection_with_sheet(tech, "Level recorder")
    elsewhere, _ = _collection_with_sheet(tech, "Rain gauge")
    own = _spec(tech, "Level strip", here, calibration_template=TEMPLATE)
    shared = _spec(tech, "Strip paper, any box", None, geometry=GRID)
    foreign = _spec(tech, "Rain strip", elsewhere, calibration_template=TEMPLATE)

    options = _options(tech.get(f"/sheets/{sheet_id}/workbench").text)
    assert set(options) == {str(own), str(shared)}, f"another collection's spec {foreign} must not be offered"
    assert 'data-template="true"' in options[str(own)] and 'data-geometry="false"' in options[str(own)]
    assert 'data-template="false"' in options[str(shared)] and 'data-geometry="true"' in options[str(shared)]
