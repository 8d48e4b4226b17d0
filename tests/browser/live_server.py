"""The real Tracedesk server on a free loopback port, in a thread, on a temporary data folder (SQLite + local files).

Used by the browser tests' session fixture and by bench/bench_workbench.py; nothing here depends on pytest.
"""

from __future__ import annotations

import socket
import threading
import time
import urllib.request
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path

import uvicorn

from tracedesk.accounts.service import create_user
from tracedesk.app import build_state, create_app
from tracedesk.audit.service import SYSTEM
from tracedesk.config import Settings
from tracedesk.db import transaction
from tracedesk.web.state import AppState

PASSWORD = "correct horse battery staple"
USERS = {"tom": "technician", "tess": "technician", "vic": "viewer", "rita": "reviewer", "ada": "admin"}


@dataclass(frozen=True)
class LiveServer:
    base_url: str
    data_dir: Path


def free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as probe:
        probe.bind(("127.0.0.1", 0))
        return int(probe.getsockname()[1])


def _wait_until_up(url: str, server: uvicorn.Server, *, timeout_s: float = 20.0) -> None:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if server.started:
            try:
                with urllib.request.urlopen(f"{url}/api/v1/health", timeout=2) as response:
                    if response.status == 200:
                        return
            except OSError:
                pass
        time.sleep(0.05)
    raise RuntimeError(f"the test server at {url} did not start within {timeout_s} s")


@contextmanager
def running_server(data_dir: Path) -> Iterator[LiveServer]:
    """Start Tracedesk with the accounts in USERS (all with PASSWORD) and stop it afterwards."""
    settings = Settings(
        environment="test",
        data_dir=data_dir,
        database_url=f"sqlite:///{data_dir / 'browser.sqlite3'}",
        secret_key="browser-test-secret-" + "x" * 40,
        argon2_memory_kib=19 * 1024,
        argon2_time_cost=2,
    )
    state = build_state(settings)
    with transaction(state.writer) as session:
        for name, role in USERS.items():
            create_user(
                session,
                state.hasher,
                actor=SYSTEM,
                username=name,
                password=PASSWORD,
                role=role,
                display_name=name.title(),
            )
    try:
        with serving(settings, state) as url:
            yield LiveServer(base_url=url, data_dir=data_dir)
    finally:
        dispatcher = getattr(state, "dispatcher", None)
        if dispatcher is not None:
            dispatcher.shutdown()
        state.engine.dispose()


@contextmanager
def serving(settings: Settings, state: AppState) -> Iterator[str]:
    """Serve the app on a free loopback port in a daemon thread; yields its base URL and stops it afterwards."""
    port = free_port()
    config = uvicorn.Config(create_app(settings, state=state), host="127.0.0.1", port=port, log_level="warning")
    server = uvicorn.Server(config)
    thread = threading.Thread(target=server.run, name="tracedesk-test-server", daemon=True)
    thread.start()
    url = f"http://127.0.0.1:{port}"
    try:
        _wait_until_up(url, server)
        yield url
    finally:
        server.should_exit = True
        thread.join(timeout=10)
