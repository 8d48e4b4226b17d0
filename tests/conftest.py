"""Shared fixtures: a migrated database (SQLite, and PostgreSQL when TRACEDESK_TEST_POSTGRES_URL is set),
an app built on it with a temp data folder, and signed-in clients for each role."""

from __future__ import annotations

import os
import secrets
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

import pytest
from fastapi import FastAPI
from fastapi.testclient import TestClient
from sqlalchemy import create_engine, text

from tracedesk.app import build_state, create_app
from tracedesk.config import Settings
from tracedesk.db import transaction
from tracedesk.migrate import upgrade_database
from tracedesk.web.state import AppState

POSTGRES_ENV = "TRACEDESK_TEST_POSTGRES_URL"
PASSWORD = "correct horse battery staple"


def database_kinds() -> list[str]:
    return ["sqlite", "postgresql"] if os.environ.get(POSTGRES_ENV) else ["sqlite"]


@pytest.fixture(params=database_kinds())
def database_url(request: pytest.FixtureRequest, tmp_path: Path) -> Iterator[str]:
    """A fresh, empty database per test: a SQLite file, or a new PostgreSQL schema (dropped afterwards)."""
    if request.param == "sqlite":
        yield f"sqlite:///{tmp_path / 'test.sqlite3'}"
        return
    base = os.environ[POSTGRES_ENV]
    schema = f"t_{secrets.token_hex(6)}"
    admin = create_engine(base, isolation_level="AUTOCOMMIT")
    with admin.connect() as connection:  # fails loudly (never skips) when PostgreSQL is not reachable
        connection.execute(text(f"CREATE SCHEMA {schema}"))
    separator = "&" if "?" in base else "?"
    yield f"{base}{separator}options=-csearch_path%3D{schema}"
    with admin.connect() as connection:
        connection.execute(text(f"DROP SCHEMA {schema} CASCADE"))
    admin.dispose()


@pytest.fixture
def settings(tmp_path: Path, database_url: str) -> Settings:
    return Settings(
        environment="test",
        data_dir=tmp_path / "data",
        database_url=database_url,
        secret_key="test-secret-" + "x" * 40,
        argon2_memory_kib=19 * 1024,
        argon2_time_cost=2,
    )


@pytest.fixture
def state(settings: Settings) -> Iterator[AppState]:
    built = build_state(settings, migrate=False)
    upgrade_database(built.engine)
    yield built
    built.engine.dispose()


@pytest.fixture
def app(settings: Settings, state: AppState) -> FastAPI:
    return create_app(settings, state=state)


@dataclass
class People:
    """One account per role, all with the same test password."""

    admin: str = "ada"
    reviewer: str = "rita"
    technician: str = "tom"
    technician2: str = "tess"
    viewer: str = "vic"


@pytest.fixture
def people(state: AppState) -> People:
    from tracedesk.accounts.service import create_user
    from tracedesk.audit.service import SYSTEM

    cast = People()
    roles = {
        "admin": "admin",
        "reviewer": "reviewer",
        "technician": "technician",
        "technician2": "technician",
        "viewer": "viewer",
    }
    with transaction(state.writer) as session:
        for field, role in roles.items():
            name = getattr(cast, field)
            create_user(
                session,
                state.hasher,
                actor=SYSTEM,
                username=name,
                password=PASSWORD,
                role=role,
                display_name=name.title(),
            )
    return cast


def log_in(client: TestClient, username: str, password: str = PASSWORD) -> TestClient:
    """Sign a test client in through the JSON session endpoint and make it send the CSRF header."""
    response = client.post("/api/v1/session", json={"username": username, "password": password})
    assert response.status_code == 200, response.text
    client.headers["X-CSRF-Token"] = response.json()["csrf_token"]
    return client


@pytest.fixture
def client(app: FastAPI) -> Iterator[TestClient]:
    with TestClient(app) as test_client:
        yield test_client


@pytest.fixture
def signed_in(app: FastAPI, people: People) -> Iterator[dict[str, TestClient]]:
    """A signed-in client per role: clients["admin"], ["reviewer"], ["technician"], ["technician2"], ["viewer"]."""
    clients = {}
    for role in ("admin", "reviewer", "technician", "technician2", "viewer"):
        clients[role] = log_in(TestClient(app), getattr(people, role))
    yield clients
    for test_client in clients.values():
        test_client.close()


def pytest_configure(config: pytest.Config) -> None:
    """CI sets TRACEDESK_REQUIRE_SERVICES: then a missing PostgreSQL URL is an error, never a silent skip."""
    if os.environ.get("TRACEDESK_REQUIRE_SERVICES") and not os.environ.get(POSTGRES_ENV):
        raise pytest.UsageError(f"TRACEDESK_REQUIRE_SERVICES is set but {POSTGRES_ENV} is not")
