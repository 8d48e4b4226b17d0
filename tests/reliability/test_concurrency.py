"""Two people never silently overwrite each other; parallel uploads of one file give exactly one sheet.

RFC 9110 sec. 13.1.1 (If-Match) and RELIABILITY.md: missing If-Match -> 428, stale -> 412. The parallel cases
hold every request at a barrier right after its If-Match check (or right before its upload's write transaction),
so all of them have read the same version before any writes: the race is forced, not left to chance.
"""

from __future__ import annotations

import contextlib
import threading
from collections.abc import Callable, Iterator
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from typing import Any

import pytest
from fastapi.testclient import TestClient
from httpx import Response
from sqlalchemy import func, select

from tests.archive.scans import png_bytes
from tests.conftest import PASSWORD
from tests.reliability.campaign import (
    Campaign,
    chain_verifies,
    etag_of,
    missing_files,
    new_collection,
    row_counts,
    stored_files,
    sweep_now,
    upload,
)
from tests.reliability.conftest import Figures
from tests.reliability.records import CALIBRATION, Records, make_records
from tracedesk.db import transaction
from tracedesk.models import AuditEvent
from tracedesk.web import conditional

PARALLEL = 6


@pytest.fixture(scope="module")
def records(campaign: Campaign) -> Records:
    return make_records(campaign.client("technician"), name="Concurrency box", seed=101)


@dataclass(frozen=True)
class Editable:
    """How to change one kind of record: its URL, method, the role that may, and a body that says ``label``;
    ``fingerprint`` reads back from the record which label's change it holds."""

    kind: str
    method: str
    url: Callable[[Campaign, Records], str]
    role: str
    body: Callable[[str], dict[str, Any]]
    fingerprint: Callable[[dict[str, Any]], str]
    entity: Callable[[Campaign, Records], tuple[str, str]]


LABEL_SHIFTS = {"no-precondition": 1.0, "first-writer": 2.0, "second-writer": 3.0}


def _shift(label: str) -> float:
    return LABEL_SHIFTS.get(label) or 4.0 + int(label.rsplit("-", 1)[1])


def _calibration_body(label: str) -> dict[str, Any]:
    points = [dict(point) for point in CALIBRATION["control_points"]]  # type: ignore[union-attr]
    points[0] = {"pixel": [40.5 + _shift(label), 360.5], "value": [0, 0]}
    return {**CALIBRATION, "control_points": points, "reason": label}


def _calibration_fingerprint(body: dict[str, Any]) -> str:
    shift = round(float(body["spec"]["control_points"][0]["pixel"][0]) - 40.5, 6)
    labels = [label for label in (*LABEL_SHIFTS, *(f"writer-{i}" for i in range(PARALLEL))) if _shift(label) == shift]
    return labels[0] if labels else f"unknown shift {shift}"


EDITABLE = [
    Editable(
        "sheet",
        "PATCH",
        lambda c, r: f"/api/v1/sheets/{r.sheet_id}",
        "technician",
        lambda label: {"notes": label, "reason": "concurrency test"},
        lambda body: str(body["notes"]),
        lambda c, r: ("sheet", str(r.sheet_id)),
    ),
    Editable(
        "trace",
        "PATCH",
        lambda c, r: f"/api/v1/traces/{r.trace_id}",
        "technician",
        lambda label: {"name": label},
        lambda body: str(body["name"]),
        lambda c, r: ("trace", str(r.trace_id)),
    ),
    Editable(
        "calibration",
        "PUT",
        lambda c, r: f"/api/v1/sheets/{r.sheet_id}/calibration",
        "technician",
        _calibration_body,
        _calibration_fingerprint,
        lambda c, r: ("calibration", str(r.sheet_id)),
    ),
    Editable(
        "collection",
        "PATCH",
        lambda c, r: f"/api/v1/collections/{r.collection_id}",
        "reviewer",
        lambda label: {"description": label},
        lambda body: str(body["description"]),
        lambda c, r: ("collection", str(r.collection_id)),
    ),
    Editable(
        "user",
        "PATCH",
        lambda c, r: f"/api/v1/users/{c.members['viewer'].user_id}",
        "admin",
        lambda label: {"display_name": label},
        lambda body: str(body["display_name"]),
        lambda c, r: ("user", str(c.members["viewer"].user_id)),
    ),
]


def _events_about(campaign: Campaign, entity: tuple[str, str]) -> int:
    with transaction(campaign.state.reader) as session:
        query = select(func.count()).where(AuditEvent.entity_type == entity[0], AuditEvent.entity_id == entity[1])
        return int(session.scalar(query) or 0)


def _current(client: TestClient, editable: Editable, campaign: Campaign, records: Records) -> str:
    """Which label's change the record holds now."""
    if editable.kind == "user":
        users = client.get("/api/v1/users").json()
        return editable.fingerprint(next(u for u in users if u["id"] == campaign.members["viewer"].user_id))
    return editable.fingerprint(client.get(editable.url(campaign, records)).json())


