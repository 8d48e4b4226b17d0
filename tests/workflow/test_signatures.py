"""Approval as an electronic signature: password re-entry, meaning, printed name, UTC time, bound to the SHA-256 of
the sheet's canonical record; the four-eyes rule; a later edit voids the signature visibly."""

from __future__ import annotations

import hashlib
import json
from datetime import UTC, datetime

from fastapi.testclient import TestClient

from tests.conftest import PASSWORD
from tests.workflow.sheet_setup import act, add_trace, calibrate, new_sheets, pixel_of, user_id

Clients = dict[str, TestClient]


def _submitted_task(signed_in: Clients) -> tuple[int, int, dict[str, object]]:
    """A task digitized by the technician and submitted; returns (task id, sheet id, trace)."""
    tech, reviewer = signed_in["technician"], signed_in["reviewer"]
    collection_id, (sheet_id,) = new_sheets(reviewer, 1)
    body = {"technician_id": user_id(tech)}
    task_id = reviewer.post(f"/api/v1/collections/{collection_id}/tasks", json=body).json()["created"][0]["id"]
    act(tech, task_id, "start")
    calibrate(tech, sheet_id)
    trace = add_trace(tech, sheet_id, "level", [0, 6, 12, 18, 24], [2, 4, 3, 5, 4])
    fit = tech.post(f"/api/v1/traces/{trace['id']}/fits", json={"family": "polynomial", "degree": 1})
    assert fit.status_code == 201, fit.text
    assert act(tech, task_id, "submit").json()["state"] == "submitted"  # type: ignore[attr-defined]
    return task_id, sheet_id, trace


def test_approval_records_a_signature_bound_to_the_record_hash(signed_in: Clients) -> None:
    task_id, sheet_id, _ = _submitted_task(signed_in)
    reviewer = signed_in["reviewer"]
    before = datetime.now(UTC)
    response = reviewer.post(f"/api/v1/tasks/{task_id}/signatures", json={"password": PASSWORD, "meaning": "approved"})
    assert response.status_code == 201, response.text
    signature = response.json()
    assert signature["printed_name"] == "Rita" and signature["meaning"] == "approved" and signature["valid"]
    signed_at = datetime.fromisoformat(signature["signed_at"])
    assert signed_at.utcoffset().total_seconds() == 0 and signed_at >= before  # type: ignore[union-attr]
    record = reviewer.get(f"/api/v1/sheets/{sheet_id}/record").json()
    # The hash is SHA-256 of exactly the canonical bytes the service shows (FIPS 180-4 via hashlib).
    assert hashlib.sha256(record["canonical_json"].encode("utf-8")).hexdigest() == record["sha256"]
    assert signature["record_sha256"] == record["sha256"]
    content = json.loads(record["canonical_json"])
    assert content["calibration"]["version"] == 1 and content["traces"][0]["vertices"][0] == pixel_of(0, 2)
    assert content["fits"][0]["family"] == "polynomial"
    task = reviewer.get(f"/api/v1/tasks/{task_id}").json()
    assert task["state"] == "approved" and task["approved_at"] is not None
    assert reviewer.get(f"/api/v1/sheets/{sheet_id}").json()["status"] == "approved"
    assert "approved" in signed_in["technician"].get("/api/v1/notices").json()[0]["message"]


def test_a_later_edit_voids_the_signature_visibly(signed_in: Clients) -> None:
    task_id, _, trace = _submitted_task(signed_in)
    reviewer, tech = signed_in["reviewer"], signed_in["technician"]
    reviewer.post(f"/api/v1/tasks/{task_id}/signatures", json={"password": PASSWORD})
    etag = tech.get(f"/api/v1/traces/{trace['id']}").headers["etag"]
    vertices = list(trace["vertices"])  # type: ignore[call-overload]
    vertices[2] = pixel_of(12, 3.5)
    unexplained = tech.patch(f"/api/v1/traces/{trace['id']}", json={"vertices": vertices}, headers={"If-Match": etag})
    assert unexplained.status_code == 422 and "reason" in unexplained.json()["detail"]  # approved work: say why
    edited = tech.patch(
        f"/api/v1/traces/{trace['id']}",
        json={"vertices": vertices, "reason": "pen skipped at 12 h"},
        headers={"If-Match": etag},
    )
    assert edited.status_code == 200, edited.text
    (signature,) = reviewer.get(f"/api/v1/tasks/{task_id}/signatures").json()
    assert signature["valid"] is False
    assert f"trace {trace['id']} v1 → v2" in signature["void_reason"]
    page = reviewer.get(f"/tasks/{task_id}")
    assert "signature void" in page.text.lower() and f"trace {trace['id']} v1 → v2" in page.text


