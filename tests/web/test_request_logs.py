"""The service's logs: the ASGI entry point that uvicorn workers run writes one JSON line per request to standard
error, with the request id it echoes (a sane X-Request-ID header is kept), the status and the duration."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

SERVE_ONE_REQUEST = """
from starlette.testclient import TestClient
import tracedesk.asgi
answer = TestClient(tracedesk.asgi.app).get("/api/v1/health", headers={"X-Request-ID": "audit-trail-0042"})
assert answer.headers["x-request-id"] == "audit-trail-0042", answer.headers
"""


def test_the_asgi_entry_point_logs_each_request_as_a_json_line(tmp_path: Path) -> None:
    env = {
        **os.environ,
        "TRACEDESK_DATA_DIR": str(tmp_path / "data"),
        "TRACEDESK_DATABASE_URL": f"sqlite:///{tmp_path / 'logs.sqlite3'}",
        "TRACEDESK_ENVIRONMENT": "test",
    }
    run = subprocess.run(
        [sys.executable, "-c", SERVE_ONE_REQUEST], env=env, capture_output=True, text=True, timeout=120
    )
    assert run.returncode == 0, run.stderr
    lines = [json.loads(line) for line in run.stderr.splitlines() if line.startswith("{")]
    requests = [line for line in lines if line.get("logger") == "tracedesk.requests"]
    assert len(requests) == 1, run.stderr
    logged = requests[0]
    assert logged["request_id"] == "audit-trail-0042" and logged["path"] == "/api/v1/health"
    assert logged["status"] == 200 and logged["method"] == "GET" and logged["duration_ms"] >= 0
    assert logged["level"] == "info" and logged["time"].endswith("+00:00")


def test_the_log_level_setting_quietens_request_lines(tmp_path: Path) -> None:
    env = {
        **os.environ,
        "TRACEDESK_DATA_DIR": str(tmp_path / "data"),
        "TRACEDESK_DATABASE_URL": f"sqlite:///{tmp_path / 'logs.sqlite3'}",
        "TRACEDESK_ENVIRONMENT": "test",
        "TRACEDESK_LOG_LEVEL": "WARNING",
    }
    run = subprocess.run(
        [sys.executable, "-c", SERVE_ONE_REQUEST], env=env, capture_output=True, text=True, timeout=120
    )
    assert run.returncode == 0, run.stderr
    assert '"logger": "tracedesk.requests"' not in run.stderr