def _etag(client: TestClient, editable: Editable, campaign: Campaign, records: Records) -> str:
    if editable.kind != "user":
        return etag_of(client, editable.url(campaign, records))
    user = next(u for u in client.get("/api/v1/users").json() if u["id"] == campaign.members["viewer"].user_id)
    return f'"user-{user["id"]}-v{user["version"]}"'


def _send(client: TestClient, editable: Editable, url: str, label: str, etag: str | None) -> Response:
    headers = {"If-Match": etag} if etag else {}
    return client.request(editable.method, url, json=editable.body(label), headers=headers)


@pytest.mark.parametrize("editable", EDITABLE, ids=[e.kind for e in EDITABLE])
def test_second_writer_with_a_stale_etag_gets_412_and_changes_nothing(
    campaign: Campaign, records: Records, figures: Figures, editable: Editable
) -> None:
    first, second = campaign.client(editable.role), campaign.client(editable.role)
    url = editable.url(campaign, records)
    etag = _etag(first, editable, campaign, records)
    assert _etag(second, editable, campaign, records) == etag
    events_before = _events_about(campaign, editable.entity(campaign, records))
    outcomes = {
        "without If-Match": _send(second, editable, url, "no-precondition", None).status_code,
        "first writer": _send(first, editable, url, "first-writer", etag).status_code,
        "second writer": _send(second, editable, url, "second-writer", etag).status_code,
    }
    expected = {"without If-Match": 428, "first writer": 200, "second writer": 412}
    kept = _current(first, editable, campaign, records)
    events = _events_about(campaign, editable.entity(campaign, records)) - events_before
    failures = sum(outcomes[name] != code for name, code in expected.items()) + (kept != "first-writer")
    figures.add(cases=len(expected) + 1, failures=failures + (events != 1), data_lost=int(kept != "first-writer"))
    assert outcomes == expected
    assert kept == "first-writer"
    assert events == 1  # one audited change, for the winner only


@pytest.fixture
def held_after_if_match(monkeypatch: pytest.MonkeyPatch) -> Iterator[threading.Barrier]:
    """Make every If-Match check wait until PARALLEL requests passed theirs (SQLite serialises writers, so the
    barrier times out there and the requests simply run one after the other)."""
    barrier = threading.Barrier(PARALLEL, timeout=2.0)
    original = conditional.require_if_match

    def checked_then_held(*args: Any, **kwargs: Any) -> None:
        original(*args, **kwargs)
        with contextlib.suppress(threading.BrokenBarrierError):
            barrier.wait()

    for module in ("tracedesk.archive.api", "tracedesk.digitizing.api", "tracedesk.accounts.api"):
        monkeypatch.setattr(f"{module}.require_if_match", checked_then_held)
    return barrier


def _in_parallel(calls: list[Callable[[], Response]]) -> list[Response]:
    with ThreadPoolExecutor(max_workers=len(calls)) as pool:
        return list(pool.map(lambda call: call(), calls))


@pytest.mark.parametrize("editable", EDITABLE, ids=[e.kind for e in EDITABLE])
def test_parallel_writers_with_one_etag_give_exactly_one_winner(
    campaign: Campaign,
    records: Records,
    figures: Figures,
    editable: Editable,
    held_after_if_match: threading.Barrier,
) -> None:
    clients = [campaign.client(editable.role) for _ in range(PARALLEL)]
    url = editable.url(campaign, records)
    etag = _etag(clients[0], editable, campaign, records)
    events_before = _events_about(campaign, editable.entity(campaign, records))
    labels = [f"writer-{index}" for index in range(PARALLEL)]
    calls = [
        (lambda client=client, label=label: _send(client, editable, url, label, etag))
        for client, label in zip(clients, labels, strict=True)
    ]
    responses = _in_parallel(calls)
    statuses = [response.status_code for response in responses]
    winners = [label for label, status in zip(labels, statuses, strict=True) if status == 200]
    kept = _current(clients[0], editable, campaign, records)
    events = _events_about(campaign, editable.entity(campaign, records)) - events_before
    refused_cleanly = all(status in {200, 409, 412} for status in statuses)
    lost = int(len(winners) != 1 or kept not in winners)
    figures.add(cases=PARALLEL, failures=lost + (not refused_cleanly) + (events != 1), data_lost=lost)
    assert refused_cleanly, statuses
    assert len(winners) == 1, statuses
    assert kept == winners[0]
    assert events == 1
    assert chain_verifies(campaign.state)


@pytest.fixture
def held_before_writing(campaign: Campaign, monkeypatch: pytest.MonkeyPatch) -> threading.Barrier:
    """Hold each upload after its files are stored and just before its write transaction opens."""
    from tracedesk.archive import ingest

    barrier = threading.Barrier(PARALLEL, timeout=5.0)
    original = ingest.transaction
    seen = threading.local()

    def held(factory: Any) -> Any:
        if factory is campaign.state.writer and not getattr(seen, "held", False):
            seen.held = True  # only the first attempt; a retry after a unique-key violation goes straight on
            with contextlib.suppress(threading.BrokenBarrierError):
                barrier.wait()
        return original(factory)

    monkeypatch.setattr(ingest, "transaction", held)
    return barrier


