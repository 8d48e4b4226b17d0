"""Backup, restore and the SQLite -> PostgreSQL move: row counts, file hashes and the audit chain survive
(RELIABILITY.md, "Backup and restore"); a damaged backup is refused."""

from __future__ import annotations

import os
import secrets
from collections.abc import Callable, Iterator
from pathlib import Path

import numpy as np
import pytest
from fastapi.testclient import TestClient
from sqlalchemy import create_engine, text
from sqlalchemy.engine import make_url

from tests.archive.scans import png_bytes
from tests.conftest import PASSWORD, POSTGRES_ENV, log_in
from tracedesk.accounts.service import create_user
from tracedesk.app import build_state, create_app
from tracedesk.audit.service import SYSTEM, verify_chain
from tracedesk.config import Settings
from tracedesk.db import transaction
from tracedesk.maintenance.backup import BackupError, backup_archive, restore_archive
from tracedesk.maintenance.inventory import take_inventory
from tracedesk.maintenance.move import move_to_postgres
from tracedesk.migrate import upgrade_database
from tracedesk.web.state import AppState

NewDatabase = Callable[[], str]


@pytest.fixture
def new_database(tmp_path: Path, database_url: str) -> Iterator[NewDatabase]:
    """Makes empty databases of the same kind as ``database_url`` (whole PostgreSQL databases, for pg_dump)."""
    created: list[str] = []

    def make() -> str:
        if database_url.startswith("sqlite"):
            return f"sqlite:///{tmp_path / f'db-{secrets.token_hex(4)}.sqlite3'}"
        name = f"td_{secrets.token_hex(6)}"
        admin = create_engine(os.environ[POSTGRES_ENV], isolation_level="AUTOCOMMIT")
        with admin.connect() as connection:
            connection.execute(text(f"CREATE DATABASE {name}"))
        admin.dispose()
        created.append(name)
        return make_url(os.environ[POSTGRES_ENV]).set(database=name).render_as_string(hide_password=False)

    yield make
    if created:
        admin = create_engine(os.environ[POSTGRES_ENV], isolation_level="AUTOCOMMIT")
        with admin.connect() as connection:
            for name in created:
                connection.execute(text(f"DROP DATABASE IF EXISTS {name} WITH (FORCE)"))
        admin.dispose()


def _state(tmp_path: Path, url: str, name: str, *, migrate: bool) -> AppState:
    settings = Settings(environment="test", data_dir=tmp_path / name, database_url=url)
    state = build_state(settings, migrate=False)
    if migrate:
        upgrade_database(state.engine)
    return state


def _fill(state: AppState) -> None:
    """A small archive: users, a collection, two sheets, a calibration and a trace, all audited."""
    with transaction(state.writer) as session:
        create_user(session, state.hasher, actor=SYSTEM, username="tom", password=PASSWORD, role="technician")
    app = create_app(state.settings, state=state)
    with TestClient(app) as client:
        log_in(client, "tom")
        collection = client.post("/api/v1/collections", json={"name": "Gauge box"}).json()["id"]
        files = [("files", (f"s{i}.png", png_bytes(seed=i), "image/png")) for i in range(2)]
        sheet = client.post(f"/api/v1/collections/{collection}/sheets", files=files).json()["sheets"][0]["id"]
        points = [
            {"pixel": [u, v], "value": [x, y]}
            for u, v, x, y in [(40, 360, 0, 0), (600, 360, 10, 0), (600, 40, 10, 5), (40, 40, 0, 5)]
        ]
        assert (
            client.put(
                f"/api/v1/sheets/{sheet}/calibration",
                json={
                    "kind": "cartesian",
                    "x_axis": {"scale": "linear"},
                    "y_axis": {"scale": "linear"},
                    "control_points": points,
                },
            ).status_code
            == 201
        )
        vertices = np.column_stack([np.linspace(50, 590, 30), np.full(30, 200.0)]).tolist()
        assert (
            client.post(f"/api/v1/sheets/{sheet}/traces", json={"name": "p", "vertices": vertices}).status_code == 201
        )


