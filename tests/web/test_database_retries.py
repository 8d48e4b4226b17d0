"""Serialization failures and deadlocks: an autosave is retried whole; when retries run out nothing is stored.

PostgreSQL reports a serialization failure as SQLSTATE 40001 and a deadlock as 40P01 (PostgreSQL documentation,
"Serialization Failure Handling", and Appendix A "PostgreSQL Error Codes"); its advice is to retry the whole
transaction. The failure is injected at the audit step, the last write of a save, so a retry that was not all or
nothing would leave a second audit event or a skipped version behind.
"""

from __future__ import annotations

from typing import Any

import pytest
from fastapi.testclient import TestClient
from sqlalchemy import func, select
from sqlalchemy.exc import OperationalError

from tests.archive.scans import png_bytes
from tracedesk.db import SERIALIZATION_RETRIES, transaction
from tracedesk.digitizing import traces as trace_service
from tracedesk.models import AuditEvent
from tracedesk.web.state import AppState


class SerializationFailure(Exception):
    sqlstate = "40001"


class UniqueViolation(Exception):
    sqlstate = "23505"


def _fail_first(monkeypatch: pytest.MonkeyPatch, times: int, cause: type[Exception]) -> list[int]:
    """Make the first ``times`` audit writes of a trace update raise ``cause`` as the database driver would."""
    calls: list[int] = []
    real = trace_service.record_event

    def flaky(*args: Any, **kwargs: Any) -> Any:
        calls.append(1)
        if len(calls) <= times:
            raise OperationalError("UPDATE audit_chain_head ...", {}, cause())
        return real(*args, **kwargs)

    monkeypatch.setattr(trace_service, "record_event", flaky)
    return calls


def _trace(client: TestClient) -> tuple[int, str]:
    collection = client.post("/api/v1/collections", json={"name": "Retries"}).json()["id"]
    upload = client.post(
        f"/api/v1/collections/{collection}/sheets", files=[("files", ("r.png", png_bytes(), "image/png"))]
    )
    sheet = upload.json()["sheets"][0]["id"]
    created = client.post(f"/api/v1/sheets/{sheet}/traces", json={"name": "pen", "vertices": [[10, 10], [20, 12]]})
    assert created.status_code == 201, created.text
    return int(created.json()["id"]), created.headers["etag"]


def _trace_updates(state: AppState) -> int:
    with transaction(state.reader) as session:
        query = select(func.count()).select_from(AuditEvent).where(AuditEvent.action == "update")
        return int(session.scalar(query.where(AuditEvent.entity_type == "trace")) or 0)


def test_a_save_that_meets_a_serialization_failure_is_retried_once_and_stored_once(
    signed_in: dict[str, TestClient], state: AppState, monkeypatch: pytest.MonkeyPatch
) -> None:
    tech = signed_in["technician"]
    trace_id, etag = _trace(tech)
    calls = _fail_first(monkeypatch, 2, SerializationFailure)
    saved = tech.patch(
        f"/api/v1/traces/{trace_id}", json={"vertices": [[10, 10], [30, 15]]}, headers={"If-Match": etag}
    )
    assert saved.status_code == 200, saved.text
    assert len(calls) == 3  # two failures, then the attempt that committed
    assert saved.json()["version"] == 2 and saved.json()["vertices"] == [[10, 10], [30, 15]]
    assert _trace_updates(state) == 1


def test_when_retries_run_out_the_answer_is_503_and_nothing_is_stored(
    signed_in: dict[str, TestClient], state: AppState, monkeypatch: pytest.MonkeyPatch
) -> None:
    tech = signed_in["technician"]
    trace_id, etag = _trace(tech)
    calls = _fail_first(monkeypatch, SERIALIZATION_RETRIES, SerializationFailure)
    refused = tech.patch(f"/api/v1/traces/{trace_id}", json={"vertices": [[1, 1], [2, 2]]}, headers={"If-Match": etag})
    assert refused.status_code == 503, refused.text
    assert refused.headers["retry-after"] == "1" and "nothing was saved" in refused.json()["detail"]
    assert len(calls) == SERIALIZATION_RETRIES
    stored = tech.get(f"/api/v1/traces/{trace_id}").json()
    assert stored["version"] == 1 and stored["vertices"] == [[10, 10], [20, 12]]
    assert _trace_updates(state) == 0


def test_other_database_errors_are_not_retried(
    app: Any, signed_in: dict[str, TestClient], state: AppState, monkeypatch: pytest.MonkeyPatch
) -> None:
    tech = signed_in["technician"]
    trace_id, etag = _trace(tech)
    calls = _fail_first(monkeypatch, 1, UniqueViolation)
    with TestClient(app, raise_server_exceptions=False) as quiet:
        quiet.cookies = tech.cookies
        quiet.headers.update(tech.headers)
        failed = quiet.patch(f"/api/v1/traces/{trace_id}", json={"vertices": [[1, 1]]}, headers={"If-Match": etag})
    assert failed.status_code == 500
    assert len(calls) == 1
    assert _trace_updates(state) == 0
