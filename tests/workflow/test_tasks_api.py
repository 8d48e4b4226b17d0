"""Tasks through the JSON API: bulk creation, who sees what, reassignment, the transitions with their 409s,
the sheet status kept in step, notices, the "my work" queue and the collection board."""

from __future__ import annotations

from datetime import date, timedelta

from fastapi.testclient import TestClient

from tests.workflow.sheet_setup import act, add_trace, calibrate, new_sheets, user_id

Clients = dict[str, TestClient]


def _tasks_for(signed_in: Clients, count: int = 2, **extra: object) -> tuple[int, list[int], list[dict[str, object]]]:
    reviewer = signed_in["reviewer"]
    collection_id, sheet_ids = new_sheets(reviewer, count)
    body = {"technician_id": user_id(signed_in["technician"]), "reviewer_id": user_id(reviewer), **extra}
    created = reviewer.post(f"/api/v1/collections/{collection_id}/tasks", json=body)
    assert created.status_code == 201, created.text
    return collection_id, sheet_ids, created.json()["created"]


def test_bulk_creation_and_a_technician_sees_only_their_own_tasks(signed_in: Clients) -> None:
    collection_id, sheet_ids, created = _tasks_for(signed_in, 2)
    assert sorted(task["sheet_id"] for task in created) == sorted(sheet_ids)
    assert {task["state"] for task in created} == {"open"}
    again = signed_in["reviewer"].post(f"/api/v1/collections/{collection_id}/tasks", json={"sheet_ids": sheet_ids[:1]})
    assert again.status_code == 201
    assert again.json()["created"] == []
    assert "has a task already" in again.json()["skipped"][0]["reason"]
    task_id = created[0]["id"]
    assert len(signed_in["technician"].get("/api/v1/tasks").json()) == 2
    assert signed_in["technician2"].get("/api/v1/tasks").json() == []
    assert signed_in["technician2"].get(f"/api/v1/tasks/{task_id}").status_code == 404
    assert act(signed_in["technician2"], task_id, "start").status_code == 404  # type: ignore[attr-defined]
    assert signed_in["viewer"].get(f"/api/v1/tasks/{task_id}").status_code == 404
    assert len(signed_in["reviewer"].get("/api/v1/tasks").json()) == 2


def test_only_reviewers_and_admins_create_and_reassign_tasks(signed_in: Clients) -> None:
    tech = signed_in["technician"]
    collection_id, _ = new_sheets(tech, 1)
    refused = tech.post(f"/api/v1/collections/{collection_id}/tasks", json={})
    assert refused.status_code == 403
    _, _, created = _tasks_for(signed_in, 1)
    task_id = created[0]["id"]
    etag = tech.get(f"/api/v1/tasks/{task_id}").headers["etag"]
    body = {"technician_id": user_id(signed_in["technician2"])}
    assert tech.patch(f"/api/v1/tasks/{task_id}", json=body, headers={"If-Match": etag}).status_code == 403
    reviewer = signed_in["reviewer"]
    assert reviewer.patch(f"/api/v1/tasks/{task_id}", json=body).status_code == 428
    moved = reviewer.patch(f"/api/v1/tasks/{task_id}", json=body, headers={"If-Match": etag})
    assert moved.status_code == 200, moved.text
    assert moved.json()["technician"]["id"] == user_id(signed_in["technician2"])
    assert reviewer.patch(f"/api/v1/tasks/{task_id}", json=body, headers={"If-Match": etag}).status_code == 412
    me = user_id(reviewer)
    response = reviewer.post(
        f"/api/v1/collections/{collection_id}/tasks", json={"technician_id": me, "reviewer_id": me}
    )
    assert response.status_code == 422 and "never approve" in response.text
    viewer_as_tech = reviewer.post(
        f"/api/v1/collections/{collection_id}/tasks", json={"technician_id": user_id(signed_in["viewer"])}
    )
    assert viewer_as_tech.status_code == 422 and "viewer" in viewer_as_tech.text


