"""The collection bundle as a background job (SQLite and PostgreSQL): started through the API and the pages,
waited for, downloaded, opened with zipfile and compared with the stored records; who may download it; how long
it is kept; and failures injected while building, storing and recording, which leave no file and say why."""

from __future__ import annotations

import hashlib
import io
import json
import zipfile
from datetime import timedelta
from pathlib import Path
from typing import Any

import pytest
from click.testing import CliRunner
from fastapi.testclient import TestClient
from sqlalchemy import select, update

from tests.exports.bundle_checks import check_against_stored, collection_exports, start_bundle
from tests.exports.test_bundle import _collection
from tests.jobs.waiting import wait_for_job
from tracedesk.cli import main
from tracedesk.db import transaction
from tracedesk.exports import bundle, bundle_jobs
from tracedesk.exports.bundle_jobs import BUNDLE_KEEP, kept_bundle_keys
from tracedesk.models import Job, SourceFile
from tracedesk.models.base import utcnow
from tracedesk.storage import StorageFull
from tracedesk.web.state import AppState

Clients = dict[str, TestClient]


def _stored_keys(state: AppState) -> set[str]:
    return set(state.store.iter_keys())


def _scan_keys(state: AppState) -> set[str]:
    with transaction(state.reader) as session:
        return set(session.scalars(select(SourceFile.sha256)))


def _incoming(state: AppState) -> list[str]:
    folder = state.settings.data_dir / "incoming"
    return sorted(path.name for path in folder.iterdir()) if folder.is_dir() else []


def test_a_bundle_job_reports_progress_stores_the_zip_and_serves_it_to_its_owner(
    signed_in: Clients, state: AppState
) -> None:
    tech, admin = signed_in["technician"], signed_in["admin"]
    collection_id, sheet_ids, traces, _ = _collection(signed_in)
    job_id = start_bundle(tech, collection_id, image_side=400)
    job = wait_for_job(tech, job_id)
    assert job["status"] == "succeeded" and job["progress"] == 1.0, job
    result = job["result"]
    assert result["sheets"] == sheet_ids and result["download"] == f"/api/v1/bundles/{job_id}/bundle.zip"

    response = tech.get(result["download"])
    assert response.status_code == 200 and response.headers["content-type"] == "application/zip"
    content = response.content
    assert hashlib.sha256(content).hexdigest() == result["sha256"] == response.headers["x-content-sha256"]
    assert len(content) == result["bytes"]
    archive = zipfile.ZipFile(io.BytesIO(content))
    check_against_stored(tech, archive, sheet_ids, int(str(traces[0]["id"])))
    provenance = json.loads(archive.read("provenance.json"))
    assert provenance["job"] == {"id": job_id, "attempt": 1} and provenance["generated_by"] == "Tom"
    assert provenance["options"]["max_image_side"] == 400

    # The file is in the store under its SHA-256, kept by the orphan sweep; nothing is left in incoming/.
    assert state.store.exists(result["sha256"]) and _incoming(state) == []
    with transaction(state.reader) as session:
        assert kept_bundle_keys(session) == {result["sha256"]}

    # The job's owner and admins may download it; another technician cannot even tell that it exists.
    assert signed_in["technician2"].get(result["download"]).status_code == 404
    assert admin.get(result["download"]).content == content
    built, downloaded, by_admin = [
        event for event in collection_exports(admin, collection_id) if event["changes"].get("stage")
    ]
    assert built["changes"]["stage"]["new"] == "built" and built["actor_name"] == "Tom"
    assert built["changes"]["sha256"]["new"] == result["sha256"] and built["changes"]["job"]["new"] == job_id
    assert downloaded["changes"]["stage"]["new"] == "downloaded" and downloaded["actor_name"] == "Tom"
    assert by_admin["actor_name"] == "Ada" and by_admin["changes"]["sha256"]["new"] == result["sha256"]


