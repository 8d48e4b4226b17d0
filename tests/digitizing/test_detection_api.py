"""Chart specs and automatic registration through the API (issue 9): a rendered chart with a known grid is
registered with no click; the proposal is stored only when accepted; a blank page is refused with a reason."""

from __future__ import annotations

import io

import numpy as np
from fastapi.testclient import TestClient
from PIL import Image

from tests.science.grid_charts import PrintedChart, render_chart, rotation
from tests.science.test_grid_registration import BLUE, BOX, SPEC_JSON, H, W, _spec


def _png(pixels: np.ndarray) -> bytes:
    buffer = io.BytesIO()
    Image.fromarray(pixels).save(buffer, format="PNG")
    return buffer.getvalue()


def _upload(client: TestClient, pixels: np.ndarray, name: str) -> int:
    collection = client.post("/api/v1/collections", json={"name": f"Charts {name}"}).json()["id"]
    response = client.post(
        f"/api/v1/collections/{collection}/sheets", files=[("files", (name, _png(pixels), "image/png"))]
    )
    assert response.status_code == 201, response.text
    return int(response.json()["sheets"][0]["id"])


def test_chart_spec_detect_propose_then_accept(signed_in: dict[str, TestClient]) -> None:
    tech = signed_in["technician"]
    chart = PrintedChart(_spec(), BOX, rotation(1.5, width=W, height=H))
    pens = [chart.pen(lambda x: 20 + 10 * np.sin(x / 4), colour=BLUE)]
    sheet_id = _upload(tech, render_chart(chart, width=W, height=H, pens=pens), "rotated.png")
    created = tech.post("/api/v1/chart-specs", json={"name": "Daily pressure chart", "geometry": SPEC_JSON})
    assert created.status_code == 201, created.text
    spec_id = created.json()["id"]
    assert created.json()["kind"] == "cartesian"

    proposal = tech.post(f"/api/v1/sheets/{sheet_id}/calibration/detect", json={"chart_spec_id": spec_id})
    assert proposal.status_code == 200, proposal.text
    body = proposal.json()
    assert body["stored"] is False and body["confidence"] > 0.5
    points = body["control_points"]
    truth = chart.truth(np.array([p["value"] for p in points], dtype=float))
    error = np.array([p["pixel"] for p in points]) - truth
    assert np.sqrt(np.mean(np.sum(error**2, axis=1))) < 0.5  # issue 9: within 0.5 px RMS of true intersections
    assert tech.get(f"/api/v1/sheets/{sheet_id}/calibration").status_code == 422  # nothing stored yet

    accepted = tech.post(
        f"/api/v1/sheets/{sheet_id}/calibration/detect", json={"chart_spec_id": spec_id, "accept": True}
    )
    assert accepted.status_code == 200 and accepted.json()["stored"] is True
    stored = tech.get(f"/api/v1/sheets/{sheet_id}/calibration").json()
    assert stored["origin"] == "automatic" and stored["rms_px"] < 0.5
    history = tech.get(f"/api/v1/audit/history/calibration/{sheet_id}").json()
    assert "automatic registration" in history[-1]["reason"]


def test_detection_refuses_a_blank_page_and_bad_specs(signed_in: dict[str, TestClient]) -> None:
    tech = signed_in["technician"]
    sheet_id = _upload(tech, np.full((H, W, 3), 250, dtype=np.uint8), "blank.png")
    refused = tech.post(f"/api/v1/sheets/{sheet_id}/calibration/detect", json={"spec": SPEC_JSON, "accept": True})
    assert refused.status_code == 422 and refused.json()["detail"]
    assert tech.get(f"/api/v1/sheets/{sheet_id}/calibration").status_code == 422
    bad = tech.post("/api/v1/chart-specs", json={"name": "x", "geometry": {**SPEC_JSON, "x_axis": {"scale": "wobbly"}}})
    assert bad.status_code == 422 and "x_axis" in bad.text
    neither = tech.post("/api/v1/chart-specs", json={"name": "x"})
    assert neither.status_code == 422
    assert signed_in["viewer"].post("/api/v1/chart-specs", json={"name": "v", "geometry": SPEC_JSON}).status_code == 403