def test_backup_then_restore_matches_counts_files_and_chain(tmp_path: Path, new_database: NewDatabase) -> None:
    source = _state(tmp_path, new_database(), "source", migrate=True)
    _fill(source)
    with transaction(source.reader) as session:
        before = take_inventory(session, source.store).to_dict()
    manifest = backup_archive(source, tmp_path / "backup")
    assert manifest["inventory"] == before
    assert not (tmp_path / "backup.partial").exists()

    target = _state(tmp_path, new_database(), "target", migrate=False)
    after = restore_archive(target, tmp_path / "backup")
    assert after == before
    assert after["row_counts"]["sheets"] == 2 and after["audit"]["chain_ok"]
    for key in before["originals"]:
        assert target.store.read_verified(key)  # verified against its SHA-256 on read
    with transaction(target.reader) as session:
        assert verify_chain(session).ok
    source.engine.dispose()
    target.engine.dispose()


def test_a_damaged_backup_is_refused(tmp_path: Path, new_database: NewDatabase) -> None:
    source = _state(tmp_path, new_database(), "source", migrate=True)
    _fill(source)
    backup_archive(source, tmp_path / "backup")
    original = next((tmp_path / "backup" / "files" / "originals").iterdir())
    data = bytearray(original.read_bytes())
    data[100] ^= 0xFF
    original.write_bytes(bytes(data))
    target = _state(tmp_path, new_database(), "target", migrate=False)
    with pytest.raises(BackupError, match="damaged"):
        restore_archive(target, tmp_path / "backup")
    with pytest.raises(BackupError, match="exists already"):
        backup_archive(source, tmp_path / "backup")
    source.engine.dispose()
    target.engine.dispose()


def test_restore_refuses_a_database_that_holds_data(tmp_path: Path, new_database: NewDatabase) -> None:
    source = _state(tmp_path, new_database(), "source", migrate=True)
    _fill(source)
    backup_archive(source, tmp_path / "backup")
    with pytest.raises(BackupError, match="not empty"):
        restore_archive(source, tmp_path / "backup")
    source.engine.dispose()


def test_move_from_sqlite_to_postgresql_keeps_ids_and_chain(tmp_path: Path) -> None:
    if not os.environ.get(POSTGRES_ENV):
        if os.environ.get("TRACEDESK_REQUIRE_SERVICES"):
            pytest.fail(f"{POSTGRES_ENV} is required in CI")
        pytest.skip(f"the move needs PostgreSQL: set {POSTGRES_ENV}")
    sqlite = _state(tmp_path, f"sqlite:///{tmp_path / 'embedded.sqlite3'}", "data", migrate=True)
    _fill(sqlite)
    name = f"td_{secrets.token_hex(6)}"
    admin = create_engine(os.environ[POSTGRES_ENV], isolation_level="AUTOCOMMIT")
    with admin.connect() as connection:
        connection.execute(text(f"CREATE DATABASE {name}"))
    target_url = make_url(os.environ[POSTGRES_ENV]).set(database=name).render_as_string(hide_password=False)
    try:
        target = create_engine(target_url)
        counts = move_to_postgres(sqlite.engine, target)
        assert counts["sheets"] == 2 and counts["audit_events"] > 5
        moved = _state(tmp_path, target_url, "data", migrate=False)  # same data folder: files stay in place
        app = create_app(moved.settings, state=moved)
        with TestClient(app) as client:
            log_in(client, "tom")
            sheets = client.get("/api/v1/sheets").json()["items"]
            assert [s["id"] for s in sheets] == [1, 2]
            assert client.get(f"/api/v1/sheets/{sheets[0]['id']}/original").status_code == 200
            created = client.post("/api/v1/collections", json={"name": "After the move"})
            assert created.status_code == 201 and created.json()["id"] == 2  # sequences continue after moved ids
        with transaction(moved.reader) as session:
            assert verify_chain(session).ok
        target.dispose()
        moved.engine.dispose()
    finally:
        with admin.connect() as connection:
            connection.execute(text(f"DROP DATABASE IF EXISTS {name} WITH (FORCE)"))
        admin.dispose()
        sqlite.engine.dispose()
