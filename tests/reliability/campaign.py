"""The environment every reliability module works in: a migrated database, the app, a cast with API tokens,
and the probes that say whether anything was left behind (rows, stored files, temp files, the audit chain)."""

from __future__ import annotations

import os
import secrets
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from datetime import timedelta
from pathlib import Path

from fastapi import FastAPI
from fastapi.testclient import TestClient
from httpx import Response
from sqlalchemy import create_engine, func, make_url, select, text

from tests.conftest import PASSWORD, POSTGRES_ENV
from tracedesk.accounts.service import create_api_token, create_user
from tracedesk.app import build_state, create_app
from tracedesk.audit.service import SYSTEM, verify_chain
from tracedesk.config import Settings
from tracedesk.db import transaction
from tracedesk.migrate import upgrade_database
from tracedesk.models import AuditChainHead, Base, Sheet, SourceFile
from tracedesk.storage import SweepReport, sweep_orphans
from tracedesk.web.state import AppState

ROLES = {"admin": "admin", "reviewer": "reviewer", "technician": "technician", "technician2": "technician"}
ROLES |= {"viewer": "viewer"}


@dataclass(frozen=True)
class Member:
    role: str
    username: str
    user_id: int
    token: str


@dataclass
class Campaign:
    settings: Settings
    state: AppState
    app: FastAPI
    members: dict[str, Member] = field(default_factory=dict)
    _clients: list[TestClient] = field(default_factory=list)

    def client(self, role: str | None, *, raise_errors: bool = True) -> TestClient:
        """A client that authenticates with the member's API token (None: anonymous); closed with the campaign."""
        client = TestClient(self.app, raise_server_exceptions=raise_errors)
        if role is not None:
            client.headers["Authorization"] = f"Bearer {self.members[role].token}"
        self._clients.append(client)
        return client

    def browser(self, role: str) -> TestClient:
        """A client signed in with a session cookie, sending its CSRF token like the pages do."""
        client = TestClient(self.app)
        response = client.post("/api/v1/session", json={"username": self.members[role].username, "password": PASSWORD})
        assert response.status_code == 200, response.text
        client.headers["X-CSRF-Token"] = response.json()["csrf_token"]
        self._clients.append(client)
        return client

    def close(self) -> None:
        for client in self._clients:
            client.close()
        self.state.engine.dispose()


@contextmanager
def fresh_database_url(kind: str, folder: Path) -> Iterator[str]:
    """An empty database: a SQLite file in ``folder``, or a new PostgreSQL schema dropped afterwards."""
    if kind == "sqlite":
        yield f"sqlite:///{folder / 'campaign.sqlite3'}"
        return
    base = os.environ[POSTGRES_ENV]
    schema = f"r_{secrets.token_hex(6)}"
    admin = create_engine(base, isolation_level="AUTOCOMMIT")
    with admin.connect() as connection:  # fails loudly (never skips) when PostgreSQL is not reachable
        connection.execute(text(f"CREATE SCHEMA {schema}"))
    separator = "&" if "?" in base else "?"
    try:
        yield f"{base}{separator}options=-csearch_path%3D{schema}"
    finally:
        with admin.connect() as connection:
            connection.execute(text(f"DROP SCHEMA {schema} CASCADE"))
        admin.dispose()


@contextmanager
def fresh_database(kind: str, folder: Path) -> Iterator[str]:
    """An empty database of its own: a SQLite file in ``folder``, or a new PostgreSQL database dropped afterwards.

    A whole PostgreSQL database, where a schema would not do: extensions such as amcheck are per database."""
    if kind == "sqlite":
        yield f"sqlite:///{folder / 'campaign.sqlite3'}"
        return
    base = make_url(os.environ[POSTGRES_ENV])
    name = f"tracedesk_r_{secrets.token_hex(6)}"
    admin = create_engine(base, isolation_level="AUTOCOMMIT")
    with admin.connect() as connection:  # fails loudly (never skips) when PostgreSQL is not reachable
        connection.execute(text(f"CREATE DATABASE {name}"))
    try:
        yield base.set(database=name).render_as_string(hide_password=False)
    finally:
        with admin.connect() as connection:
            connection.execute(text(f"DROP DATABASE {name} WITH (FORCE)"))
        admin.dispose()


