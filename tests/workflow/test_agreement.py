"""Double digitization: agreement numbers of two traces against values computed by hand, and the whole flow
(two technicians, comparison through the calibration, the reviewer keeps one set) through the API.

Hand computation (piecewise-linear traces, exact integrals):
A through (0, 0), (2, 2), (4, 0); B constant 1 on [1, 5]. Common range [1, 4]. d = A - B is x - 1 on [1, 2],
1 - (x - 2) on [2, 3], -(x - 3) on [3, 4]: max |d| = 1 (first at x = 2); the integral of d^2 is 1/3 on each unit
segment, 1 in all, so RMS = sqrt(1 / 3) = 0.5773502691896258.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from fastapi.testclient import TestClient

from tests.conftest import PASSWORD
from tests.workflow.sheet_setup import act, add_trace, calibrate, new_sheets, user_id
from tracedesk.workflow.agreement import compare_traces

Clients = dict[str, TestClient]


def test_hand_computed_triangle_against_a_constant() -> None:
    found = compare_traces([0, 2, 4], [0, 2, 0], [1, 3, 5], [1, 1, 1])
    assert found is not None
    assert (found.start, found.stop) == (1.0, 4.0)
    np.testing.assert_allclose(found.max_difference, 1.0, rtol=0, atol=1e-15)
    assert found.max_at == 2.0
    np.testing.assert_allclose(found.rms_difference, math.sqrt(1.0 / 3.0), rtol=1e-15)
    assert found.agrees(tolerance=1.0) and not found.agrees(tolerance=0.999)


def test_constant_offset_gives_equal_max_and_rms() -> None:
    """Two parallel lines 0.25 apart (by hand: d = 0.25 everywhere, so max = RMS = 0.25)."""
    x = np.linspace(0.0, 10.0, 7)
    found = compare_traces(x, 3.0 * x, x[::-1] + 0.0, 3.0 * x[::-1] + 0.25)  # order of samples does not matter
    assert found is not None
    np.testing.assert_allclose([found.max_difference, found.rms_difference], [0.25, 0.25], rtol=1e-14)


def test_crossing_lines_rms() -> None:
    """A = x, B = 2 - x on [0, 2]: d = 2x - 2, max |d| = 2 at x = 0, integral of d^2 = 8/3, RMS = sqrt(4/3)."""
    found = compare_traces([0, 2], [0, 2], [0, 2], [2, 0])
    assert found is not None
    np.testing.assert_allclose(found.max_difference, 2.0, rtol=1e-15)
    assert found.max_at == 0.0
    np.testing.assert_allclose(found.rms_difference, math.sqrt(4.0 / 3.0), rtol=1e-15)


def test_duplicate_x_are_averaged_and_disjoint_ranges_give_none() -> None:
    found = compare_traces([0, 1, 1, 2], [0, 0, 2, 2], [0, 2], [0, 2])
    assert found is not None  # (1, 0) and (1, 2) average to (1, 1), which lies on B = x: no difference
    np.testing.assert_allclose(found.max_difference, 0.0, atol=1e-15)
    assert compare_traces([0, 1], [0, 0], [2, 3], [0, 0]) is None
    assert compare_traces([0, 1, np.nan], [0, 0, 1], [1, 2], [0, 0]) is None  # touching at one point only


@pytest.fixture
def double_task(signed_in: Clients) -> tuple[int, int]:
    """A double-digitized task with tolerance 0.5 m: Tom traced the triangle, Tess the constant (both "level")."""
    reviewer, tom, tess = signed_in["reviewer"], signed_in["technician"], signed_in["technician2"]
    collection_id, (sheet_id,) = new_sheets(reviewer, 1)
    url = f"/api/v1/collections/{collection_id}/workflow"
    etag = reviewer.get(url).headers["etag"]
    settings = reviewer.put(url, json={"double_digitization": True, "tolerance": 0.5}, headers={"If-Match": etag})
    assert settings.status_code == 200, settings.text
    body = {"technician_id": user_id(tom), "second_technician_id": user_id(tess), "reviewer_id": user_id(reviewer)}
    created = reviewer.post(f"/api/v1/collections/{collection_id}/tasks", json=body)
    task_id = created.json()["created"][0]["id"]
    assert created.json()["created"][0]["double_digitization"] is True
    act(tom, task_id, "start")
    calibrate(tom, sheet_id)
    add_trace(tom, sheet_id, "level", [0, 2, 4], [0, 2, 0])
    add_trace(tess, sheet_id, "Level ", [1, 3, 5], [1, 1, 1])
    assert act(tom, task_id, "submit").json()["state"] == "in_progress"  # type: ignore[attr-defined]
    assert act(tom, task_id, "submit").status_code == 409  # type: ignore[attr-defined]
    assert act(tess, task_id, "submit").json()["state"] == "submitted"  # type: ignore[attr-defined]
    return task_id, sheet_id


def test_agreement_through_the_calibration_matches_the_hand_values(
    signed_in: Clients, double_task: tuple[int, int]
) -> None:
    task_id, _ = double_task
    reviewer = signed_in["reviewer"]
    report = reviewer.get(f"/api/v1/tasks/{task_id}/agreement").json()
    assert report["status"] == "disagree" and report["tolerance"] == 0.5
    (pair,) = report["pairs"]
    # Vertices went through pixels and back through the (exact, affine) calibration: agreement to ~1e-12.
    np.testing.assert_allclose([pair["start"], pair["stop"]], [1.0, 4.0], atol=1e-9)
    np.testing.assert_allclose(pair["max_difference"], 1.0, atol=1e-9)
    np.testing.assert_allclose(pair["max_at"], 2.0, atol=1e-9)
    np.testing.assert_allclose(pair["rms_difference"], math.sqrt(1.0 / 3.0), rtol=1e-9)
    assert pair["agrees"] is False and pair["unit"] == "m"


def test_reviewer_keeps_one_set_then_approves(signed_in: Clients, double_task: tuple[int, int]) -> None:
    task_id, sheet_id = double_task
    reviewer = signed_in["reviewer"]
    blocked = reviewer.post(f"/api/v1/tasks/{task_id}/signatures", json={"password": PASSWORD})
    assert blocked.status_code == 409 and "keep one set" in blocked.json()["detail"]
    assert (
        signed_in["technician"].post(f"/api/v1/tasks/{task_id}/keep", json={"keep": "first", "reason": "x"}).status_code
        == 403
    )
    kept = reviewer.post(f"/api/v1/tasks/{task_id}/keep", json={"keep": "first", "reason": "Tom followed the ink"})
    assert kept.status_code == 200, kept.text
    traces = reviewer.get(f"/api/v1/sheets/{sheet_id}/traces").json()
    assert [trace["name"] for trace in traces] == ["level"]
    # Withdrawing the other set was a review decision, not authorship: the reviewer may still sign.
    approved = reviewer.post(f"/api/v1/tasks/{task_id}/signatures", json={"password": PASSWORD})
    assert approved.status_code == 201, approved.text
