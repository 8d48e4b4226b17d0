"""The workflow pages as a browser without JavaScript uses them: my work, the board with its forms, the review page
with actions, pinned comments and the signature form (CSRF tokens in every form)."""

from __future__ import annotations

import re

from fastapi.testclient import TestClient

from tests.conftest import PASSWORD
from tests.workflow.sheet_setup import add_trace, calibrate, new_sheets, pixel_of, user_id

Clients = dict[str, TestClient]


def _token(html: str) -> str:
    match = re.search(r'name="csrf_token" value="([^"]+)"', html)
    assert match, "no CSRF token in the page"
    return match.group(1)


def _version(html: str) -> str:
    match = re.search(r'name="version" value="(\d+)"', html)
    assert match, "no version in the page"
    return match.group(1)


def _post(client: TestClient, url: str, page_url: str, **fields: str) -> object:
    page = client.get(page_url).text
    data = {"csrf_token": _token(page), **fields}
    if "version" not in fields and 'name="version"' in page:
        data["version"] = _version(page)
    return client.post(url, data=data, headers={"accept": "text/html"}, follow_redirects=False)


def test_board_forms_create_tasks_and_settings(signed_in: Clients) -> None:
    reviewer, tech = signed_in["reviewer"], signed_in["technician"]
    collection_id, sheet_ids = new_sheets(reviewer, 2)
    board_url = f"/collections/{collection_id}/tasks"
    forged = reviewer.post(board_url, data={"priority": "low"}, headers={"accept": "text/html", "x-csrf-token": ""})
    assert forged.status_code == 403
    created = _post(reviewer, board_url, board_url, technician_id=str(user_id(tech)), priority="urgent")
    assert created.status_code == 303  # type: ignore[attr-defined]
    page = reviewer.get(board_url).text
    assert "Tom" in page and page.count('href="/tasks/') == 2 and "urgent" in page
    refused = _post(reviewer, f"/collections/{collection_id}/workflow", board_url, tolerance="-1")
    assert refused.status_code == 422  # type: ignore[attr-defined]
    saved = _post(
        reviewer, f"/collections/{collection_id}/workflow", board_url, double_digitization="1", tolerance="0.2"
    )
    assert saved.status_code == 303  # type: ignore[attr-defined]
    assert 'value="0.2"' in reviewer.get(board_url).text
    assert "Create tasks" not in tech.get(board_url).text  # technicians see the board but not the forms
    work = tech.get("/work").text
    assert work.count('<td><a href="/tasks/') == 2 and "asked you to digitize 2 sheets" in work
    assert f'href="/sheets/{sheet_ids[0]}"' in work


def test_review_flow_on_the_task_page(signed_in: Clients) -> None:
    reviewer, tech = signed_in["reviewer"], signed_in["technician"]
    collection_id, (sheet_id,) = new_sheets(reviewer, 1)
    body = {"technician_id": user_id(tech), "reviewer_id": user_id(reviewer)}
    task_id = reviewer.post(f"/api/v1/collections/{collection_id}/tasks", json=body).json()["created"][0]["id"]
    url = f"/tasks/{task_id}"
    assert _post(tech, f"{url}/action", url, action="start").status_code == 303  # type: ignore[attr-defined]
    calibrate(tech, sheet_id)
    add_trace(tech, sheet_id, "level", [0, 12, 24], [2, 6, 3])
    assert _post(tech, f"{url}/action", url, action="submit").status_code == 303  # type: ignore[attr-defined]

    page = reviewer.get(url).text
    assert "Electronic signature" in page and "Return to the technician" in page and "Submit for review" not in page
    assert 'data-review-pins data-sheet-width="640" data-sheet-height="400"' in page
    # The empty state is a sentence, not item 1 of the ordered list of comments.
    assert '<p class="muted">No comments.</p>' in page and '<ol class="comments">' not in page
    u, v = pixel_of(12, 6)
    pinned = _post(reviewer, f"{url}/comments", url, body="The peak is higher on the scan", u=f"{u}", v=f"{v}")
    assert pinned.status_code == 303  # type: ignore[attr-defined]
    page = reviewer.get(url).text
    assert f"left: {100 * u / 640}%; top: {100 * v / 400}%" in page and "The peak is higher on the scan" in page
    assert "No comments." not in page
    outside = _post(reviewer, f"{url}/comments", url, body="off the sheet", u="900", v="10")
    assert outside.status_code == 422 and "outside the sheet" in outside.text  # type: ignore[attr-defined]

    stale = _post(reviewer, f"{url}/action", url, action="return", reason="x", version="1")
    assert stale.status_code == 412  # type: ignore[attr-defined]
    returned = _post(reviewer, f"{url}/action", url, action="return", reason="raise the peak")
    assert returned.status_code == 303  # type: ignore[attr-defined]
    assert "raise the peak" in tech.get("/work").text
    _post(tech, f"{url}/action", url, action="start")
    _post(tech, f"{url}/action", url, action="submit")
    wrong = _post(reviewer, f"{url}/sign", url, password="guess", meaning="approved")
    assert wrong.status_code == 403 and "password does not match" in wrong.text  # type: ignore[attr-defined]
    signed = _post(reviewer, f"{url}/sign", url, password=PASSWORD, meaning="approved")
    assert signed.status_code == 303  # type: ignore[attr-defined]
    page = reviewer.get(url).text
    assert "Approved: signed by <b>Rita</b>" in page and "holds" in page
    preview = reviewer.get(f"{url}/overlay.png")
    assert preview.status_code == 200 and preview.content.startswith(b"\x89PNG")
    assert signed_in["technician2"].get(url, headers={"accept": "text/html"}).status_code == 404
