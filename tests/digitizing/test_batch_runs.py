"""Unattended batch digitization (issue 9): a collection of rendered charts registers, traces and fits itself;
sheets that pass the thresholds become tasks submitted for review (written by the run; the reviewer who started
it counts as an author, so another reviewer signs: four eyes), the rest (a blank page) wait in an open task with
the reason shown; a run resumes without doing a sheet twice and leaves sheets people hold alone.

The charts are rendered by tests/science/grid_charts.py (matplotlib Agg) with a known pen function: that
function is the source of the expected values.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np
import pytest
from fastapi import FastAPI
from fastapi.testclient import TestClient

from tests.conftest import PASSWORD, log_in
from tests.digitizing.test_detection_api import _png
from tests.jobs.waiting import wait_for_job
from tests.science.grid_charts import PrintedChart, render_chart, rotation
from tests.science.test_grid_registration import BLUE, BOX, SPEC_JSON, H, W, _spec
from tracedesk.accounts.service import create_user
from tracedesk.audit.service import SYSTEM
from tracedesk.db import transaction
from tracedesk.digitizing import batch
from tracedesk.web.state import AppState

FULL_SCALE = 42.0  # the spec's y frame is 0..42
PENS = [{"name": "pressure", "pen_color": BLUE, "unit": "bar"}]
FIT = {"family": "fourier", "degree": 1, "period": 8 * np.pi}


def pen_function(x: np.ndarray) -> np.ndarray:
    return 20 + 10 * np.sin(x / 4)


def _chart_png(angle_deg: float) -> bytes:
    chart = PrintedChart(_spec(), BOX, rotation(angle_deg, width=W, height=H))
    return _png(render_chart(chart, width=W, height=H, pens=[chart.pen(pen_function, colour=BLUE)]))


def _collection(client: TestClient, name: str, files: list[tuple[str, bytes]]) -> tuple[int, list[int], int]:
    """A collection with the files uploaded and the chart spec saved: (collection, sheet ids, spec)."""
    collection = client.post("/api/v1/collections", json={"name": name}).json()["id"]
    upload = [("files", (filename, data, "image/png")) for filename, data in files]
    sheets = client.post(f"/api/v1/collections/{collection}/sheets", files=upload).json()["sheets"]
    body = {"name": "Daily", "geometry": SPEC_JSON, "collection_id": collection}
    spec = client.post("/api/v1/chart-specs", json=body).json()["id"]
    return collection, [sheet["id"] for sheet in sheets], spec


def _run(client: TestClient, collection: int, body: dict[str, Any]) -> dict[str, Any]:
    started = client.post(f"/api/v1/collections/{collection}/batch-runs", json=body)
    assert started.status_code == 202, started.text
    return _finish(client, started.json())


def _finish(client: TestClient, run: dict[str, Any]) -> dict[str, Any]:
    job = wait_for_job(client, run["job_id"], timeout=180)
    result: dict[str, Any] = client.get(f"/api/v1/batch-runs/{run['id']}").json()
    result["job"] = job
    return result


def second_reviewer(state: AppState, app: FastAPI) -> TestClient:
    """A signed-in client of a second reviewer, Rhea (invented), who started nothing."""
    with transaction(state.writer) as session:
        create_user(
            session,
            state.hasher,
            actor=SYSTEM,
            username="rhea",
            password=PASSWORD,
            role="reviewer",
            display_name="Rhea",
        )
    return log_in(TestClient(app), "rhea")


def test_batch_run_submits_good_sheets_for_review_and_queues_the_rest(
    signed_in: dict[str, TestClient], state: AppState, app: FastAPI
) -> None:
    reviewer, tech, admin = signed_in["reviewer"], signed_in["technician"], signed_in["admin"]
    files = [(f"day-{i}.png", _chart_png(angle)) for i, angle in enumerate((0.8, -1.6))]
    files.append(("blank.png", _png(np.full((H, W, 3), 250, dtype=np.uint8))))
    collection, sheets, spec = _collection(reviewer, "Pump pressure 1987", files)
    body = {"chart_spec_id": spec, "pens": PENS, "fit": FIT}
    assert tech.post(f"/api/v1/collections/{collection}/batch-runs", json=body).status_code == 403

    run = _run(reviewer, collection, body)
    assert run["job"]["status"] == "succeeded", run["job"]
    assert run["status"] == "finished"
    assert run["counts"] == {"pending": 0, "ready_for_review": 2, "needs_person": 1, "skipped": 0}
    by_sheet = {item["sheet_id"]: item for item in run["items"]}

    # The blank page waits for a person: an open, unassigned task whose reason says why.
    blank = by_sheet[sheets[2]]
    assert blank["status"] == "needs_person" and "registration refused" in blank["reason"]
    queued = reviewer.get(f"/api/v1/tasks/{blank['task_id']}").json()
    assert queued["state"] == "open" and queued["technician"] is None
    assert "registration refused" in queued["reason"] and f"batch run {run['id']}" in queued["reason"]
    assert blank["task_state"] == "open"
    page = signed_in["viewer"].get(f"/batch-runs/{run['id']}")
    assert page.status_code == 200 and "registration refused" in page.text
    assert f'href="/tasks/{blank["task_id"]}"' in page.text

    for sheet in sheets[:2]:
        item = by_sheet[sheet]
        assert item["task_state"] == "submitted" and item["score"]["kind"] == "cartesian"
        (trace,) = reviewer.get(f"/api/v1/sheets/{sheet}/traces").json()
        samples = np.array([s for s in trace["samples"] if None not in s], dtype=float)
        error = samples[:, 1] - pen_function(samples[:, 0])
        assert np.sqrt(np.mean(error**2)) / FULL_SCALE < 0.002  # no click at all
        (fit,) = reviewer.get(f"/api/v1/traces/{trace['id']}/fits").json()
        assert abs(fit["coefficients"]["a0"] - 20) < 0.1 and abs(fit["coefficients"]["b1"] - 10) < 0.1
        # The run wrote the work, not the person who started it: marked automatic in the audit trail.
        (created,) = reviewer.get(f"/api/v1/audit/history/trace/{trace['id']}").json()
        assert created["actor_id"] is None and created["actor_name"] == f"batch run {run['id']} (automatic)"
        assert "automatic" in created["reason"]
        calibration = reviewer.get(f"/api/v1/sheets/{sheet}/calibration").json()
        assert calibration["origin"] == "automatic"
        history = reviewer.get(f"/api/v1/audit/history/task/{item['task_id']}").json()
        assert [e["action"] for e in history] == ["create", "start", "submit"]
        assert {e["actor_name"] for e in history} == {f"batch run {run['id']} (automatic)"}

    # Four eyes: the reviewer who started the run counts as an author of what it wrote; another reviewer signs.
    task = by_sheet[sheets[0]]["task_id"]
    approve = {"password": PASSWORD, "meaning": "approved"}
    refused = reviewer.post(f"/api/v1/tasks/{task}/signatures", json=approve)
    assert refused.status_code == 403 and refused.json()["code"] == "four_eyes", refused.text
    assert f"you started batch run {run['id']}" in refused.json()["detail"]
    assert reviewer.get(f"/api/v1/tasks/{task}/signatures").json() == []
    second = second_reviewer(state, app)
    signed = second.post(f"/api/v1/tasks/{task}/signatures", json=approve)
    assert signed.status_code == 201, signed.text
    assert reviewer.get(f"/api/v1/tasks/{task}").json()["state"] == "approved"
    second.close()
    # A technician who is not a reviewer still cannot approve automatic work.
    other = by_sheet[sheets[1]]["task_id"]
    assert tech.post(f"/api/v1/tasks/{other}/signatures", json={"password": PASSWORD}).status_code in (403, 404)
    assert admin.get(f"/api/v1/tasks/{other}").json()["state"] == "submitted"


def test_sheets_people_hold_are_left_alone_and_reported(signed_in: dict[str, TestClient]) -> None:
    admin, tech = signed_in["admin"], signed_in["technician"]
    files = [("held.png", _chart_png(0.5)), ("free.png", _chart_png(-0.7))]
    collection, (held, free), spec = _collection(admin, "Held sheets", files)
    assignment = {"sheet_ids": [held], "technician_id": tech.get("/api/v1/me").json()["id"]}
    made = admin.post(f"/api/v1/collections/{collection}/tasks", json=assignment)
    assert made.status_code == 201, made.text
    (human_task,) = made.json()["created"]

    run = _run(admin, collection, {"chart_spec_id": spec, "pens": PENS})
    items = {item["sheet_id"]: item for item in run["items"]}
    assert items[held]["status"] == "skipped"
    assert f"task {human_task['id']} (open, assigned to Tom)" in items[held]["reason"]
    assert items[held]["task_id"] == human_task["id"]
    assert items[free]["status"] == "ready_for_review"
    # The human task and its sheet are untouched: same version, no calibration, no traces.
    assert admin.get(f"/api/v1/tasks/{human_task['id']}").json()["version"] == human_task["version"]
    assert "no calibration yet" in admin.get(f"/api/v1/sheets/{held}/calibration").text
    assert admin.get(f"/api/v1/sheets/{held}/traces").json() == []


def test_an_interrupted_run_resumes_without_doing_a_sheet_twice(
    signed_in: dict[str, TestClient], monkeypatch: pytest.MonkeyPatch
) -> None:
    admin = signed_in["admin"]
    files = [(f"day-{i}.png", _chart_png(angle)) for i, angle in enumerate((0.4, -0.9, 1.3))]
    files.append(("blank.png", _png(np.full((H, W, 3), 250, dtype=np.uint8))))
    collection, sheets, spec = _collection(admin, "Interrupted", files)
    real = batch.analyse_sheet
    calls: list[int] = []

    def failing_once(*args: Any, **kwargs: Any) -> Any:
        calls.append(1)
        if len(calls) == 2:  # an outage in the middle of the second sheet
            raise RuntimeError("worker lost its database connection")
        return real(*args, **kwargs)

    monkeypatch.setattr(batch, "analyse_sheet", failing_once)
    body = {"chart_spec_id": spec, "pens": PENS, "fit": FIT}
    run = _run(admin, collection, body)
    assert run["job"]["status"] == "failed"
    assert run["status"] == "interrupted"
    assert run["counts"] == {"pending": 3, "ready_for_review": 1, "needs_person": 0, "skipped": 0}

    # The run's page offers a Resume button (a form with the CSRF token) to those who may resume, nobody else.
    page = admin.get(f"/batch-runs/{run['id']}").text
    assert f'action="/batch-runs/{run["id"]}/resume"' in page and admin.headers["X-CSRF-Token"] in page
    assert "/resume" not in signed_in["viewer"].get(f"/batch-runs/{run['id']}").text
    form = {"csrf_token": admin.headers["X-CSRF-Token"]}
    assert signed_in["viewer"].post(f"/batch-runs/{run['id']}/resume", data=form).status_code == 403
    resumed = admin.post(f"/batch-runs/{run['id']}/resume", data=form, follow_redirects=False)
    assert resumed.status_code == 303 and resumed.headers["location"] == f"/batch-runs/{run['id']}", resumed.text
    run = _finish(admin, admin.get(f"/api/v1/batch-runs/{run['id']}").json())
    assert run["job"]["status"] == "succeeded" and run["status"] == "finished"
    assert run["counts"] == {"pending": 0, "ready_for_review": 3, "needs_person": 1, "skipped": 0}
    assert len(calls) == 5  # 1 + the failure + the 3 sheets still pending
    assert admin.post(f"/api/v1/batch-runs/{run['id']}/resume").status_code == 409
    again_form = admin.post(f"/batch-runs/{run['id']}/resume", data=form)
    assert again_form.status_code == 409 and "there is nothing to resume" in again_form.text
    assert 'action="/batch-runs/' not in admin.get(f"/batch-runs/{run['id']}").text  # finished: no button

    tasks = admin.get("/api/v1/tasks", params={"collection_id": collection}).json()
    assert sorted(task["sheet_id"] for task in tasks) == sorted(sheets)  # one task per sheet, no duplicates
    for sheet in sheets[:3]:
        assert len(admin.get(f"/api/v1/sheets/{sheet}/traces").json()) == 1
        events = admin.get(f"/api/v1/audit/history/calibration/{sheet}").json()
        assert [e["action"] for e in events] == ["calibrate"]

    # Running the collection again: submitted sheets are reported, the blank page's waiting batch task is reused.
    again = _run(admin, collection, body)
    items = {item["sheet_id"]: item for item in again["items"]}
    assert {items[sheet]["status"] for sheet in sheets[:3]} == {"skipped"}
    assert "(submitted)" in items[sheets[0]]["reason"]
    blank_task = {task["sheet_id"]: task for task in tasks}[sheets[3]]
    assert items[sheets[3]]["status"] == "needs_person" and items[sheets[3]]["task_id"] == blank_task["id"]
    assert f"batch run {again['id']}" in admin.get(f"/api/v1/tasks/{blank_task['id']}").json()["reason"]
    assert len(admin.get("/api/v1/tasks", params={"collection_id": collection}).json()) == 4

    # The collection's runs, newest first, each linking to its page.
    listing = signed_in["viewer"].get(f"/collections/{collection}/batch-runs")
    assert listing.status_code == 200
    links = [f'href="/batch-runs/{again["id"]}"', f'href="/batch-runs/{run["id"]}"']
    assert all(link in listing.text for link in links)
    assert listing.text.index(links[0]) < listing.text.index(links[1])


@pytest.mark.parametrize(
    ("change", "message"),
    [
        (lambda spec_id: {"chart_spec_id": spec_id, "pens": []}, "pens"),
        (lambda spec_id: {"chart_spec_id": spec_id + 999, "pens": PENS}, "no chart spec"),
    ],
)
def test_bad_run_requests_are_refused_and_store_nothing(
    signed_in: dict[str, TestClient], change: Callable[[int], dict[str, Any]], message: str
) -> None:
    admin = signed_in["admin"]
    collection, _, spec = _collection(admin, "Refusals", [("one.png", _chart_png(0.0))])
    response = admin.post(f"/api/v1/collections/{collection}/batch-runs", json=change(spec))
    assert response.status_code in (404, 422) and message in response.text
    assert admin.get("/api/v1/tasks", params={"collection_id": collection}).json() == []


def test_double_digitization_collections_are_refused(signed_in: dict[str, TestClient]) -> None:
    admin = signed_in["admin"]
    collection, _, spec = _collection(admin, "Two technicians", [("one.png", _chart_png(0.0))])
    settings = admin.get(f"/api/v1/collections/{collection}/workflow")
    changed = admin.put(
        f"/api/v1/collections/{collection}/workflow",
        json={"double_digitization": True},
        headers={"If-Match": settings.headers["ETag"]},
    )
    assert changed.status_code == 200, changed.text
    response = admin.post(f"/api/v1/collections/{collection}/batch-runs", json={"chart_spec_id": spec, "pens": PENS})
    assert response.status_code == 422 and "double digitization" in response.text


def test_a_run_uses_the_collections_settings_unless_the_request_overrides_them(
    signed_in: dict[str, TestClient],
) -> None:
    admin = signed_in["admin"]
    collection, (sheet,), spec = _collection(admin, "Collection settings", [("one.png", _chart_png(0.3))])
    settings = admin.get(f"/api/v1/collections/{collection}/workflow")
    strict = {"min_confidence": 1.0}  # no registration is that sure: every sheet waits for a person
    saved = admin.put(
        f"/api/v1/collections/{collection}/workflow",
        json={"batch_thresholds": strict, "batch_fit": FIT},
        headers={"If-Match": settings.headers["ETag"]},
    )
    assert saved.status_code == 200, saved.text

    run = _run(admin, collection, {"chart_spec_id": spec, "pens": PENS})
    assert run["settings"]["settings_from"] == {"fit": "collection", "thresholds": "collection"}
    assert run["settings"]["fit"] == FIT and run["settings"]["thresholds"]["min_confidence"] == 1.0
    (item,) = run["items"]
    assert item["status"] == "needs_person" and "registration confidence" in item["reason"]
    (trace,) = admin.get(f"/api/v1/sheets/{sheet}/traces").json()
    (fit,) = admin.get(f"/api/v1/traces/{trace['id']}/fits").json()  # the collection's model was fitted
    assert fit["family"] == "fourier"
    page = admin.get(f"/batch-runs/{run['id']}")
    assert "thresholds: the collection" in page.text

    # The request's own thresholds win; the fit still comes from the collection.
    other, _, spec = _collection(admin, "Request settings", [("two.png", _chart_png(-0.4))])
    settings = admin.get(f"/api/v1/collections/{other}/workflow")
    body = {"batch_thresholds": strict, "batch_fit": FIT}
    assert admin.put(f"/api/v1/collections/{other}/workflow", json=body, headers={"If-Match": settings.headers["ETag"]})
    run = _run(admin, other, {"chart_spec_id": spec, "pens": PENS, "thresholds": {"min_confidence": 0.5}})
    assert run["settings"]["settings_from"] == {"fit": "collection", "thresholds": "request"}
    assert run["counts"]["ready_for_review"] == 1, run["items"]
