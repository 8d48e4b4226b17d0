"""Audit views: the filtered admin log page and the audit trail as CSV, checked against the audit API."""

from __future__ import annotations

import csv
import io
import json
from datetime import UTC, datetime, timedelta

from fastapi.testclient import TestClient

from tests.workflow.sheet_setup import new_sheets

Clients = dict[str, TestClient]


def test_audit_csv_and_the_filtered_log_page(signed_in: Clients) -> None:
    admin = signed_in["admin"]
    collection_id, _ = new_sheets(signed_in["technician"], 1)
    events = admin.get("/api/v1/audit/events", params={"entity_type": "collection"}).json()
    response = admin.get("/api/v1/audit/export.csv", params={"entity_type": "collection"})
    assert response.status_code == 200 and response.headers["content-type"] == "text/csv; charset=utf-8"
    header, *rows = list(csv.reader(io.StringIO(response.content.decode("utf-8"), newline="")))
    assert header[:2] == ["sequence", "occurred at (ISO 8601, UTC)"]
    assert [int(row[0]) for row in rows] == [event["seq"] for event in events]
    assert [row[-1] for row in rows] == [event["hash"] for event in events]
    assert json.loads(rows[0][8]) == events[0]["changes"]  # the changes column is JSON text, parsed back equal
    assert rows[0][5] == "collection" and rows[0][6] == str(collection_id)
    assert datetime.fromisoformat(rows[0][1]).utcoffset() == timedelta(0)
    today = datetime.now(UTC).date()
    none_before = admin.get("/api/v1/audit/export.csv", params={"until": (today - timedelta(days=1)).isoformat()})
    assert none_before.content.decode("utf-8").count("\r\n") == 1  # the header only
    exports = admin.get("/api/v1/audit/events", params={"action": "export"}).json()
    assert exports[0]["entity_type"] == "audit_trail" and exports[0]["changes"]["rows"]["new"] == len(rows)
    assert signed_in["reviewer"].get("/api/v1/audit/export.csv").status_code == 403

    page = admin.get("/admin/audit/log", params={"entity_type": "collection", "action": "create"})
    assert page.status_code == 200
    assert "1 matching event(s)" in page.text and "/api/v1/audit/export.csv?entity_type=collection" in page.text
    everything = admin.get("/admin/audit/log").text
    assert "login" in everything and "Check the hash chain" in everything
    assert signed_in["technician"].get("/admin/audit/log", headers={"accept": "text/html"}).status_code == 403
