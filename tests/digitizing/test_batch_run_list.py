"""The JSON list of a collection's batch runs: newest first, keyset pages (the sheets list's cursor and shape),
a filter by the status each run shows ("interrupted" included), readable by any signed-in reader.

Runs are started through the API on a blank page (registration refuses it at once, so each run finishes quickly
with that sheet waiting for a person), as in tests/digitizing/test_batch_runs.py; expected values are the runs
the test itself started.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pytest
from fastapi.testclient import TestClient

from tests.digitizing.test_batch_runs import PENS, _collection, _run
from tests.digitizing.test_detection_api import _png
from tests.science.test_grid_registration import H, W
from tracedesk.db import transaction
from tracedesk.digitizing import batch
from tracedesk.models import BatchRun, BatchRunItem
from tracedesk.web.state import AppState

BLANK = _png(np.full((H, W, 3), 250, dtype=np.uint8))
# What a finished run over the blank page counts: a refused registration leaves the sheet to a person (the batch
# rules, server/tracedesk/digitizing/batch_analysis.py, as tests/digitizing/test_batch_runs.py checks them).
BLANK_COUNTS = {"pending": 0, "ready_for_review": 0, "needs_person": 1, "skipped": 0}


def _pages(client: TestClient, collection: int, **params: Any) -> list[list[dict[str, Any]]]:
    """Every page of the list, following ``next_cursor`` to the end."""
    pages: list[list[dict[str, Any]]] = []
    cursor = None
    while True:
        query = {**params, **({"cursor": cursor} if cursor else {})}
        answer = client.get(f"/api/v1/collections/{collection}/batch-runs", params=query)
        assert answer.status_code == 200, answer.text
        pages.append(answer.json()["items"])
        cursor = answer.json()["next_cursor"]
        if not cursor:
            return pages


def test_runs_are_listed_newest_first_in_keyset_pages(signed_in: dict[str, TestClient]) -> None:
    admin, viewer = signed_in["admin"], signed_in["viewer"]
    collection, (sheet,), spec = _collection(admin, "Listed runs", [("blank.png", BLANK)])
    body = {"chart_spec_id": spec, "pens": PENS}
    runs = [_run(admin, collection, body) for _ in range(3)]
    other, _, other_spec = _collection(admin, "Other runs", [("blank.png", BLANK)])
    _run(admin, other, {"chart_spec_id": other_spec, "pens": PENS})

    pages = _pages(viewer, collection, limit=2)
    assert [len(page) for page in pages] == [2, 1]  # common practice: a short last page ends the list
    listed = [item for page in pages for item in page]
    assert [item["id"] for item in listed] == [run["id"] for run in reversed(runs)]  # newest first, each once
    for item, run in zip(listed, reversed(runs), strict=True):
        assert item["status"] == "finished" and item["counts"] == BLANK_COUNTS == run["counts"]
        assert item["chart_spec_id"] == spec and item["job_id"] == run["job_id"]
        assert item["started_by"] == "Ada" and item["finished_at"] is not None
        assert "items" not in item  # the sheets' verdicts are on the run itself
    # One page holds them all when the limit allows it; the sheet-level detail agrees with the run.
    assert _pages(viewer, collection) == [listed]
    detail = viewer.get(f"/api/v1/batch-runs/{listed[0]['id']}").json()
    assert [item["sheet_id"] for item in detail["items"]] == [sheet]


def test_bad_requests_for_the_list(signed_in: dict[str, TestClient], client: TestClient) -> None:
    viewer = signed_in["viewer"]
    unknown = viewer.get("/api/v1/collections/987654/batch-runs")
    assert unknown.status_code == 404 and "987654" in unknown.text
    made = signed_in["admin"].post("/api/v1/collections", json={"name": "No runs yet"}).json()["id"]
    route = f"/api/v1/collections/{made}/batch-runs"
    assert viewer.get(route).json() == {"items": [], "next_cursor": None}
    assert viewer.get(route, params={"cursor": "garbage!"}).status_code == 422
    assert viewer.get(route, params={"status": "lost"}).status_code == 422
    assert viewer.get(route, params={"limit": 0}).status_code == 422
    assert client.get(route).status_code == 401  # signed out


def _queued_run(state: AppState, collection: int, spec: int, sheet: int) -> int:
    """A run recorded but not yet given a job (how a run looks between its record and its job being queued)."""
    with transaction(state.writer) as session:
        run = BatchRun(collection_id=collection, chart_spec_id=spec, settings="{}")
        session.add(run)
        session.flush()
        session.add(BatchRunItem(run_id=run.id, sheet_id=sheet))
        return run.id


def test_runs_are_filtered_by_the_status_they_show(
    signed_in: dict[str, TestClient], state: AppState, monkeypatch: pytest.MonkeyPatch
) -> None:
    admin, viewer = signed_in["admin"], signed_in["viewer"]
    collection, (sheet,), spec = _collection(admin, "Filtered runs", [("blank.png", BLANK)])
    body = {"chart_spec_id": spec, "pens": PENS}
    finished = _run(admin, collection, body)

    def outage(*args: Any, **kwargs: Any) -> Any:
        raise RuntimeError("worker lost its database connection")

    with monkeypatch.context() as patch:
        patch.setattr(batch, "analyse_sheet", outage)
        interrupted = _run(admin, collection, body)
    assert interrupted["job"]["status"] == "failed" and interrupted["status"] == "interrupted"
    queued = _queued_run(state, collection, spec, sheet)

    def listed(status: str) -> list[tuple[int, str]]:
        return [(item["id"], item["status"]) for page in _pages(viewer, collection, status=status) for item in page]

    assert listed("finished") == [(finished["id"], "finished")]
    # The stored status of an interrupted run is still "running"; the list shows (and filters on) what the run
    # page shows.
    assert listed("interrupted") == [(interrupted["id"], "interrupted")]
    assert listed("running") == []
    assert listed("queued") == [(queued, "queued")]
    everything = [item for page in _pages(viewer, collection) for item in page]
    assert [(item["id"], item["status"]) for item in everything] == [
        (queued, "queued"),
        (interrupted["id"], "interrupted"),
        (finished["id"], "finished"),
    ]
    counts = {item["id"]: item["counts"] for item in everything}
    assert counts[interrupted["id"]] == {**BLANK_COUNTS, "pending": 1, "needs_person": 0}
    assert counts[queued] == {**BLANK_COUNTS, "pending": 1, "needs_person": 0}
    assert {item["id"]: item["started_by"] for item in everything}[queued] is None