def test_transitions_follow_the_state_machine_and_keep_the_sheet_in_step(signed_in: Clients) -> None:
    tech, reviewer = signed_in["technician"], signed_in["reviewer"]
    _, sheet_ids, created = _tasks_for(signed_in, 1)
    task_id, sheet_id = created[0]["id"], sheet_ids[0]
    assert act(tech, task_id, "submit").status_code == 409  # type: ignore[attr-defined]
    assert act(tech, task_id, "return", "no").status_code == 403  # type: ignore[attr-defined]
    reopen = act(reviewer, task_id, "reopen", "why not")
    assert reopen.status_code == 409  # type: ignore[attr-defined]
    assert "approved or withdrawn" in reopen.json()["detail"]  # type: ignore[attr-defined]
    started = act(tech, task_id, "start")
    assert started.json()["state"] == "in_progress"  # type: ignore[attr-defined]
    assert tech.get(f"/api/v1/sheets/{sheet_id}").json()["status"] == "in_progress"
    empty = act(tech, task_id, "submit")
    assert empty.status_code == 422 and "calibrate" in empty.text  # type: ignore[attr-defined]
    calibrate(tech, sheet_id)
    add_trace(tech, sheet_id, "level", [0, 12, 24], [1, 5, 2])
    assert act(tech, task_id, "submit").json()["state"] == "submitted"  # type: ignore[attr-defined]
    assert tech.get(f"/api/v1/sheets/{sheet_id}").json()["status"] == "submitted"
    assert act(tech, task_id, "start").status_code == 409  # type: ignore[attr-defined]
    no_reason = act(reviewer, task_id, "return")
    assert no_reason.status_code == 422  # type: ignore[attr-defined]
    returned = act(reviewer, task_id, "return", "the second peak is missing")
    assert returned.json()["state"] == "returned" and returned.json()["reason"] == "the second peak is missing"  # type: ignore[attr-defined]
    assert tech.get(f"/api/v1/sheets/{sheet_id}").json()["status"] == "in_progress"
    history = reviewer.get(f"/api/v1/audit/history/task/{task_id}").json()
    assert [event["action"] for event in history] == ["create", "start", "submit", "return"]
    assert history[-1]["reason"] == "the second peak is missing"


def test_notices_tell_people_about_assignment_and_return(signed_in: Clients) -> None:
    tech, reviewer = signed_in["technician"], signed_in["reviewer"]
    _, sheet_ids, created = _tasks_for(signed_in, 2)
    notices = tech.get("/api/v1/notices").json()
    assert len(notices) == 1 and "2 sheets" in notices[0]["message"] and notices[0]["kind"] == "assigned"
    task_id = created[0]["id"]
    act(tech, task_id, "start")
    calibrate(tech, sheet_ids[0])
    add_trace(tech, sheet_ids[0], "level", [0, 24], [1, 2])
    act(tech, task_id, "submit")
    assert reviewer.get("/api/v1/notices", params={"unread": True}).json()[0]["kind"] == "submitted"
    act(reviewer, task_id, "return", "trace the whole day")
    latest = tech.get("/api/v1/notices", params={"unread": True}).json()
    assert latest[0]["kind"] == "returned" and "trace the whole day" in latest[0]["message"]
    assert signed_in["technician2"].post(f"/api/v1/notices/{latest[0]['id']}/read").status_code == 404
    assert tech.post("/api/v1/notices/read").status_code == 204
    assert tech.get("/api/v1/notices", params={"unread": True}).json() == []


def test_my_work_and_the_board(signed_in: Clients) -> None:
    tech, reviewer = signed_in["technician"], signed_in["reviewer"]
    yesterday = (date.today() - timedelta(days=2)).isoformat()
    collection_id, sheet_ids, created = _tasks_for(signed_in, 3, due_date=yesterday, priority="high")
    work = tech.get("/api/v1/me/work").json()
    assert len(work["to_digitize"]) == 3 and work["to_review"] == [] and work["unread_notices"] == 1
    task_id = created[0]["id"]
    act(tech, task_id, "start")
    calibrate(tech, sheet_ids[0])
    add_trace(tech, sheet_ids[0], "level", [0, 24], [1, 2])
    act(tech, task_id, "submit")
    assert [t["id"] for t in reviewer.get("/api/v1/me/work").json()["to_review"]] == [task_id]
    board = reviewer.get(f"/api/v1/collections/{collection_id}/board").json()
    assert board["total_sheets"] == 3 and board["without_task"] == 0
    assert board["counts"]["open"] == 2 and board["counts"]["submitted"] == 1
    assert len(board["overdue"]) == 3 and all(task["overdue"] for task in board["overdue"])
    loads = {entry["person"]["display_name"]: entry for entry in board["load"]}
    assert loads["Tom"]["to_digitize"] == 2 and loads["Rita"]["to_review"] == 1
