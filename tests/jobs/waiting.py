"""Waiting for a background job through the jobs API, as a client would (a bound, never a timing assertion)."""

from __future__ import annotations

import time
from typing import Any

from fastapi.testclient import TestClient


def wait_for_job(client: TestClient, job_id: int, *, timeout: float = 60.0) -> dict[str, Any]:
    """Poll ``/api/v1/jobs/{job_id}`` until the job succeeded or failed; its last state."""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        job = client.get(f"/api/v1/jobs/{job_id}").json()
        if job["status"] in {"succeeded", "failed"}:
            return dict(job)
        time.sleep(0.05)
    raise AssertionError(f"job {job_id} did not finish within {timeout} s")
