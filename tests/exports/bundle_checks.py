"""Starting a bundle job through the API, waiting for it, and checking a ZIP against the stored records."""

from __future__ import annotations

import csv
import io
import json
import zipfile
from typing import Any

from fastapi.testclient import TestClient


def start_bundle(client: TestClient, collection_id: int, **body: Any) -> int:
    response = client.post(f"/api/v1/collections/{collection_id}/bundles", json=body)
    assert response.status_code == 202, response.text
    job_id = int(response.json()["id"])
    assert response.headers["location"] == f"/api/v1/jobs/{job_id}"
    return job_id


def collection_exports(admin: TestClient, collection_id: int) -> list[dict[str, Any]]:
    """The collection's "export" audit events, oldest first, as the audit API shows them."""
    events = admin.get(f"/api/v1/audit/history/collection/{collection_id}").json()
    return [event for event in events if event["action"] == "export"]


def check_against_stored(client: TestClient, archive: zipfile.ZipFile, sheet_ids: list[int], trace_id: int) -> None:
    """The ZIP's provenance, vertices and fitted equations equal what the API serves for the same records."""
    assert archive.testzip() is None
    provenance = json.loads(archive.read("provenance.json"))
    assert [sheet["id"] for sheet in provenance["sheets"]] == sheet_ids
    first = provenance["sheets"][0]
    assert first["source_sha256"] == client.get(f"/api/v1/sheets/{sheet_ids[0]}").json()["sha256"]
    assert first["record_sha256"] == client.get(f"/api/v1/sheets/{sheet_ids[0]}/record").json()["sha256"]
    assert [trace["id"] for trace in first["traces"]] == [trace_id]
    vertices = archive.read(f"sheet-{sheet_ids[0]}/trace-{trace_id}-vertices.csv")
    assert vertices == client.get(f"/api/v1/traces/{trace_id}/vertices.csv").content
    fits = list(csv.reader(io.StringIO(archive.read("fits.csv").decode("utf-8"), newline="")))
    selection = {"sheet_ids": ",".join(map(str, sheet_ids))}
    collection_id = provenance["collection"]["id"]
    served = client.get(f"/api/v1/collections/{collection_id}/fits.csv", params=selection).content.decode("utf-8")
    assert fits == list(csv.reader(io.StringIO(served, newline="")))
    for sheet_id in sheet_ids:
        assert f"sheet-{sheet_id}/overlay.png" in archive.namelist()
