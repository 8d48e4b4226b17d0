"""The chart-spec page of a collection as the server renders it: the specs it lists (the collection's own and the
shared ones, never another collection's), the printed-grid form enabled for editors and disabled for viewers, and
the links that lead to it. Expected permissions: accounts/permissions.py (DIGITIZE writes chart specs)."""

from __future__ import annotations

import re

from fastapi.testclient import TestClient

from tests.browser.charts import strip_chart_png

GRID = {
    "kind": "cartesian",
    "x_axis": {"scale": "time", "frame": [0, 48], "minor_step": 2},
    "y_axis": {"scale": "linear", "frame": [0, 10], "minor_step": 1},
    "grid_colour": "#e8a48c",
}
TEMPLATE = {
    "kind": "cartesian",
    "x_axis": {"scale": "time"},
    "y_axis": {"scale": "linear", "unit": "m"},
    "control_points": [{"pixel": [60.0, 540.0], "value": [0, 0]}, {"pixel": [1140.0, 40.0], "value": [48, 10]}],
}
HTML = {"accept": "text/html"}


def _collection(client: TestClient, name: str) -> int:
    return int(client.post("/api/v1/collections", json={"name": name}).json()["id"])


def _spec(client: TestClient, name: str, collection_id: int | None, **parts: object) -> int:
    answer = client.post("/api/v1/chart-specs", json={"name": name, "collection_id": collection_id, **parts})
    assert answer.status_code == 201, answer.text
    return int(answer.json()["id"])


def _rows(html: str) -> dict[str, str]:
    """Each listed spec's table row, by spec id."""
    return dict(re.findall(r'<tr data-spec-row="(\d+)"[^>]*>(.*?)</tr>', html, re.S))


def _tag(html: str, marker: str) -> str:
    match = re.search(rf"<[a-z]+[^>]*{re.escape(marker)}[^>]*>", html)
    assert match, f"no element with {marker}"
    return match.group(0)


def test_the_page_lists_the_collections_own_and_the_shared_chart_specs(signed_in: dict[str, TestClient]) -> None:
    tech = signed_in["technician"]
    here, elsewhere = _collection(tech, "Level recorder"), _collection(tech, "Rain gauge")
    own = _spec(tech, "Level strip", here, calibration_template=TEMPLATE)
    shared = _spec(tech, "Strip paper, any box", None, geometry=GRID)
    foreign = _spec(tech, "Rain strip", elsewhere, geometry=GRID)

    page = tech.get(f"/collections/{here}/chart-specs")
    assert page.status_code == 200
    rows = _rows(page.text)
    # Same visibility rule as GET /api/v1/chart-specs?collection_id= (chart_specs.list_chart_specs).
    assert set(rows) == {str(own), str(shared)}, f"another collection's spec {foreign} must not be listed"
    assert "Level strip" in rows[str(own)] and "this collection" in rows[str(own)]
    assert "all collections" in rows[str(shared)] and "grid chart" in rows[str(shared)]
    # Columns: printed grid, calibration template (yes/no), then the version.
    assert re.search(
        r"<td>no</td>\s*<td><span class=\"badge ok\">yes</span></td>\s*<td class=\"num\">1</td>", rows[str(own)]
    )
    assert re.search(
        r"<td><span class=\"badge ok\">yes</span></td>\s*<td>no</td>\s*<td class=\"num\">1</td>", rows[str(shared)]
    )
    assert "Add its grid" in rows[str(own)] and "Edit grid" in rows[str(shared)]


def test_a_technician_gets_the_form_enabled(signed_in: dict[str, TestClient]) -> None:
    tech = signed_in["technician"]
    collection_id = _collection(tech, "Level recorder")
    html = tech.get(f"/collections/{collection_id}/chart-specs").text
    assert "disabled" not in _tag(html, "data-grid-fields")
    assert "disabled" not in _tag(html, "data-save")
    assert 'data-can-edit="true"' in html
    assert '<script type="module" src="/static/js/chart-specs/grid-page.js">' in html
    for field in (
        "x_axis.frame[0]",
        "y_axis.minor_step",
        "value_axis.decade_lines",
        "ring_radii_mm[1]",
        "colour_tolerance",
    ):
        assert f'name="{field}"' in html, f"the form has no {field} field"


def test_a_viewer_sees_the_list_read_only(signed_in: dict[str, TestClient]) -> None:
    tech, viewer = signed_in["technician"], signed_in["viewer"]
    collection_id = _collection(tech, "Level recorder")
    spec_id = _spec(tech, "Level recorder paper", collection_id, geometry=GRID)
    page = viewer.get(f"/collections/{collection_id}/chart-specs")
    assert page.status_code == 200
    html = page.text
    assert "Show grid" in _rows(html)[str(spec_id)]
    # A disabled fieldset disables every control inside it (HTML Living Standard, "the fieldset element").
    assert "disabled" in _tag(html, "data-grid-fields")
    assert "disabled" in _tag(html, "data-save") and "disabled" in _tag(html, "data-try ")
    assert 'data-can-edit="false"' in html and "Read only" in html


def test_the_try_list_offers_the_collections_sheets(signed_in: dict[str, TestClient]) -> None:
    tech = signed_in["technician"]
    collection_id = _collection(tech, "Level recorder")
    files = [("files", ("week-1.png", strip_chart_png(), "image/png"))]
    sheet_id = tech.post(f"/api/v1/collections/{collection_id}/sheets", files=files).json()["sheets"][0]["id"]
    html = tech.get(f"/collections/{collection_id}/chart-specs").text
    assert re.search(rf'<option value="{sheet_id}">week-1.png', html)
    assert "disabled" not in _tag(html, "data-try-run")


def test_an_unknown_collection_is_404(signed_in: dict[str, TestClient]) -> None:
    page = signed_in["viewer"].get("/collections/987654/chart-specs", headers=HTML)
    assert page.status_code == 404  # common practice: a missing resource is 404 (RFC 9110, 15.5.5)
    assert "no collection with id 987654" in page.text


def test_the_collection_page_and_the_workbench_link_to_it(signed_in: dict[str, TestClient]) -> None:
    tech = signed_in["technician"]
    collection_id = _collection(tech, "Level recorder")
    link = f'href="/collections/{collection_id}/chart-specs'
    assert link in tech.get(f"/collections/{collection_id}").text
    files = [("files", ("week-1.png", strip_chart_png(), "image/png"))]
    sheet_id = tech.post(f"/api/v1/collections/{collection_id}/sheets", files=files).json()["sheets"][0]["id"]
    workbench = tech.get(f"/sheets/{sheet_id}/workbench").text
    assert link in workbench and "Describe a printed grid" in workbench
