"""Real Tracedesk servers on loopback ports, forked from one pre-imported launcher (crash_server.py).

Used where the campaign needs a server as deployed, in its own process: killing it with SIGKILL mid-write
(test_crash_recovery.py) and loading it with concurrent technicians (test_bounded_load.py). The servers read
their settings from the environment `server_environment` builds; nothing listens beyond 127.0.0.1.
"""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import httpx

from tracedesk.config import Settings

ROOT = Path(__file__).resolve().parents[2]
READY_TIMEOUT_S = 30.0


def server_environment(settings: Settings) -> dict[str, str]:
    """The environment of a server on `settings`' database and data folder (test environment, one BLAS thread)."""
    return {
        **os.environ,
        "TRACEDESK_DATA_DIR": str(settings.data_dir),
        "TRACEDESK_DATABASE_URL": settings.resolved_database_url,
        "TRACEDESK_ENVIRONMENT": "test",
        "TRACEDESK_SECRET_KEY": settings.secret_key,
        "OPENBLAS_NUM_THREADS": "1",
        "OMP_NUM_THREADS": "1",
    }


def free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return int(probe.getsockname()[1])


def wait_until_ready(base: str) -> None:
    deadline = time.monotonic() + READY_TIMEOUT_S
    while time.monotonic() < deadline:
        try:
            if httpx.get(f"{base}/api/v1/health", timeout=1.0).status_code == 200:
                return
        except httpx.TransportError:
            time.sleep(0.05)
    raise AssertionError(f"the server did not come up within {READY_TIMEOUT_S:g} s")


class Launcher:
    """The forking server launcher (crash_server.py) as a subprocess of the test."""

    def __init__(self, env: dict[str, str]) -> None:
        self.process = subprocess.Popen(
            [sys.executable, "-m", "tests.reliability.crash_server"],
            cwd=ROOT,
            env=env,
            stdin=subprocess.PIPE,
            stdout=subprocess.PIPE,
            text=True,
        )

    def _ask(self, command: str) -> str:
        assert self.process.stdin is not None and self.process.stdout is not None
        self.process.stdin.write(command + "\n")
        self.process.stdin.flush()
        return self.process.stdout.readline().strip()

    def start(self, port: int) -> int:
        """Fork a server listening on 127.0.0.1:`port`; its pid (it may not be ready yet)."""
        answer = self._ask(f"start {port}")
        assert answer.startswith("pid "), answer
        return int(answer.split()[1])

    def reap(self, pid: int) -> None:
        """Wait for a server that was stopped or killed."""
        self._ask(f"wait {pid}")

    def close(self) -> None:
        if self.process.poll() is None:
            assert self.process.stdin is not None
            self.process.stdin.write("quit\n")
            self.process.stdin.close()
            self.process.wait(timeout=10)
        for stream in (self.process.stdin, self.process.stdout):
            if stream is not None and not stream.closed:
                stream.close()


@contextmanager
def running_server(launcher: Launcher) -> Iterator[str]:
    """A server ready on a free loopback port (its base URL), stopped gracefully (SIGTERM) afterwards."""
    port = free_port()
    pid = launcher.start(port)
    try:
        base = f"http://127.0.0.1:{port}"
        wait_until_ready(base)
        yield base
    finally:
        os.kill(pid, signal.SIGTERM)
        launcher.reap(pid)
