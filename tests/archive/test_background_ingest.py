"""Uploads with ``background=true``: the original is stored at once, decoding and tiling run as a job.

Checked against the synchronous path of the same service (tests/archive/test_upload.py) as the reference: the
same file gives sheets of the same size and the same stored bytes (SHA-256, FIPS 180-4 via hashlib), and a file
refused by the job leaves no row and no derived folder, exactly as a refusal in the request does.
"""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import pytest
from click.testing import CliRunner
from fastapi.testclient import TestClient
from sqlalchemy import func, select, update

from tests.archive.scans import multipage_tiff_bytes, png_bytes
from tests.archive.test_upload import _collection, _counts
from tests.jobs.rq_queue import rq_settings, run_burst_worker
from tests.jobs.test_jobs import redis_url  # noqa: F401 - the fixture is used by name
from tests.jobs.waiting import wait_for_job
from tracedesk.app import build_state
from tracedesk.archive.ingest import ReceivedFile
from tracedesk.archive.ingest_job import pending_ingest_keys, queue_received
from tracedesk.audit.service import SYSTEM
from tracedesk.cli import main
from tracedesk.db import transaction
from tracedesk.migrate import upgrade_database
from tracedesk.models import AuditEvent, Collection, Job, Sheet
from tracedesk.web.state import AppState

TRUNCATED_PNG = png_bytes(seed=7)[:4000]  # a PNG header that promises more than the file holds


def _upload(client: TestClient, collection_id: int, *files: tuple[str, bytes, str]):  # type: ignore[no-untyped-def]
    parts = [("files", (name, data, media)) for name, data, media in files]
    return client.post(f"/api/v1/collections/{collection_id}/sheets", params={"background": "true"}, files=parts)


def _derived_folders(state: AppState) -> list[str]:
    return [entry.name for entry in state.store.iter_derived()]


def test_a_background_upload_answers_202_and_its_job_makes_the_same_sheets(
    signed_in: dict[str, TestClient], state: AppState
) -> None:
    tech = signed_in["technician"]
    collection_id = _collection(tech)
    png, tiff = png_bytes(seed=3, width=900, height=600), multipage_tiff_bytes(3)
    answer = _upload(tech, collection_id, ("a.png", png, "image/png"), ("b.tif", tiff, "image/tiff"))
    assert answer.status_code == 202, answer.text
    queued = answer.json()["queued"]
    assert [item["filename"] for item in queued] == ["a.png", "b.tif"] and answer.json()["refused"] == []
    jobs = [wait_for_job(tech, item["job_id"]) for item in queued]
    assert [job["status"] for job in jobs] == ["succeeded", "succeeded"] and all(j["progress"] == 1.0 for j in jobs)
    png_sheets, tiff_sheets = (job["result"]["sheet_ids"] for job in jobs)  # type: ignore[index]
    assert len(png_sheets) == 1 and len(tiff_sheets) == 3
    sheet = tech.get(f"/api/v1/sheets/{png_sheets[0]}").json()
    assert (sheet["width"], sheet["height"]) == (900, 600)
    original = tech.get(f"/api/v1/sheets/{png_sheets[0]}/original")
    assert hashlib.sha256(original.content).hexdigest() == hashlib.sha256(png).hexdigest()
    assert tech.get(f"/api/v1/sheets/{tiff_sheets[2]}/tiles/sheet.dzi").status_code == 200
    with transaction(state.reader) as session:
        created = session.scalar(select(func.count()).select_from(AuditEvent).where(AuditEvent.entity_type == "sheet"))
        assert created == 4  # one create event per sheet, written with the rows
        assert pending_ingest_keys(session) == set()  # nothing left for the sweep to protect


def test_a_file_the_job_refuses_leaves_no_row_and_no_derived_folder(
    signed_in: dict[str, TestClient], state: AppState
) -> None:
    tech = signed_in["technician"]
    collection_id = _collection(tech)
    answer = _upload(tech, collection_id, ("broken.png", TRUNCATED_PNG, "image/png"))
    assert answer.status_code == 202, answer.text
    job = wait_for_job(tech, answer.json()["queued"][0]["job_id"])
    assert job["status"] == "failed"
    assert "cannot be decoded" in str(job["error"]), job["error"]
    assert "Traceback" not in str(job["error"])  # a reason for the user, not a fault report
    assert _counts(state) == (0, 0)
    assert _derived_folders(state) == []


def test_a_duplicate_is_refused_before_anything_is_queued(signed_in: dict[str, TestClient], state: AppState) -> None:
    tech = signed_in["technician"]
    collection_id = _collection(tech)
    png = png_bytes(seed=11)
    first = _upload(tech, collection_id, ("one.png", png, "image/png"))
    wait_for_job(tech, first.json()["queued"][0]["job_id"])
    again = _upload(tech, collection_id, ("again.png", png, "image/png"))
    assert again.status_code == 409, again.text
    assert "already in the collection" in again.json()["detail"] and again.json()["queued"] == []
    assert _counts(state) == (1, 1)


def test_the_sweep_keeps_an_original_until_its_ingest_job_has_run(
    state: AppState, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    png = png_bytes(seed=13)
    path = tmp_path / "waiting.png"
    path.write_bytes(png)
    key = state.store.put_file(path).key
    params = {"collection_id": 1, "sha256": key, "filename": "waiting.png", "media_type": "image/png", "size": 1}
    with transaction(state.writer) as session:  # queued, as if every worker were busy for days
        job = Job(kind="ingest_file", params=json.dumps(params), created_by_id=None, max_attempts=3)
        session.add(job)
        session.flush()
        job_id = job.id
    monkeypatch.setenv("TRACEDESK_DATA_DIR", str(state.settings.data_dir))
    monkeypatch.setenv("TRACEDESK_DATABASE_URL", state.settings.database_url)
    monkeypatch.setenv("TRACEDESK_ENVIRONMENT", "test")
    swept = CliRunner().invoke(main, ["sweep", "--grace-hours", "0", "--allow-empty"])
    assert swept.exit_code == 0, swept.output
    assert state.store.exists(key)  # the queued job still needs it
    with transaction(state.writer) as session:
        session.execute(update(Job).where(Job.id == job_id).values(status="failed", error="refused"))
    swept = CliRunner().invoke(main, ["sweep", "--grace-hours", "0", "--allow-empty"])
    assert swept.exit_code == 0, swept.output
    assert not state.store.exists(key)  # no row and no pending job: an orphan


def test_an_rq_worker_on_another_process_ingests_from_the_store(
    tmp_path: Path,
    redis_url: str,  # noqa: F811 - pytest fixture
    database_url: str,
) -> None:
    settings = rq_settings(tmp_path, database_url, redis_url)
    state = build_state(settings, migrate=False)
    upgrade_database(state.engine)
    with transaction(state.writer) as session:
        collection = Collection(name="Remote ingest")
        session.add(collection)
        session.flush()
        collection_id = collection.id
    png = png_bytes(seed=5)
    path = tmp_path / "upload.png"
    path.write_bytes(png)
    digest = hashlib.sha256(png).hexdigest()
    queued = queue_received(
        state, collection_id, SYSTEM, ReceivedFile(path, "upload.png", "image/png", digest, len(png))
    )
    run_burst_worker(settings)  # another process: it reads the original back from the store
    with transaction(state.reader) as session:
        sheets = list(session.scalars(select(Sheet).where(Sheet.collection_id == collection_id)))
        job = session.get(Job, queued.job_id)
        assert job is not None and job.status == "succeeded", job and job.error
    assert len(sheets) == 1 and state.store.derived_exists(sheets[0].derived_key)
    state.engine.dispose()
