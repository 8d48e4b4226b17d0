"""A collection's batch settings (issue 9: "sheets above the collection's thresholds", "the collection's chosen
model"): stored with the workflow settings, changed through the API with If-Match or through the board's form,
refused whole when a field is bad. Their use by a batch run is in tests/digitizing/test_batch_runs.py.

The default thresholds are BatchThresholds' documented defaults (server/tracedesk/digitizing/batch_schemas.py).
"""

from __future__ import annotations

from fastapi.testclient import TestClient
from httpx import Response

from tests.workflow.sheet_setup import new_sheets

Clients = dict[str, TestClient]
DEFAULTS = {
    "min_confidence": 0.6,
    "max_registration_rms_px": 1.0,
    "min_coverage": 0.9,
    "max_gaps": 5,
    "min_gap_fraction": 0.01,
    "min_r_squared": None,
}
FIT = {"family": "polynomial", "degree": 2}


def _put(client: TestClient, collection: int, body: dict[str, object], etag: str | None) -> Response:
    headers = {"If-Match": etag} if etag else {}
    return client.put(f"/api/v1/collections/{collection}/workflow", json=body, headers=headers)


def test_batch_settings_are_edited_with_if_match_and_bad_ones_change_nothing(signed_in: Clients) -> None:
    admin, tech = signed_in["admin"], signed_in["technician"]
    collection, _ = new_sheets(admin, 1)
    first = admin.get(f"/api/v1/collections/{collection}/workflow")
    assert first.json()["batch_thresholds"] == DEFAULTS and first.json()["batch_fit"] is None
    etag = first.headers["ETag"]
    body = {"batch_thresholds": {**DEFAULTS, "min_coverage": 0.97, "min_r_squared": 0.95}, "batch_fit": FIT}

    assert _put(admin, collection, body, None).status_code == 428
    assert _put(tech, collection, body, etag).status_code == 403
    bad = _put(admin, collection, {**body, "batch_fit": {"degree": 2}}, etag)
    assert bad.status_code == 422 and "family" in bad.text
    too_high = _put(admin, collection, {"batch_thresholds": {"min_coverage": 1.5}}, etag)
    assert too_high.status_code == 422
    assert admin.get(f"/api/v1/collections/{collection}/workflow").json() == first.json()  # nothing half-stored

    saved = _put(admin, collection, body, etag)
    assert saved.status_code == 200, saved.text
    stored = admin.get(f"/api/v1/collections/{collection}/workflow").json()
    assert stored["batch_thresholds"]["min_coverage"] == 0.97 and stored["batch_thresholds"]["min_r_squared"] == 0.95
    assert stored["batch_fit"] == FIT and stored["version"] == first.json()["version"] + 1
    assert _put(admin, collection, {"batch_fit": None}, etag).status_code == 412
    history = admin.get(f"/api/v1/audit/history/collection_workflow/{collection}").json()
    assert history[-1]["changes"]["batch_fit"] == {"old": None, "new": FIT}

    # Only the fields sent change: clearing the fit keeps the thresholds.
    cleared = _put(admin, collection, {"batch_fit": None}, saved.headers["ETag"])
    assert cleared.status_code == 200 and cleared.json()["batch_fit"] is None
    assert cleared.json()["batch_thresholds"]["min_coverage"] == 0.97


def test_board_form_saves_batch_settings(signed_in: Clients) -> None:
    admin = signed_in["admin"]
    collection, _ = new_sheets(admin, 1)
    page = admin.get(f"/collections/{collection}/tasks")
    assert page.status_code == 200 and 'name="min_coverage"' in page.text and 'name="batch_fit"' in page.text
    form = {
        "csrf_token": admin.headers["X-CSRF-Token"],
        "version": "0",
        "tolerance": "",
        "min_confidence": "0.7",
        "max_registration_rms_px": "0.8",
        "min_coverage": "0.95",
        "max_gaps": "3",
        "min_gap_fraction": "0.02",
        "min_r_squared": "",
        "batch_fit": '{"family": "fourier", "degree": 1}',
    }
    bad = admin.post(f"/collections/{collection}/workflow", data={**form, "max_gaps": "2.5"})
    assert bad.status_code == 422 and "check the settings" in bad.text
    assert admin.get(f"/api/v1/collections/{collection}/workflow").json()["version"] == 0
    saved = admin.post(f"/collections/{collection}/workflow", data=form, follow_redirects=False)
    assert saved.status_code == 303, saved.text
    stored = admin.get(f"/api/v1/collections/{collection}/workflow").json()
    assert stored["batch_thresholds"] == {
        "min_confidence": 0.7,
        "max_registration_rms_px": 0.8,
        "min_coverage": 0.95,
        "max_gaps": 3,
        "min_gap_fraction": 0.02,
        "min_r_squared": None,
    }
    assert stored["batch_fit"] == {"family": "fourier", "degree": 1}
    assert "fourier" in admin.get(f"/collections/{collection}/tasks").text  # the form shows what is stored
