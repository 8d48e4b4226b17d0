"""The RQ path in tests: settings with a queue of the test's own, and `tracedesk worker` processes on them."""

from __future__ import annotations

import os
import subprocess
import sys
import uuid
from pathlib import Path
from typing import Any

from tracedesk.config import Settings


def rq_settings(tmp_path: Path, database_url: str, redis_url: str, **extra: Any) -> Settings:
    """Settings whose jobs go to an RQ queue named after the test (parallel test workers share one Redis db)."""
    return Settings(
        environment="test",
        data_dir=tmp_path / "data",
        database_url=database_url,
        job_backend="rq",
        redis_url=redis_url,
        # tmp_path names repeat across xdist workers (each has its own base folder): add a random part.
        rq_queue=f"test-{uuid.uuid4().hex[:12]}-{tmp_path.name}"[:60],
        **extra,
    )


def worker_env(settings: Settings) -> dict[str, str]:
    """The environment of a `tracedesk worker` process serving ``settings``' database, files and queue."""
    return {
        **os.environ,
        "TRACEDESK_DATA_DIR": str(settings.data_dir),
        "TRACEDESK_DATABASE_URL": settings.database_url,
        "TRACEDESK_ENVIRONMENT": "test",
        "TRACEDESK_JOB_BACKEND": "rq",
        "TRACEDESK_REDIS_URL": str(settings.redis_url),
        "TRACEDESK_RQ_QUEUE": settings.rq_queue,
    }


def run_burst_worker(settings: Settings) -> str:
    """Run one worker process until the queue is empty; its output (asserting it exited cleanly)."""
    command = [sys.executable, "-m", "tracedesk.cli", "worker", "--burst"]
    finished = subprocess.run(command, env=worker_env(settings), capture_output=True, text=True, timeout=120)
    assert finished.returncode == 0, finished.stdout + finished.stderr
    return finished.stdout + finished.stderr
