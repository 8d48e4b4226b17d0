"""Collections and sheets: keyset pagination, search, metadata edits with If-Match, and their audit trail."""

from __future__ import annotations

from fastapi.testclient import TestClient

from tests.archive.scans import png_bytes


def _setup(client: TestClient, count: int) -> tuple[int, list[dict[str, object]]]:
    collection_id = client.post("/api/v1/collections", json={"name": "Box 7"}).json()["id"]
    parts = [
        ("files", (f"sheet-{i:02d}.png", png_bytes(seed=i, width=200, height=120), "image/png")) for i in range(count)
    ]
    sheets = client.post(f"/api/v1/collections/{collection_id}/sheets", files=parts).json()["sheets"]
    return collection_id, sheets


def test_keyset_pages_cover_every_sheet_once(signed_in: dict[str, TestClient]) -> None:
    tech = signed_in["technician"]
    collection_id, sheets = _setup(tech, 7)
    seen: list[int] = []
    cursor = None
    while True:
        params: dict[str, object] = {"collection_id": collection_id, "limit": 3}
        if cursor:
            params["cursor"] = cursor
        page = tech.get("/api/v1/sheets", params=params).json()
        seen += [item["id"] for item in page["items"]]
        cursor = page["next_cursor"]
        if not cursor:
            break
    assert seen == sorted(int(s["id"]) for s in sheets)  # type: ignore[call-overload]
    assert tech.get("/api/v1/sheets", params={"cursor": "garbage!"}).status_code == 422


def test_search_finds_by_file_name_and_tag(signed_in: dict[str, TestClient]) -> None:
    tech = signed_in["technician"]
    collection_id, sheets = _setup(tech, 3)
    sheet = sheets[1]
    etag = tech.get(f"/api/v1/sheets/{sheet['id']}").headers["etag"]
    tech.patch(f"/api/v1/sheets/{sheet['id']}", json={"tags": ["flood week"]}, headers={"If-Match": etag})
    found = tech.get("/api/v1/sheets", params={"collection_id": collection_id, "q": "FLOOD"}).json()["items"]
    assert [item["id"] for item in found] == [sheet["id"]]
    by_name = tech.get("/api/v1/sheets", params={"q": "sheet-02"}).json()["items"]
    assert [item["filename"] for item in by_name] == ["sheet-02.png"]


def test_metadata_edit_needs_if_match_and_detects_stale_versions(signed_in: dict[str, TestClient]) -> None:
    tech, other = signed_in["technician"], signed_in["technician2"]
    _, sheets = _setup(tech, 1)
    url = f"/api/v1/sheets/{sheets[0]['id']}"
    assert tech.patch(url, json={"station": "Intake 2"}).status_code == 428
    etag = tech.get(url).headers["etag"]
    first = other.patch(url, json={"station": "Intake 2"}, headers={"If-Match": etag})
    assert first.status_code == 200 and first.json()["version"] == 2
    stale = tech.patch(url, json={"station": "Intake 3"}, headers={"If-Match": etag})
    assert stale.status_code == 412
    assert tech.get(url).json()["station"] == "Intake 2"
    history = tech.get(f"/api/v1/audit/history/sheet/{sheets[0]['id']}").json()
    assert [event["action"] for event in history] == ["create", "update"]
    assert history[1]["changes"]["station"] == {"old": "", "new": "Intake 2"}
    assert history[1]["actor_name"] == "Tess"


def test_viewer_reads_but_cannot_create(signed_in: dict[str, TestClient]) -> None:
    assert signed_in["viewer"].post("/api/v1/collections", json={"name": "Nope"}).status_code == 403
    signed_in["technician"].post("/api/v1/collections", json={"name": "Visible"})
    names = [c["name"] for c in signed_in["viewer"].get("/api/v1/collections").json()]
    assert names == ["Visible"]


def test_collection_names_are_unique_ignoring_case(signed_in: dict[str, TestClient]) -> None:
    tech = signed_in["technician"]
    assert tech.post("/api/v1/collections", json={"name": "Gauge A"}).status_code == 201
    response = tech.post("/api/v1/collections", json={"name": "gauge a"})
    assert response.status_code == 409 and "exists" in response.json()["detail"]
