"""The bundle job on the scale-out path: queued on Redis by the web app, run by a separate `tracedesk worker`
process (RQ), then downloaded from the web app and compared with the stored records (SQLite and PostgreSQL)."""

from __future__ import annotations

import io
import json
import zipfile
from pathlib import Path

import pytest
from fastapi.testclient import TestClient

from tests.exports.bundle_checks import check_against_stored, start_bundle
from tests.exports.test_bundle import _collection
from tests.jobs.rq_queue import rq_settings, run_burst_worker
from tests.jobs.test_jobs import redis_url  # noqa: F401  (the fixture: skips, or fails in CI, without Redis)
from tracedesk.config import Settings
from tracedesk.jobs.dispatch import RqDispatcher
from tracedesk.web.state import AppState


@pytest.fixture
def settings(tmp_path: Path, database_url: str, redis_url: str) -> Settings:  # noqa: F811
    """The shared test settings with jobs on an RQ queue of this test's own (parallel tests share the Redis db)."""
    return rq_settings(
        tmp_path,
        database_url,
        redis_url,
        secret_key="test-secret-" + "x" * 40,
        argon2_memory_kib=19 * 1024,
        argon2_time_cost=2,
    )


def test_a_queue_worker_builds_the_bundle_that_the_web_app_then_serves(
    signed_in: dict[str, TestClient], settings: Settings, state: AppState
) -> None:
    assert isinstance(state.dispatcher, RqDispatcher)
    tech = signed_in["technician"]
    collection_id, sheet_ids, traces, _ = _collection(signed_in)
    job_id = start_bundle(tech, collection_id, image_side=300)
    assert tech.get(f"/api/v1/jobs/{job_id}").json()["status"] == "queued"  # nothing runs inside the web app
    assert tech.get(f"/api/v1/bundles/{job_id}/bundle.zip").status_code == 409

    run_burst_worker(settings)
    job = tech.get(f"/api/v1/jobs/{job_id}").json()
    assert job["status"] == "succeeded" and job["attempts"] == 1, job
    response = tech.get(job["result"]["download"])
    assert response.status_code == 200
    archive = zipfile.ZipFile(io.BytesIO(response.content))
    check_against_stored(tech, archive, sheet_ids, int(str(traces[0]["id"])))
    assert json.loads(archive.read("provenance.json"))["job"] == {"id": job_id, "attempt": 1}
    assert state.store.exists(job["result"]["sha256"])