def test_parallel_uploads_of_one_file_to_one_collection_give_one_sheet(
    campaign: Campaign, figures: Figures, held_before_writing: threading.Barrier
) -> None:
    clients = [campaign.client("technician") for _ in range(PARALLEL)]
    collection_id = new_collection(clients[0], "Parallel uploads, one collection")
    data = png_bytes(seed=202)
    before = row_counts(campaign.state)
    responses = _in_parallel(
        [
            (lambda c=client, i=index: upload(c, collection_id, f"copy-{i}.png", data))
            for index, client in enumerate(clients)
        ]
    )
    statuses = sorted(response.status_code for response in responses)
    winner = next(response for response in responses if response.status_code == 201)
    sheet_id = winner.json()["sheets"][0]["id"]
    refusals = [response.json()["refused"][0]["reason"] for response in responses if response.status_code == 409]
    after = row_counts(campaign.state)
    original = clients[0].get(f"/api/v1/sheets/{sheet_id}/original")
    lost = len(missing_files(campaign.state)) + int(original.status_code != 200 or original.content != data)
    new_sheets = after["sheets"] - before["sheets"]
    failures = int(statuses != [201] + [409] * (PARALLEL - 1)) + int(new_sheets != 1) + lost
    figures.add(cases=PARALLEL, failures=failures, data_lost=lost)
    assert statuses == [201] + [409] * (PARALLEL - 1)
    assert all(f"#{sheet_id}" in reason for reason in refusals)
    assert new_sheets == 1 and after["source_files"] - before["source_files"] == 1
    assert lost == 0
    assert chain_verifies(campaign.state)
    files_before_sweep = stored_files(campaign.state)
    sweep_now(campaign.state)
    assert missing_files(campaign.state) == []
    assert stored_files(campaign.state) <= files_before_sweep


def test_parallel_uploads_of_one_file_to_several_collections_share_one_original(
    campaign: Campaign, figures: Figures, held_before_writing: threading.Barrier
) -> None:
    clients = [campaign.client("technician") for _ in range(PARALLEL)]
    collections = [new_collection(clients[0], f"Parallel uploads, box {index}") for index in range(PARALLEL)]
    data = png_bytes(seed=303)
    before = row_counts(campaign.state)
    responses = _in_parallel(
        [
            (lambda c=client, k=collection: upload(c, k, "shared.png", data))
            for client, collection in zip(clients, collections, strict=True)
        ]
    )
    statuses = [response.status_code for response in responses]
    after = row_counts(campaign.state)
    lost = len(missing_files(campaign.state))
    failures = sum(status != 201 for status in statuses) + lost
    figures.add(cases=PARALLEL, failures=failures, data_lost=lost)
    assert statuses == [201] * PARALLEL, [response.text for response in responses]
    assert after["sheets"] - before["sheets"] == PARALLEL
    assert after["source_files"] - before["source_files"] == 1
    assert lost == 0
    assert chain_verifies(campaign.state)


APPROVERS = 50


def test_fifty_parallel_approvals_through_the_api_give_exactly_one(campaign: Campaign, figures: Figures) -> None:
    """RELIABILITY.md: "50 parallel approvals -> exactly 1 success", here through HTTP with each request's own
    transaction (tests/workflow checks the same at the service level)."""
    technician, reviewer = campaign.client("technician"), campaign.client("reviewer")
    records = make_records(technician, name="Approval race", seed=404)
    body = {"sheet_ids": [records.sheet_id], "technician_id": campaign.members["technician"].user_id}
    assert reviewer.post(f"/api/v1/collections/{records.collection_id}/tasks", json=body).status_code == 201
    task_id = reviewer.get(f"/api/v1/sheets/{records.sheet_id}/task").json()["id"]
    for action in ("start", "submit"):
        moved = technician.post(f"/api/v1/tasks/{task_id}/actions/{action}", json={})
        assert moved.status_code == 200, moved.text
    clients = [campaign.client("reviewer" if index % 2 else "admin") for index in range(APPROVERS)]
    start = threading.Barrier(APPROVERS)
    sign = {"password": PASSWORD, "meaning": "approved"}

    def approve(client: TestClient) -> Response:
        start.wait()
        return client.post(f"/api/v1/tasks/{task_id}/signatures", json=sign)

    statuses = sorted(response.status_code for response in _in_parallel([lambda c=c: approve(c) for c in clients]))
    task = reviewer.get(f"/api/v1/tasks/{task_id}").json()
    signatures = reviewer.get(f"/api/v1/tasks/{task_id}/signatures").json()
    approvals = [s for s in signatures if s["meaning"] == "approved"]
    failures = int(statuses != [201] + [409] * (APPROVERS - 1)) + int(len(approvals) != 1)
    failures += int(task["state"] != "approved")
    figures.add(cases=APPROVERS, failures=failures)
    assert statuses == [201] + [409] * (APPROVERS - 1)
    assert len(approvals) == 1 and task["state"] == "approved"
    assert chain_verifies(campaign.state)