def test_a_selection_bundles_only_its_sheets_and_a_bad_selection_queues_nothing(signed_in: Clients) -> None:
    tech = signed_in["technician"]
    collection_id, sheet_ids, _, _ = _collection(signed_in)
    job = wait_for_job(tech, start_bundle(tech, collection_id, sheet_ids=[sheet_ids[1]], image_side=300))
    archive = zipfile.ZipFile(io.BytesIO(tech.get(job["result"]["download"]).content))
    assert [sheet["id"] for sheet in json.loads(archive.read("provenance.json"))["sheets"]] == [sheet_ids[1]]
    assert not any(name.startswith(f"sheet-{sheet_ids[0]}/") for name in archive.namelist())

    jobs_before = len(tech.get("/api/v1/jobs").json())
    refused = {
        "foreign sheet": tech.post(f"/api/v1/collections/{collection_id}/bundles", json={"sheet_ids": [999_999]}),
        "no collection": tech.post("/api/v1/collections/999999/bundles", json={}),
        "tiny pictures": tech.post(f"/api/v1/collections/{collection_id}/bundles", json={"image_side": 10}),
        "status field": tech.post(f"/api/v1/collections/{collection_id}/bundles", json={"status": "succeeded"}),
    }
    assert {name: answer.status_code for name, answer in refused.items()} == {
        "foreign sheet": 422,
        "no collection": 404,
        "tiny pictures": 422,
        "status field": 422,
    }
    assert "sheet 999999 is not in collection" in refused["foreign sheet"].json()["detail"]
    assert len(tech.get("/api/v1/jobs").json()) == jobs_before


def test_large_selections_are_sent_to_the_job_instead_of_being_built_while_waiting(
    signed_in: Clients, monkeypatch: pytest.MonkeyPatch
) -> None:
    tech = signed_in["technician"]
    collection_id, sheet_ids, _, _ = _collection(signed_in)
    monkeypatch.setattr("tracedesk.exports.api.SYNC_MAX_SHEETS", 2)
    url = f"/api/v1/collections/{collection_id}/bundle.zip"
    whole = tech.get(url, params={"image_side": 300})
    assert whole.status_code == 422
    assert f"POST /api/v1/collections/{collection_id}/bundles" in whole.json()["detail"]
    small = tech.get(url, params={"image_side": 300, "sheet_ids": f"{sheet_ids[0]},{sheet_ids[1]}"})
    assert small.status_code == 200 and zipfile.ZipFile(io.BytesIO(small.content)).testzip() is None


def test_the_pages_start_a_bundle_and_show_its_progress_bar_and_download(signed_in: Clients) -> None:
    tech = signed_in["technician"]
    collection_id, _, _, _ = _collection(signed_in)
    page = tech.get(f"/collections/{collection_id}/bundle")
    assert page.status_code == 200 and f'action="/collections/{collection_id}/bundle"' in page.text
    csrf = tech.headers["X-CSRF-Token"]
    form = {"csrf_token": csrf, "sheet_ids": "", "step": "", "period_hours": "24", "image_side": "300"}
    started = tech.post(f"/collections/{collection_id}/bundle", data=form, follow_redirects=False)
    assert started.status_code == 303
    job_id = int(started.headers["location"].rsplit("/", 1)[1])
    wait_for_job(tech, job_id)
    shown = tech.get(f"/bundles/{job_id}")
    assert shown.status_code == 200
    assert "data-bundle-progress" in shown.text and 'value="1.0"' in shown.text
    assert f'href="/api/v1/bundles/{job_id}/bundle.zip"' in shown.text and "/static/js/export-bundle.js" in shown.text
    assert f"/bundles/{job_id}" in tech.get(f"/collections/{collection_id}/bundle").text  # listed as recent

    bad = tech.post(f"/collections/{collection_id}/bundle", data={**form, "step": "-1"}, follow_redirects=False)
    assert bad.status_code == 422 and "must be positive numbers" in bad.text
    assert signed_in["technician2"].get(f"/bundles/{job_id}").status_code == 404