def campaign_settings(database_url: str, data_dir: Path, **overrides: object) -> Settings:
    values: dict[str, object] = {
        "environment": "test",
        "data_dir": data_dir,
        "database_url": database_url,
        "secret_key": "reliability-secret-" + "x" * 40,
        # A generous address budget: the campaign signs in many times from the one test address.
        "login_max_failures_per_address": 1000,
        # Tighter decoder limits than production (60 s, 2048 MiB) so hostile files reach them sooner; still far
        # above what the campaign's own scans need (a 400 Mpx image on a PDF page renders in about 1 s, 30 MB).
        "decode_timeout_seconds": 10.0,
        "decode_memory_mib": 1024,
    }
    return Settings(**(values | overrides))  # type: ignore[arg-type]


def build_campaign(database_url: str, data_dir: Path, **overrides: object) -> Campaign:
    settings = campaign_settings(database_url, data_dir, **overrides)
    state = build_state(settings, migrate=False)
    upgrade_database(state.engine)
    campaign = Campaign(settings=settings, state=state, app=create_app(settings, state=state))
    with transaction(state.writer) as session:
        for role, kind in ROLES.items():
            username = f"{role}-r"
            user = create_user(
                session,
                state.hasher,
                actor=SYSTEM,
                username=username,
                password=PASSWORD,
                role=kind,
                display_name=f"{role.title()} Campaign",
            )
            raw, _ = create_api_token(session, user, name="campaign", actor=SYSTEM)
            campaign.members[role] = Member(role, username, user.id, raw)
    return campaign


# -- probes -------------------------------------------------------------------------------------------------


def row_counts(state: AppState) -> dict[str, int]:
    """Rows per table (every table of the models)."""
    with state.engine.connect() as connection:
        return {
            table.name: int(connection.scalar(select(func.count()).select_from(table)) or 0)
            for table in Base.metadata.sorted_tables
        }


def audit_head(state: AppState) -> int:
    with transaction(state.reader) as session:
        head = session.get(AuditChainHead, 1)
        return head.last_seq if head else 0


def chain_verifies(state: AppState) -> bool:
    with transaction(state.reader) as session:
        return verify_chain(session).ok


def stored_files(state: AppState) -> set[str]:
    """Every file under the data folder except the SQLite database: store, temp and incoming folders."""
    root = state.settings.data_dir
    return {
        str(path.relative_to(root))
        for path in root.rglob("*")
        if path.is_file() and not path.name.startswith("tracedesk.sqlite3")
    }


def referenced_files(state: AppState) -> tuple[set[str], set[str]]:
    with transaction(state.reader) as session:
        keys = set(session.scalars(select(SourceFile.sha256)))
        derived = set(session.scalars(select(Sheet.derived_key)))
    return keys, derived


def sweep_now(state: AppState) -> SweepReport:
    """The orphan sweep with no grace period (nothing is in flight while a test checks)."""
    keys, derived = referenced_files(state)
    return sweep_orphans(
        state.store, referenced_keys=keys, referenced_derived=derived, grace=timedelta(0), allow_empty_references=True
    )


def missing_files(state: AppState) -> list[str]:
    """Referenced originals or derived folders that are not in the store: data lost."""
    keys, derived = referenced_files(state)
    lost = [key for key in keys if not state.store.exists(key)]
    return lost + [name for name in derived if not state.store.derived_exists(name)]


# -- requests -----------------------------------------------------------------------------------------------


def new_collection(client: TestClient, name: str) -> int:
    response = client.post("/api/v1/collections", json={"name": name})
    assert response.status_code == 201, response.text
    return int(response.json()["id"])


def upload(client: TestClient, collection_id: int, name: str, data: bytes, media: str = "image/png") -> Response:
    return client.post(f"/api/v1/collections/{collection_id}/sheets", files=[("files", (name, data, media))])


def etag_of(client: TestClient, url: str) -> str:
    response = client.get(url)
    assert response.status_code == 200, response.text
    return str(response.headers["etag"])
