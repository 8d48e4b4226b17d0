"""The records every route can be called with: a collection, sheet, calibration, trace, fit, a background job,
a token, a review task with a comment; and the path values that name them."""

from __future__ import annotations

from dataclasses import dataclass

from tests.jobs.waiting import wait_for_job
from tests.reliability.campaign import Campaign
from tests.reliability.records import Records, make_records

MISSING_ID = 987_654


@dataclass(frozen=True)
class World:
    records: Records
    values: dict[str, object]
    job_id: int
    task_id: int


def _make_task(campaign: Campaign, records: Records) -> tuple[int, int]:
    """A review task on the sheet, assigned to the technician, with one reviewer comment."""
    reviewer = campaign.client("reviewer")
    body = {"sheet_ids": [records.sheet_id], "technician_id": campaign.members["technician"].user_id}
    created = reviewer.post(f"/api/v1/collections/{records.collection_id}/tasks", json=body)
    assert created.status_code == 201, created.text
    task_id = int(reviewer.get(f"/api/v1/sheets/{records.sheet_id}/task").json()["id"])
    comment = reviewer.post(f"/api/v1/tasks/{task_id}/comments", json={"body": "check the pen near 6 h"})
    assert comment.status_code == 201, comment.text
    return task_id, int(comment.json()["id"])


def _first_notice(campaign: Campaign) -> int:
    notices = campaign.client("technician").get("/api/v1/notices").json()
    return int(notices[0]["id"]) if notices else MISSING_ID


def build_world(campaign: Campaign, *, name: str = "Authorization box", seed: int = 31) -> World:
    technician = campaign.client("technician")
    records = make_records(technician, name=name, seed=seed)
    job = technician.post(
        f"/api/v1/sheets/{records.sheet_id}/traces/auto?background=true",
        json={"name": "bg", "pen_color": "#1f3cc8", "region": {"box": [40, 40, 600, 360]}},
    )
    assert job.status_code == 202, job.text
    wait_for_job(technician, int(job.json()["id"]))  # so it writes nothing while a test compares the database
    token = technician.post("/api/v1/tokens", json={"name": "matrix target"}).json()
    task_id, comment_id = _make_task(campaign, records)
    values: dict[str, object] = {
        "collection_id": records.collection_id,
        "sheet_id": records.sheet_id,
        "trace_id": records.trace_id,
        "fit_id": records.fit_id,
        "user_id": campaign.members["viewer"].user_id,
        "token_id": token["id"],
        "job_id": job.json()["id"],
        "entity_type": "sheet",
        "entity_id": records.sheet_id,
        "tile_path": "sheet.dzi",
        "task_id": task_id,
        "comment_id": comment_id,
        "notice_id": _first_notice(campaign),
        "spec_id": MISSING_ID,  # chart specs and batch runs: the matrix needs only the role check to answer
        "run_id": MISSING_ID,
        "action": "no-such-action",  # refused by validation after the role check: the matrix changes nothing
    }
    return World(records, values, int(job.json()["id"]), task_id)