def test_a_bundle_is_kept_for_two_weeks_then_swept_and_refused_with_410(
    signed_in: Clients, state: AppState, monkeypatch: pytest.MonkeyPatch
) -> None:
    tech = signed_in["technician"]
    collection_id, _, _, _ = _collection(signed_in)
    job = wait_for_job(tech, start_bundle(tech, collection_id, image_side=300))
    key = job["result"]["sha256"]
    monkeypatch.setenv("TRACEDESK_DATA_DIR", str(state.settings.data_dir))
    monkeypatch.setenv("TRACEDESK_DATABASE_URL", state.settings.database_url)
    monkeypatch.setenv("TRACEDESK_ENVIRONMENT", "test")
    swept = CliRunner().invoke(main, ["sweep", "--grace-hours", "0"])
    assert swept.exit_code == 0, swept.output
    assert state.store.exists(key)  # referenced by the job's result: kept
    assert tech.get(job["result"]["download"]).status_code == 200

    with transaction(state.writer) as session:
        old = utcnow() - BUNDLE_KEEP - timedelta(minutes=1)
        session.execute(update(Job).where(Job.id == job["id"]).values(finished_at=old))
    gone = tech.get(job["result"]["download"])
    assert gone.status_code == 410 and "kept for 14 days" in gone.json()["detail"]
    swept = CliRunner().invoke(main, ["sweep", "--grace-hours", "0"])
    assert swept.exit_code == 0, swept.output
    assert not state.store.exists(key) and _stored_keys(state) == _scan_keys(state)


def _fail_on_second_overlay(monkeypatch: pytest.MonkeyPatch, state: AppState) -> None:
    real = bundle.render_sheet_overlay
    calls: list[int] = []

    def render(*args: Any, **kwargs: Any) -> Any:
        calls.append(1)
        if len(calls) == 2:
            raise RuntimeError("injected: the scan of the second sheet could not be read")
        return real(*args, **kwargs)

    monkeypatch.setattr(bundle, "render_sheet_overlay", render)


def _fail_to_store(monkeypatch: pytest.MonkeyPatch, state: AppState) -> None:
    def put_file(source_path: Path, *, expected_sha256: str | None = None) -> Any:
        assert source_path.is_file()  # the finished ZIP exists until the failure
        raise StorageFull("injected: no space left on the storage volume while writing a temporary copy")

    monkeypatch.setattr(state.store, "put_file", put_file)


def _fail_to_record(monkeypatch: pytest.MonkeyPatch, state: AppState) -> None:
    def export_event(*args: Any, **kwargs: Any) -> None:
        assert len(_stored_keys(state)) > len(_scan_keys(state))  # the ZIP is stored when the audit write fails
        raise RuntimeError("injected: the audit trail refused the event")

    monkeypatch.setattr(bundle_jobs, "export_event", export_event)


@pytest.mark.parametrize(
    ("inject", "reason"),
    [
        (_fail_on_second_overlay, "the scan of the second sheet could not be read"),
        (_fail_to_store, "StorageFull: injected: no space left"),
        (_fail_to_record, "the audit trail refused the event"),
    ],
    ids=["while-building", "while-storing", "while-recording"],
)
def test_a_failed_bundle_job_leaves_no_file_and_says_why(
    signed_in: Clients, state: AppState, monkeypatch: pytest.MonkeyPatch, inject: Any, reason: str
) -> None:
    tech, admin = signed_in["technician"], signed_in["admin"]
    collection_id, _, _, _ = _collection(signed_in)
    inject(monkeypatch, state)
    job_id = start_bundle(tech, collection_id, image_side=300)
    job = wait_for_job(tech, job_id)
    assert job["status"] == "failed" and reason in str(job["error"]), job["error"]
    assert job["result"] is None
    assert _incoming(state) == [] and _stored_keys(state) == _scan_keys(state)  # no temporary and no stored ZIP
    assert collection_exports(admin, collection_id) == []
    refused = tech.get(f"/api/v1/bundles/{job_id}/bundle.zip")
    assert refused.status_code == 409 and reason in refused.json()["detail"]
    page = tech.get(f"/bundles/{job_id}").text
    assert "Nothing was stored" in page and reason in page