def test_the_author_and_the_assigned_technician_can_never_approve(signed_in: Clients) -> None:
    task_id, _, trace = _submitted_task(signed_in)
    reviewer, admin = signed_in["reviewer"], signed_in["admin"]
    # The reviewer touches the digitization (adds a fit): from now on they are one of its authors.
    fit = reviewer.post(f"/api/v1/traces/{trace['id']}/fits", json={"family": "polynomial", "degree": 2})
    assert fit.status_code == 201
    refused = reviewer.post(f"/api/v1/tasks/{task_id}/signatures", json={"password": PASSWORD})
    assert refused.status_code == 403
    assert refused.json()["code"] == "four_eyes" and "four-eyes" in refused.json()["detail"]
    assert reviewer.get(f"/api/v1/tasks/{task_id}").json()["state"] == "submitted"
    assert reviewer.get(f"/api/v1/tasks/{task_id}/signatures").json() == []
    page = reviewer.get(f"/tasks/{task_id}").text
    assert "four-eyes rule" in page and "Electronic signature" not in page  # the page says why, with no form
    approved = admin.post(f"/api/v1/tasks/{task_id}/signatures", json={"password": PASSWORD})
    assert approved.status_code == 201, approved.text

    # An admin assigned as the technician of another sheet cannot sign that one.
    collection_id, (sheet_id,) = new_sheets(reviewer, 1)
    body = {"technician_id": user_id(admin)}
    own = reviewer.post(f"/api/v1/collections/{collection_id}/tasks", json=body).json()["created"][0]["id"]
    act(admin, own, "start")
    calibrate(admin, sheet_id)
    add_trace(admin, sheet_id, "level", [0, 24], [1, 2])
    act(admin, own, "submit")
    refused = admin.post(f"/api/v1/tasks/{own}/signatures", json={"password": PASSWORD})
    assert refused.status_code == 403 and "another reviewer" in refused.json()["detail"]
    assert reviewer.post(f"/api/v1/tasks/{own}/signatures", json={"password": PASSWORD}).status_code == 201


def test_wrong_password_signing_twice_and_reopening(signed_in: Clients) -> None:
    task_id, _, _ = _submitted_task(signed_in)
    reviewer = signed_in["reviewer"]
    refused = reviewer.post(f"/api/v1/tasks/{task_id}/signatures", json={"password": "not my password"})
    assert refused.status_code == 403 and refused.json()["code"] == "signature_refused"
    assert reviewer.get(f"/api/v1/tasks/{task_id}").json()["state"] == "submitted"
    history = reviewer.get(f"/api/v1/audit/history/task/{task_id}").json()
    assert history[-1]["action"] == "sign_refused"
    technician = signed_in["technician"]
    assert technician.post(f"/api/v1/tasks/{task_id}/signatures", json={"password": PASSWORD}).status_code == 403

    reviewed = reviewer.post(f"/api/v1/tasks/{task_id}/signatures", json={"password": PASSWORD, "meaning": "reviewed"})
    assert reviewed.status_code == 201 and reviewer.get(f"/api/v1/tasks/{task_id}").json()["state"] == "submitted"
    assert reviewer.post(f"/api/v1/tasks/{task_id}/signatures", json={"password": PASSWORD}).status_code == 201
    again = reviewer.post(f"/api/v1/tasks/{task_id}/signatures", json={"password": PASSWORD})
    assert again.status_code == 409
    assert act(reviewer, task_id, "reopen").status_code == 422  # type: ignore[attr-defined]
    reopened = act(reviewer, task_id, "reopen", "a late correction of the calibration")
    assert reopened.json()["state"] == "open"  # type: ignore[attr-defined]
    signatures = reviewer.get(f"/api/v1/tasks/{task_id}/signatures").json()
    assert [s["valid"] for s in signatures] == [False, False]
    assert all("a late correction" in s["void_reason"] for s in signatures)
