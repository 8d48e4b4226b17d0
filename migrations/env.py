"""Alembic environment: runs migrations on a connection given by the caller, or on the configured database."""

from __future__ import annotations

from alembic import context
from sqlalchemy import Connection

from tracedesk.config import Settings
from tracedesk.db import build_engine
from tracedesk.models import Base

target_metadata = Base.metadata


def _run(connection: Connection) -> None:
    context.configure(connection=connection, target_metadata=target_metadata, render_as_batch=True)
    with context.begin_transaction():
        context.run_migrations()


def run_migrations_online() -> None:
    connection = context.config.attributes.get("connection")
    if connection is not None:
        _run(connection)
        return
    engine = build_engine(Settings().resolved_database_url)
    with engine.connect() as new_connection:
        _run(new_connection)
    engine.dispose()


if context.is_offline_mode():
    raise SystemExit("offline migrations are not supported; run `tracedesk migrate`")
run_migrations_online()
