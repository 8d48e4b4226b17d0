"""Background jobs: progress and results through the API, atomic claims, stale-job recovery, and the RQ path
with a worker killed in the middle of a job (the job is retried, its effect applied exactly once)."""

from __future__ import annotations

import contextlib
import json
import os
import signal
import subprocess
import sys
import time
from datetime import timedelta
from pathlib import Path

import pytest
from fastapi.testclient import TestClient
from sqlalchemy import func, select, update

from tests.digitizing.test_digitizing_api import PEN, _calibrate
from tests.jobs.rq_queue import rq_settings, worker_env
from tests.jobs.waiting import wait_for_job
from tracedesk.audit.service import SYSTEM, verify_chain
from tracedesk.db import transaction
from tracedesk.jobs.execute import recover_stale_jobs, run_job
from tracedesk.jobs.service import submit_job
from tracedesk.models import AuditEvent, Job
from tracedesk.models.base import utcnow
from tracedesk.web.state import AppState

pytest_plugins = ["tests.digitizing.test_digitizing_api"]
REDIS_ENV = "TRACEDESK_TEST_REDIS_URL"


def test_background_auto_trace_reports_progress_and_result(signed_in: dict[str, TestClient], sheet_id: int) -> None:
    tech = signed_in["technician"]
    _calibrate(tech, sheet_id)
    response = tech.post(
        f"/api/v1/sheets/{sheet_id}/traces/auto",
        params={"background": "true"},
        json={"name": "level", "unit": "m", "pen_color": PEN, "region": {"box": [62, 42, 1138, 538]}},
    )
    assert response.status_code == 202, response.text
    assert response.headers["location"] == f"/api/v1/jobs/{response.json()['id']}"
    job = wait_for_job(tech, response.json()["id"])
    assert job["status"] == "succeeded" and job["progress"] == 1.0
    trace_id = job["result"]["trace_id"]  # type: ignore[index]
    assert tech.get(f"/api/v1/traces/{trace_id}").json()["origin"] == "auto"
    assert signed_in["technician2"].get(f"/api/v1/jobs/{job['id']}").status_code == 404  # not theirs


def test_a_failing_job_stores_nothing_and_says_why(signed_in: dict[str, TestClient], sheet_id: int) -> None:
    tech = signed_in["technician"]
    response = tech.post(
        f"/api/v1/sheets/{sheet_id}/traces/auto",
        params={"background": "true"},
        json={"name": "x", "pen_color": "#00ff00", "region": {"box": [62, 42, 1138, 538]}},
    )
    job = wait_for_job(tech, response.json()["id"])
    assert job["status"] == "failed" and "colour" in str(job["error"]).lower()
    assert tech.get(f"/api/v1/sheets/{sheet_id}/traces").json() == []


def test_a_job_runs_once_even_if_dispatched_twice(state: AppState) -> None:
    with transaction(state.writer) as session:
        job = Job(kind="probe", params=json.dumps({"seconds": 0}))
        session.add(job)
    assert run_job(state, job.id) == {"attempt": 1}
    assert run_job(state, job.id) is None
    with transaction(state.reader) as session:
        assert session.scalar(select(func.count()).select_from(AuditEvent).where(AuditEvent.action == "probe")) == 1


def test_stale_running_jobs_are_requeued_then_failed(state: AppState) -> None:
    old = utcnow() - timedelta(minutes=10)
    with transaction(state.writer) as session:
        retry = Job(kind="probe", status="running", attempts=1, max_attempts=3, heartbeat_at=old)
        give_up = Job(kind="probe", status="running", attempts=3, max_attempts=3, heartbeat_at=old)
        fresh = Job(kind="probe", status="running", attempts=1, heartbeat_at=utcnow())
        session.add_all([retry, give_up, fresh])
    assert recover_stale_jobs(state) == [retry.id]
    with transaction(state.reader) as session:
        statuses = {job.id: job.status for job in session.scalars(select(Job))}
    assert statuses == {retry.id: "queued", give_up.id: "failed", fresh.id: "running"}


def _worker(env: dict[str, str], *, burst: bool) -> subprocess.Popen[bytes]:
    command = [sys.executable, "-m", "tracedesk.cli", "worker", *(["--burst"] if burst else [])]
    return subprocess.Popen(command, env=env, start_new_session=True, stdout=subprocess.PIPE, stderr=subprocess.STDOUT)


def _kill_with_children(process: subprocess.Popen[bytes]) -> None:
    """SIGKILL a worker and its work horse (RQ forks one per job, in a session of its own)."""
    children = subprocess.run(["pgrep", "-P", str(process.pid)], capture_output=True, text=True).stdout.split()
    for pid in [process.pid, *map(int, children)]:
        with contextlib.suppress(ProcessLookupError):
            os.kill(pid, signal.SIGKILL)
    process.communicate(timeout=10)


@pytest.fixture
def redis_url() -> str:
    url = os.environ.get(REDIS_ENV)
    if not url:
        if os.environ.get("TRACEDESK_REQUIRE_SERVICES"):
            raise AssertionError(f"{REDIS_ENV} must be set in CI")
        pytest.skip(f"set {REDIS_ENV} to test the Redis queue path")
    return url


def test_rq_worker_killed_mid_job_is_retried_and_applied_once(
    tmp_path: Path, redis_url: str, database_url: str
) -> None:
    from tracedesk.app import build_state
    from tracedesk.migrate import upgrade_database

    settings = rq_settings(tmp_path, database_url, redis_url)
    state = build_state(settings, migrate=False)
    upgrade_database(state.engine)
    env = worker_env(settings)
    job = submit_job(state, "probe", {"seconds": 4}, actor=SYSTEM)
    worker = _worker(env, burst=False)
    try:
        deadline = time.monotonic() + 30
        while time.monotonic() < deadline:
            with transaction(state.reader) as session:
                if session.get(Job, job.id).status == "running":  # type: ignore[union-attr]
                    break
            time.sleep(0.05)
        else:
            raise AssertionError("the worker never started the job")
        time.sleep(0.5)
        _kill_with_children(worker)  # the worker and its work horse die mid-job
    finally:
        if worker.poll() is None:
            _kill_with_children(worker)
    with transaction(state.writer) as session:  # as if its last heartbeat were long ago
        session.execute(update(Job).where(Job.id == job.id).values(heartbeat_at=utcnow() - timedelta(hours=1)))
    second = _worker(env, burst=True)  # re-queues the stale job at start, then runs the queue dry
    output, _ = second.communicate(timeout=60)
    assert second.returncode == 0, output.decode(errors="replace")
    with transaction(state.reader) as session:
        finished = session.get(Job, job.id)
        assert finished is not None and finished.status == "succeeded" and finished.attempts == 2
        probes = session.scalar(select(func.count()).select_from(AuditEvent).where(AuditEvent.action == "probe"))
        assert probes == 1
        assert verify_chain(session).ok
    state.engine.dispose()
