"""The workbench page as the server renders it (what a browser without JavaScript sees) and its links."""

from __future__ import annotations

import json
import re

import numpy as np
from fastapi.testclient import TestClient

from tests.browser.charts import STRIP, strip_chart_png, strip_truth


def _sheet(client: TestClient) -> int:
    collection_id = client.post("/api/v1/collections", json={"name": "Pages"}).json()["id"]
    files = [("files", ("level.png", strip_chart_png(), "image/png"))]
    return int(client.post(f"/api/v1/collections/{collection_id}/sheets", files=files).json()["sheets"][0]["id"])


def _initial(html: str) -> dict[str, object]:
    match = re.search(r'<script type="application/json" id="wb-initial">(.*?)</script>', html, re.S)
    assert match, "the page carries no initial state"
    return dict(json.loads(match.group(1)))


def test_the_sheet_page_links_to_its_workbench(signed_in: dict[str, TestClient]) -> None:
    tech = signed_in["technician"]
    sheet_id = _sheet(tech)
    assert f'href="/sheets/{sheet_id}/workbench"' in tech.get(f"/sheets/{sheet_id}").text


def test_workbench_shell_for_a_technician_and_read_only_for_a_viewer(signed_in: dict[str, TestClient]) -> None:
    tech = signed_in["technician"]
    sheet_id = _sheet(tech)
    page = tech.get(f"/sheets/{sheet_id}/workbench")
    assert page.status_code == 200
    assert (
        'data-can-edit="true"' in page.text and f'data-tiles="/api/v1/sheets/{sheet_id}/tiles/sheet.dzi"' in page.text
    )
    assert '<script type="module" src="/static/js/workbench/workbench.js">' in page.text
    assert _initial(page.text) == {"calibration": None}
    assert "not calibrated yet" in page.text
    viewer = signed_in["viewer"].get(f"/sheets/{sheet_id}/workbench")
    assert 'data-can-edit="false"' in viewer.text and "Read only" in viewer.text


def test_without_javascript_the_page_lists_calibration_traces_fits_and_csv_links(
    signed_in: dict[str, TestClient],
) -> None:
    tech = signed_in["technician"]
    sheet_id = _sheet(tech)
    corners = [(0.0, 0.0), (48.0, 0.0), (48.0, 10.0), (0.0, 10.0)]
    points = [
        {"pixel": STRIP.data_to_pixel(np.array([x]), np.array([y]))[0].tolist(), "value": [x, y]} for x, y in corners
    ]
    tech.put(
        f"/api/v1/sheets/{sheet_id}/calibration",
        json={
            "kind": "cartesian",
            "x_axis": {"scale": "time"},
            "y_axis": {"scale": "linear"},
            "control_points": points,
        },
    )
    x = np.linspace(1.0, 47.0, 30)
    trace = tech.post(
        f"/api/v1/sheets/{sheet_id}/traces",
        json={"name": "tank level", "unit": "m", "vertices": STRIP.data_to_pixel(x, strip_truth(x)).tolist()},
    ).json()
    tech.post(f"/api/v1/traces/{trace['id']}/fits", json={"family": "polynomial", "degree": 2})
    page = tech.get(f"/sheets/{sheet_id}/workbench").text
    assert _initial(page)["calibration"]["version"] == 1  # type: ignore[index]
    assert "Saved as version 1" in page and "tank level" in page and "30 vertices" in page
    link = f"/api/v1/traces/{trace['id']}/resampled.csv?count=200"
    assert f'href="{link}"' in page
    csv = tech.get(link)
    assert csv.status_code == 200 and csv.text.splitlines()[0].startswith("x [h],tank level [m],flag,")
    assert len(csv.text.splitlines()) == 201
    assert "x^{2}" not in page and "*x^2" in page  # the fit's equation as plain text


def test_signed_out_visitors_are_sent_to_the_login(client: TestClient) -> None:
    answer = client.get("/sheets/1/workbench", headers={"accept": "text/html"}, follow_redirects=False)
    assert answer.status_code == 303 and answer.headers["location"].startswith("/login?next=")
